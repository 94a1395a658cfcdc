"""Built-in scenes (demo data, invented): an indoor test lane, an outdoor dusk lane, a spin close-up, the
close lane at half size for coverage runs, and the variants other parts of the project are judged on.

The three lanes are TOML files in ``hopscope/scenes/builtin/`` (read by :func:`load_scene`, so they are
checked like any user's scene file); the variants are built from them in :mod:`hopscope.scenes.variants`.
"""

from __future__ import annotations

import dataclasses
import functools
from collections.abc import Callable

from . import variants
from .spec import SceneSpec
from .specfile import packaged_scene

#: The lanes, as written in ``builtin/*.toml``.
BASE_SCENES = ("lane-close", "lane-long", "lane-spin", "lane-coverage")

_VARIANTS: dict[str, Callable[[], SceneSpec]] = {
    "lane-close-oneboard": variants.lane_close_oneboard,
    "lane-close-threeboards": variants.lane_close_threeboards,
    "lane-close-holder": variants.lane_close_holder,
    **{name: functools.partial(variants.lane_spin_named, name) for name in variants.SPIN_VARIANTS},
}

#: Every built-in scene name: the lanes, then the variants.
BUILTIN_SCENES = BASE_SCENES + tuple(_VARIANTS)


def small_scene(**changes) -> SceneSpec:
    """A small, fast scene for tests: 320×240 px at 2000 fps, a 0.64 m field, 3 lens views, 1 plane view.

    Keyword arguments replace whole parts of the spec (``camera=...``, ``image=...``, ...). With the
    defaults the BB (white, 95 m/s) is in view for ~14 frames after 3 empty frames.
    """
    return dataclasses.replace(packaged_scene("small"), **changes)


def builtin_scene(name: str) -> SceneSpec:
    """The built-in scene ``name`` (one of :data:`BUILTIN_SCENES`)."""
    if name in BASE_SCENES:
        return packaged_scene(name)
    if name in _VARIANTS:
        return _VARIANTS[name]()
    raise ValueError(f"unknown scene {name!r}; choose one of {', '.join(BUILTIN_SCENES)}")
