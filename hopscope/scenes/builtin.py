"""Built-in scenes (demo data, invented): an indoor test lane and an outdoor dusk lane."""

from __future__ import annotations

import dataclasses

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

BUILTIN_SCENES = ("lane-close", "lane-long", "lane-spin")


def _lane_close() -> SceneSpec:
    return SceneSpec(
        name="lane-close",
        description="demo data, invented: indoor test lane, 2000 fps close-up of a 2.5 m field, white BB",
        camera=CameraSpec(
            image_size=(1280, 720),
            focal_px=1000.0,
            principal_offset_px=(4.0, -3.0),
            dist_coeffs=(-0.18, 0.04, 1.0e-3, -8.0e-4, 0.0),
            position_m=(0.55, -0.22, 1.95),
            look_at_m=(0.5, -0.25, 0.0),
            roll_deg=0.6,
            fps=2000.0,
            readout_s=0.0,
            exposure_s=5e-5,
        ),
        board=BoardSpec(cols=11, rows=6, square_m=0.1, margin_m=0.05),
        lens=LensViewsSpec(n_views=12),
        # the board stood at two places along the flight line (taped 0.55 m apart), as a careful user does
        # when one board covers less than half the field: one placement leaves the plane's scale to be
        # extrapolated over most of the 2.5 m field (C_D +2 %, within its σ but needlessly loose)
        plane=PlaneViewsSpec(offsets_m=(0.0, 0.55)),
        lighting=LightingSpec(
            kind="daylight",
            wall_distance_m=1.0,
            wall_level_dn=115.0,
            texture_contrast=0.12,
            gradient=0.15,
            flicker_amplitude=0.01,
        ),
        bb=BBSpec(kind="white", mass_kg=2.5e-4),
        flight=FlightSpec(
            muzzle_m=(-1.0, -0.2, 0.003),
            speed_mps=95.0,
            elevation_deg=0.3,
            azimuth_deg=-0.01,
            drag_coefficient=0.42,
            lift_coefficient=0.02,
            lift_slope=0.1,
            spin_decay_time_s=2.0,
            lead_frames=25,
            tail_frames=5,
        ),
        # released 2 mm above the top edge of the image (the hand stays out of view) and filmed by the same
        # camera in its 500 fps mode, so the 0.3 s fall (0.44 m, ~225 px) stays cheap to render
        drop=DropSpec(release_m=(0.3, 0.467, 0.0), lead_frames=10, n_frames=150, fps=500.0),
    )


def _lane_long() -> SceneSpec:
    # A phone-like camera 27 m from an outdoor lane at dusk; 1080p at 240 fps is ~18 mm per pixel on the
    # plane, so the board is big (1.6 m × 1.0 m squares area, 0.2 m squares ≈ 11 px) and stands at three
    # placements along the flight line.
    return SceneSpec(
        name="lane-long",
        description="demo data, invented: outdoor lane at dusk, 240 fps phone-like camera with rolling "
        "shutter, ~35 m field, tracer BB, three board placements",
        camera=CameraSpec(
            image_size=(1920, 1080),
            focal_px=1507.0,
            principal_offset_px=(-6.0, 5.0),
            dist_coeffs=(-0.12, 0.025, 8.0e-4, -6.0e-4, 0.0),
            position_m=(13.8, 0.2, 27.0),
            look_at_m=(13.5, -0.3, 0.0),
            roll_deg=-0.4,
            fps=240.0,
            readout_s=3.6e-3,
            exposure_s=1.0e-3,
        ),
        board=BoardSpec(cols=7, rows=4, square_m=0.2, margin_m=0.08),
        lens=LensViewsSpec(n_views=12),
        plane=PlaneViewsSpec(offsets_m=(0.0, 12.0, 24.0)),
        lighting=LightingSpec(
            kind="dusk",
            wall_distance_m=6.0,
            wall_level_dn=14.0,
            texture_contrast=0.2,
            gradient=0.06,
            board_illumination_dn=170.0,
        ),
        bb=BBSpec(kind="tracer", mass_kg=2.5e-4, brightness_dn=400.0, halo_dn=220.0, halo_sigma_px=1.3),
        flight=FlightSpec(
            muzzle_m=(-6.0, -0.3, 0.004),
            speed_mps=92.0,
            elevation_deg=1.0,
            azimuth_deg=-0.005,
            drag_coefficient=0.44,
            lift_coefficient=0.022,
            lift_slope=0.1,
            spin_decay_time_s=1.5,
            temperature_k=288.15,
            pressure_pa=99800.0,
            relative_humidity=0.7,
            lead_frames=20,
            tail_frames=5,
        ),
        # dropped from 1.2 m above the flight line in the middle of the field: ~0.5 s of fall, 67 px
        drop=DropSpec(release_m=(13.0, 1.2, 0.0), lead_frames=10, n_frames=130),
        clutter=ClutterSpec(
            distractor=True,
            start_px=(1300.0, 380.0),
            velocity_pxps=(-180.0, 40.0),
            wobble_px=25.0,
            wobble_hz=2.0,
            radius_px=2.5,
            darkness=0.0,
            glow_dn=30.0,
        ),
        image=ImageModelSpec(gain_e_per_dn=2.5, read_noise_dn=2.0),
    )


def _lane_spin() -> SceneSpec:
    # 10,000 fps close-up (0.3 m field) of a half-dark marked BB lit from above: its brightness follows the
    # spin angle (~1000 rev/s here, invented), for the spin-measurement issue.
    return SceneSpec(
        name="lane-spin",
        description="demo data, invented: indoor lane, 10,000 fps close-up of a half-dark marked BB",
        camera=CameraSpec(
            image_size=(640, 360),
            focal_px=800.0,
            principal_offset_px=(2.0, 1.5),
            dist_coeffs=(-0.1, 0.02, 6.0e-4, -5.0e-4, 0.0),
            position_m=(0.066, -0.036, 0.375),
            look_at_m=(0.06, -0.038, 0.0),
            roll_deg=0.3,
            fps=10000.0,
            readout_s=0.0,
            exposure_s=2.0e-5,
        ),
        board=BoardSpec(cols=9, rows=6, square_m=0.015, margin_m=0.008),
        lens=LensViewsSpec(n_views=12),
        plane=PlaneViewsSpec(offsets_m=(0.0,)),
        lighting=LightingSpec(
            kind="daylight",
            wall_distance_m=0.4,
            wall_level_dn=100.0,
            texture_contrast=0.1,
            gradient=0.1,
            flicker_amplitude=0.02,
        ),
        bb=BBSpec(kind="marked", mass_kg=2.8e-4, brightness_dn=240.0, mark_phase_deg=30.0),
        flight=FlightSpec(
            muzzle_m=(-0.25, -0.04, 0.001),
            speed_mps=96.0,
            elevation_deg=0.2,
            azimuth_deg=0.0,
            drag_coefficient=0.42,
            lift_coefficient=0.02,
            lift_slope=0.1,
            spin_decay_time_s=2.0,
            lead_frames=20,
            tail_frames=5,
        ),
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
            image_size=(320, 240),
            focal_px=300.0,
            principal_offset_px=(1.5, -1.0),
            dist_coeffs=(-0.12, 0.02, 1e-3, -8e-4, 0.0),
            position_m=(0.17, -0.1, 0.6),
            look_at_m=(0.15, -0.12, 0.0),
            roll_deg=0.7,
            fps=2000.0,
            readout_s=0.0,
            exposure_s=5e-5,
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
    makers = {"lane-close": _lane_close, "lane-long": _lane_long, "lane-spin": _lane_spin}
    if name not in makers:
        raise ValueError(f"unknown scene {name!r}; choose one of {', '.join(BUILTIN_SCENES)}")
    return makers[name]()
