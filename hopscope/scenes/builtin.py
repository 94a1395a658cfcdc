"""Built-in scenes (demo data, invented): an indoor test lane and an outdoor dusk lane."""

from __future__ import annotations

import dataclasses

from .spec import (
    BBSpec,
    BoardSpec,
    CameraSpec,
    DropSpec,
    FlightSpec,
    LensViewsSpec,
    LightingSpec,
    PlaneViewsSpec,
    SceneSpec,
)

BUILTIN_SCENES = ("lane-close", "lane-long", "lane-spin")


def _lane_close() -> SceneSpec:
    return SceneSpec(
        name="lane-close",
        description="demo data, invented: indoor test lane, 2000 fps close-up of a 2.5 m field, white BB",
        camera=CameraSpec(
            image_size=(1280, 720), focal_px=1000.0, principal_offset_px=(4.0, -3.0),
            dist_coeffs=(-0.18, 0.04, 1.0e-3, -8.0e-4, 0.0),
            position_m=(0.55, -0.22, 1.95), look_at_m=(0.5, -0.25, 0.0), roll_deg=0.6,
            fps=2000.0, readout_s=0.0, exposure_s=5e-5,
        ),
        board=BoardSpec(cols=11, rows=6, square_m=0.1, margin_m=0.05),
        lens=LensViewsSpec(n_views=12),
        plane=PlaneViewsSpec(offsets_m=(0.0,)),
        lighting=LightingSpec(kind="daylight", wall_distance_m=1.0, wall_level_dn=115.0, texture_contrast=0.12,
                              gradient=0.15, flicker_amplitude=0.01),
        bb=BBSpec(kind="white", mass_kg=2.5e-4),
        flight=FlightSpec(muzzle_m=(-1.0, -0.2, 0.003), speed_mps=95.0, elevation_deg=0.3, azimuth_deg=-0.01,
                          drag_coefficient=0.42, lift_coefficient=0.02, lift_slope=0.1, spin_decay_time_s=2.0,
                          lead_frames=25, tail_frames=5),
        drop=DropSpec(release_m=(0.3, 0.47, 0.0), lead_frames=20, n_frames=160),
    )


def small_scene(**changes) -> SceneSpec:
    """A small, fast scene for tests: 320×240 px at 2000 fps, a 0.64 m field, 3 lens views, 1 plane view.

    Keyword arguments replace whole parts of the spec (``camera=...``, ``image=...``, ...). With the
    defaults the BB (white, 95 m/s) is in view for ~14 frames after 3 empty frames.
    """
    spec = SceneSpec(
        name="small",
        description="test scene, invented",
        camera=CameraSpec(
            image_size=(320, 240), focal_px=300.0, principal_offset_px=(1.5, -1.0),
            dist_coeffs=(-0.12, 0.02, 1e-3, -8e-4, 0.0),
            position_m=(0.17, -0.1, 0.6), look_at_m=(0.15, -0.12, 0.0), roll_deg=0.7,
            fps=2000.0, readout_s=0.0, exposure_s=5e-5,
        ),
        board=BoardSpec(cols=7, rows=4, square_m=0.05, margin_m=0.02),
        lens=LensViewsSpec(n_views=3),
        plane=PlaneViewsSpec(offsets_m=(0.0,)),
        lighting=LightingSpec(wall_distance_m=0.5),
        bb=BBSpec(kind="white"),
        flight=FlightSpec(muzzle_m=(-0.3, -0.1, 0.002), lead_frames=3, tail_frames=2),
    )
    return dataclasses.replace(spec, **changes)


def builtin_scene(name: str) -> SceneSpec:
    """The built-in scene ``name`` (one of :data:`BUILTIN_SCENES`)."""
    makers = {"lane-close": _lane_close}
    if name not in makers:
        raise ValueError(f"unknown scene {name!r}; choose one of {', '.join(BUILTIN_SCENES)}")
    return makers[name]()
