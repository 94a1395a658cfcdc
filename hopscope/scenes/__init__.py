"""Synthetic scenes with known truth: the renderer behind ``hopscope demo`` and the end-to-end tests.

Demo data, invented: the built-in scenes are our own scenario (an indoor test lane, an outdoor dusk lane,
a spin close-up, and their variants); no real equipment or measurements.

Public API
----------
``SceneSpec`` (and its parts in :mod:`hopscope.scenes.spec`), ``builtin_scene(name)``, ``BUILTIN_SCENES``
(the lanes in ``builtin/*.toml`` and the variants of :mod:`hopscope.scenes.variants`),
``render_scene(spec, out_dir, *, rng=0, progress=None, parts=ALL_PARTS) -> RenderedScene``,
``load_truth(path) -> SceneTruth`` (typed; ``truth[key]`` reads the file's own layout below),
``load_scene(path)`` (TOML, tables named like the spec's parts) and ``spec_from_dict(data)``,
``prepare_scene(spec, rng=...)`` (camera, flight and frames without files),
``render_board_image(camera, board, R, t, ...)``, ``project_board_corners(camera, board, R, t)``,
``board_corners(board)``, ``SceneCamera``, ``small_scene(**changes)`` (a 320×240 scene for fast tests),
``with_crossing_distractor(spec, polarity=...)``, ``lane_spin_variant(...)``,
``write_playback_timed_copy(clip, out, playback_fps=...)`` (the same frames with slow-motion timestamps).

Modules: ``spec``/``rules``/``specfile`` (what a scene is), ``camera``, ``board``, ``poses``, ``lighting``,
``motion``, ``bbimage``, ``clutter``, ``context``/``clip`` (frames), ``sensor`` (noise, files), ``truth``,
``render`` (the scene as files), ``catalogue``/``variants`` (built-in scenes), ``playback``.

truth.json (schema ``hopscope.truth/1``)
----------------------------------------
All values SI (m, s, kg, K, Pa, rad, rad/s); file names relative to the folder of truth.json; poses map
X_cam = R · X + t (OpenCV camera frame: x right, y down, z forward). World frame: x downrange (along the
board's rows toward image right), y up, z toward the camera; origin at the first plane placement's first
inner corner; flight plane z = 0. Time: seconds since the flight clip's first frame (container timestamps;
frame k at k/fps); row r of frame k is exposed over [k/fps + r·readout/rows, ... + exposure].

::

    schema            "hopscope.truth/1"
    scene, description   name; "demo data, invented: ..."
    spec_digest, seed    cache key (SHA-256 of spec + seed + renderer version); int seed or null
    parts             rendered parts, subset of ["lens", "plane", "drop", "flight"]
    spec              the full SceneSpec as nested dicts
    world_frame       the sentence above
    camera            image_size [w, h]; camera_matrix 3x3; dist_coeffs [k1, k2, p1, p2, k3] (OpenCV order);
                      rotation 3x3 and translation [3] (world -> camera); centre_m [3]; fps; readout_s
                      (0 when the rolling shutter is off); exposure_s; psf_sigma_px
    board             cols, rows (inner corners), square_m, margin_m, width_m, height_m (printed sheet),
                      corner_order (text: see CORNER_ORDER)
    lens_views        [{file, rotation, translation}]  pose of board coordinates (i*s, -j*s, 0) -> camera
    plane_views       [{file, offset_m, rotation, translation}]  the board at world (offset_m, 0, 0) + board
                      coordinates; the first placement (offset 0) has the scene camera's own pose
    drop              null, or {file, fps, n_frames, g_mps2, gravity_direction [0, -1, 0],
                      release {t_s, position_m}, model (text), path {...}, frames [...]} (same layout as
                      the flight's path and frames); with a holder also holder {frames (at rest before
                      the release), x_m [2], y_m [2] (the bar's extent in the plane)}
    flight            {file, n_frames, fps,
                       bb {kind, mass_kg, diameter_m, mark_phase_rad},
                       air {temperature_k, pressure_pa, relative_humidity, density_kgm3, viscosity_pas},
                       gravity_mps2, wind_mps [3],
                       laws {drag: "constant", drag_coefficient, lift: "linear", lift_slope (k),
                             lift_coefficient {launch, first_in_view}, decay: "exponential",
                             spin_decay_time_s},
                       launch {t_s (video clock), position_m, velocity_mps, speed_mps, elevation_deg,
                               spin_radps, spin_axis},
                       first_in_view {t_s, position_m, velocity_mps, speed_mps, spin_radps},
                       path {t_s[], x_m[], y_m[], z_m[], speed_mps[]}  every 0.1 ms over the visible part,
                       frames [{frame, t_s (container), t_mid_s (mid-exposure at the BB's row), u_px, v_px
                                (true projected centre at t_mid_s, distorted pixels), x_m, y_m, z_m, visible
                                (centre inside the image), radius_px (f*r/Z), streak_len_px (centre's
                                travel during the exposure; the streak's full length adds the diameter),
                                spin_radps, spin_angle_rad (integrated spin angle since launch)}]}

Rendering model and its limits are described in :mod:`hopscope.scenes.render`.
"""

from __future__ import annotations

from .board import CORNER_ORDER, board_corners, project_board_corners, render_board_image
from .camera import SceneCamera
from .catalogue import BUILTIN_SCENES, builtin_scene, small_scene
from .playback import PlaybackTimedClip, write_playback_timed_copy
from .render import ALL_PARTS, PreparedScene, RenderedScene, prepare_scene, render_scene
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
from .specfile import load_scene, spec_from_dict
from .truth import TRUTH_SCHEMA, SceneTruth, load_truth
from .variants import lane_spin_variant, with_crossing_distractor

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
    "PlaybackTimedClip",
    "PreparedScene",
    "RenderedScene",
    "SceneCamera",
    "SceneSpec",
    "SceneTruth",
    "board_corners",
    "builtin_scene",
    "load_scene",
    "load_truth",
    "prepare_scene",
    "project_board_corners",
    "render_board_image",
    "render_scene",
    "lane_spin_variant",
    "small_scene",
    "spec_from_dict",
    "with_crossing_distractor",
    "write_playback_timed_copy",
]
