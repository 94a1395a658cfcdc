"""Synthetic scenes with known truth: the renderer behind ``hopscope demo`` and the end-to-end tests.

Demo data, invented: the built-in scenes are our own scenario (an indoor test lane and an outdoor dusk
lane); no real equipment or measurements.

Public API
----------
``SceneSpec`` (and its parts in :mod:`hopscope.scenes.spec`), ``builtin_scene(name)``, ``BUILTIN_SCENES``,
``render_scene(spec, out_dir, *, rng=0, progress=None, parts=ALL_PARTS) -> RenderedScene``,
``load_truth(path)``, ``prepare_scene(spec, rng=...)`` (camera, flight and frames without files),
``render_board_image(camera, board, R, t, ...)``, ``project_board_corners(camera, board, R, t)``,
``board_corners(board)``, ``SceneCamera``.

truth.json (schema ``hopscope.truth/1``)
----------------------------------------
See :data:`TRUTH_LAYOUT` below (also printed in the module docs). All values SI (m, s, kg, K, Pa, rad/s);
file names relative to the folder of truth.json.
"""

from __future__ import annotations

from .builtin import BUILTIN_SCENES, builtin_scene, small_scene
from .camera import SceneCamera
from .render import (
    ALL_PARTS,
    CORNER_ORDER,
    TRUTH_SCHEMA,
    PreparedScene,
    RenderedScene,
    board_corners,
    load_truth,
    prepare_scene,
    project_board_corners,
    render_board_image,
    render_scene,
)
from .spec import (
    BBSpec,
    BoardSpec,
    CameraSpec,
    ClutterSpec,
    DropSpec,
    FlightSpec,
    ImageModelSpec,
    LensViewsSpec,
    LightingSpec,
    PlaneViewsSpec,
    SceneSpec,
)

__all__ = [
    "ALL_PARTS",
    "BUILTIN_SCENES",
    "CORNER_ORDER",
    "TRUTH_SCHEMA",
    "BBSpec",
    "BoardSpec",
    "CameraSpec",
    "ClutterSpec",
    "DropSpec",
    "FlightSpec",
    "ImageModelSpec",
    "LensViewsSpec",
    "LightingSpec",
    "PlaneViewsSpec",
    "PreparedScene",
    "RenderedScene",
    "SceneCamera",
    "SceneSpec",
    "board_corners",
    "builtin_scene",
    "load_truth",
    "prepare_scene",
    "project_board_corners",
    "render_board_image",
    "render_scene",
    "small_scene",
]
