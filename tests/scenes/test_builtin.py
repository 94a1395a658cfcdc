"""Built-in scenes and scene-spec validation."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest

from hopscope.scenes import (
    BUILTIN_SCENES,
    BoardSpec,
    CameraSpec,
    ClutterSpec,
    ImageModelSpec,
    SceneCamera,
    builtin_scene,
    prepare_scene,
    render_scene,
    small_scene,
)
from hopscope.scenes.board import board_outline

#: Frames of empty background a tracker's background model needs before the BB appears.
MIN_LEAD_FRAMES = 15
#: Distractor centre vs its programmed path (the lens blur is symmetric), px.
DISTRACTOR_TOL_PX = 0.15


@pytest.mark.parametrize(
    "name", [pytest.param(n, marks=pytest.mark.slow) if n == "lane-long" else n for n in BUILTIN_SCENES]
)
def test_builtin_scene_is_labelled_demo_data_and_flies_across_the_view(name):
    spec = builtin_scene(name)
    assert spec.name == name
    assert "demo data, invented" in spec.description
    scene = prepare_scene(spec, rng=0)
    frames = scene.true_flight_frames()
    visible = [f["frame"] for f in frames if f["visible"]]
    assert visible, "the BB must cross the image"
    assert visible[0] >= MIN_LEAD_FRAMES
    assert frames[-1]["frame"] > visible[-1]  # a few empty frames after it leaves
    # the muzzle is outside the frame (or at its edge): the BB enters from the left edge
    assert frames[visible[0]]["u_px"] < 0.05 * spec.camera.image_size[0]
    # every plane placement lies wholly inside the image
    cam = scene.camera
    for off in spec.plane.offsets_m:
        uv = cam.project(board_outline(spec.board) + np.array([off, 0.0, 0.0]))
        w, h = spec.camera.image_size
        assert uv[:, 0].min() > 0 and uv[:, 0].max() < w - 1 and uv[:, 1].min() > 0 and uv[:, 1].max() < h - 1


def test_lane_close_has_the_size_the_demo_budget_allows():
    spec = builtin_scene("lane-close")
    scene = prepare_scene(spec, rng=0)
    n_vis = sum(f["visible"] for f in scene.true_flight_frames())
    assert 60 <= scene.plan.n_frames <= 100
    assert 40 <= n_vis <= 70
    assert spec.lens.n_views == 12 and len(spec.plane.offsets_m) == 2
    # lift is a sizeable fraction of weight at launch: ½ρA C_L u² / (m g)
    air = scene.plan.model.air
    bb = scene.plan.model.bb
    lift = 0.5 * air.density_kgm3 * bb.area_m2 * spec.flight.lift_coefficient * spec.flight.speed_mps**2
    assert 0.5 < lift / (bb.mass_kg * scene.plan.model.gravity_mps2) < 2.0


def test_lane_long_has_three_placements_and_a_rolling_shutter():
    spec = builtin_scene("lane-long")
    assert spec.plane.offsets_m == (0.0, 12.0, 24.0)
    assert 3e-3 <= spec.camera.readout_s <= 4e-3
    assert spec.bb.kind == "tracer" and spec.lighting.kind == "dusk"
    cam = SceneCamera.from_spec(spec.camera)
    from hopscope.scenes.motion import field_x_span

    x0, x1 = field_x_span(cam)
    assert 30.0 < x1 - x0 < 40.0


def test_lane_spin_is_a_fast_close_up_of_a_marked_bb():
    spec = builtin_scene("lane-spin")
    assert spec.bb.kind == "marked" and spec.camera.fps >= 10000
    scene = prepare_scene(spec, rng=0)
    spin_hz = scene.plan.launch.spin_radps[0] / (2 * np.pi)
    assert spin_hz < 0.5 * spec.camera.fps  # the flicker is sampled above Nyquist


def test_unknown_scene_names_the_choices():
    with pytest.raises(
        ValueError,
        match=r"unknown scene .lane-x.; choose one of lane-close, lane-long, lane-spin, lane-coverage, lane-close-oneboard",
    ):
        builtin_scene("lane-x")


def test_board_with_symmetric_pattern_is_rejected():
    with pytest.raises(ValueError, match=r"board cols \+ rows must be odd"):
        BoardSpec(cols=8, rows=6)


def test_exposure_longer_than_the_frame_period_is_rejected():
    with pytest.raises(ValueError, match=r"exposure_s .* must each be at most the frame period"):
        CameraSpec(fps=1000.0, exposure_s=2e-3)


def test_unknown_part_is_rejected(tmp_path):
    with pytest.raises(ValueError, match=r"parts: unknown part\(s\) \['video'\]"):
        render_scene(small_scene(), tmp_path, parts=("video",))


def test_noise_has_the_documented_variance():
    # shot noise σ² = DN/gain plus read noise², by construction; checked on a flat frame of the wall
    image = ImageModelSpec(noise=True, gain_e_per_dn=4.0, read_noise_dn=2.0, motion_blur=False)
    spec = small_scene(
        image=image,
        lighting=dataclasses.replace(small_scene().lighting, texture_contrast=0.0, gradient=0.0),
        camera=dataclasses.replace(small_scene().camera, psf_sigma_px=0.0),
    )
    scene = prepare_scene(spec, rng=0)
    rng = np.random.default_rng(1)
    a = scene.flight_frame(0, rng=rng, bb=False).astype(float)
    b = scene.flight_frame(0, rng=rng, bb=False).astype(float)
    level = spec.lighting.wall_level_dn
    expected = np.sqrt(level / 4.0 + 2.0**2)
    # the difference of two frames has variance 2σ² (+ quantisation 1/12 per frame)
    measured = np.std(a - b) / np.sqrt(2.0)
    assert measured == pytest.approx(np.sqrt(expected**2 + 1 / 12), rel=0.03)


def test_distractor_moves_and_flicker_modulates_the_background():
    base = small_scene()
    spec = dataclasses.replace(
        base,
        image=ImageModelSpec(noise=False, motion_blur=False),
        lighting=dataclasses.replace(base.lighting, flicker_amplitude=0.05),
        clutter=ClutterSpec(
            distractor=True, start_px=(100.0, 80.0), velocity_pxps=(2000.0, 0.0), wobble_px=0.0
        ),
    )
    scene = prepare_scene(spec, rng=0)
    f0 = scene.flight_frame(0, quantise=False, bb=False)
    f5 = scene.flight_frame(5, quantise=False, bb=False)
    plain0 = scene.flight_frame(0, quantise=False, bb=False, with_clutter=False)
    plain5 = scene.flight_frame(5, quantise=False, bb=False, with_clutter=False)

    def centre(img, plain):
        shade = np.clip(1.0 - img / plain, 0.0, None)
        rr, cc = np.mgrid[: img.shape[0], : img.shape[1]]
        return (shade * cc).sum() / shade.sum(), (shade * rr).sum() / shade.sum()

    u0, v0 = centre(f0, plain0)
    u5, v5 = centre(f5, plain5)
    assert (u0, v0) == pytest.approx((100.0, 80.0), abs=DISTRACTOR_TOL_PX)
    assert (u5, v5) == pytest.approx((100.0 + 2000.0 * 5 / spec.camera.fps, 80.0), abs=DISTRACTOR_TOL_PX)
    # mains flicker: the mean level follows 1 + A sin(2π f t + φ)
    ratio = plain5.mean() / plain0.mean()
    from hopscope.scenes.lighting import FLICKER_PHASE_RAD

    def gain(t):
        return 1 + 0.05 * np.sin(2 * np.pi * spec.lighting.flicker_hz * t + FLICKER_PHASE_RAD)

    t_mid = spec.camera.exposure_s / 2
    assert ratio == pytest.approx(gain(5 / spec.camera.fps + t_mid) / gain(t_mid), rel=1e-3)


def test_scene_round_trips_through_a_dict_and_toml(tmp_path):
    from hopscope.scenes import load_scene, spec_from_dict

    for name in BUILTIN_SCENES:
        spec = builtin_scene(name)
        assert spec_from_dict(spec.to_dict()) == spec
    toml = tmp_path / "my.toml"
    toml.write_text(
        'name = "my-lane"\n[camera]\nfps = 1000.0\nexposure_s = 1e-4\n[board]\ncols = 9\nrows = 6\n'
        '[bb]\nkind = "tracer"\n',
        encoding="utf-8",
    )
    spec = load_scene(toml)
    assert spec.name == "my-lane" and spec.camera.fps == 1000.0 and spec.board.cols == 9
    assert spec.bb.kind == "tracer" and spec.drop is None


def test_toml_scene_with_unknown_field_names_file_and_part(tmp_path):
    from hopscope.scenes import load_scene

    toml = tmp_path / "bad.toml"
    toml.write_text("[camera]\nframe_rate = 100\n", encoding="utf-8")
    with pytest.raises(ValueError, match=r"bad\.toml \[camera\]: unknown field\(s\) frame_rate"):
        load_scene(toml)


def test_drop_frame_rate_must_allow_the_exposure():
    from hopscope.scenes import DropSpec

    with pytest.raises(ValueError, match=r"drop fps 50000: the camera's exposure_s and readout_s"):
        small_scene(drop=DropSpec(fps=50000.0))
