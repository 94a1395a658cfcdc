"""The tracker on rendered scenes (hopscope.scenes): truth from the renderer's own projection.

The renderer draws a BB (shot and read noise, lens blur, motion blur, rolling shutter) through OpenCV's
camera model and writes lossy mp4v clips; truth.json gives each frame's true projected centre and
mid-exposure time. The rig is built from the scene's true camera, so what is measured here is the tracker.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pytest

from hopscope.calibration.rig import Rig
from hopscope.scenes import ClutterSpec, render_scene, small_scene
from hopscope.tracker.pipeline import TrackOptions, track_video

#: Position RMS against truth, white BB, short exposure (issue 5 target).
POSITION_RMS_TOL_PX = 0.1
#: Mean along-track error of streak centres (issue 5 target).
STREAK_BIAS_TOL_PX = 0.05
#: Reported σ within this factor of the real scatter (issue 5 target).
SIGMA_FACTOR = 1.5
#: Mid-exposure time of the BB's row against truth (the fitted row differs from the true one by < 1 px).
TIME_TOL_S = 2e-6
#: Finite-difference speed at the start of the shot vs the true speed at the first visible frame.
SPEED_REL_TOL = 0.02
#: A shot point further than this from the BB belongs to something else.
BB_ONLY_TOL_PX = 0.5
SEEDS = (1, 2, 3)
#: Largest single error of a marked BB's centre (frames where the bright half faces the dim side), px.
MARKED_MAX_ERR_PX = 0.3
#: The marked BB's own light swings by at least this factor as the mark turns (its dark half is a tenth as
#: bright as the bright one in lane-spin, seen from the side the light comes from).
MARKED_MIN_SWING = 1.5
#: Spin rate from the track's brightness column (issue 14 target: within 1 % where unaliased).
SPIN_RATE_REL_TOL = 0.01
#: A BB point with a distractor in the clip against the same point without it, in units of its σ (where
#: the blob passes near the BB's fit window the window's content changes a little).
SAME_POINT_SIGMAS = 3.0


def _rig(truth) -> Rig:
    cam = truth["camera"]
    vis = [f for f in truth["flight"]["frames"] if f["visible"]]
    return Rig(
        image_size=tuple(cam["image_size"]),
        camera_matrix=np.array(cam["camera_matrix"]),
        dist_coeffs=np.array(cam["dist_coeffs"]),
        rotation=np.array(cam["rotation"]),
        translation=np.array(cam["translation"]),
        plane_z_m=float(np.mean([f["z_m"] for f in vis])),
        reprojection_rms_px=0.0,
    )


def _track(spec, seed, tmp_path_factory):
    out = tmp_path_factory.mktemp(f"scene{seed}")
    scene = render_scene(spec, out, rng=seed, parts=("flight",))
    cam = scene.truth["camera"]
    opt = TrackOptions(exposure_s=cam["exposure_s"], readout_s=cam["readout_s"])
    res = track_video(str(scene.flight_clip_path), _rig(scene.truth), opt)
    assert res.ok, res.reason
    return res, scene.truth


def _compare(res, truth):
    """Per point: (du, dv, along-track error, sigma_px, dt, dx_m, dy_m, sigma_m); and the visible count."""
    frames = {f["frame"]: f for f in truth["flight"]["frames"]}
    tr = res.track
    rows = []
    for i in range(tr.n_points):
        f = frames[int(tr.frame[i])]
        g = frames.get(int(tr.frame[i]) + 1) or frames[int(tr.frame[i]) - 1]
        d = np.array([g["u_px"] - f["u_px"], g["v_px"] - f["v_px"]])
        d /= np.linalg.norm(d)
        e = np.array([tr.u_px[i] - f["u_px"], tr.v_px[i] - f["v_px"]])
        rows.append(
            (
                *e,
                float(e @ d),
                tr.sigma_px[i],
                tr.t_s[i] - f["t_mid_s"],
                tr.x_m[i] - f["x_m"],
                tr.y_m[i] - f["y_m"],
                tr.sigma_m[i],
            )
        )
    n_vis = sum(1 for f in truth["flight"]["frames"] if f["visible"])
    return np.array(rows), n_vis


def _sigma_ratio(rows):
    rms = float(np.sqrt(np.mean(rows[:, :2] ** 2)))
    return float(np.sqrt(np.mean(rows[:, 3] ** 2))) / rms


@pytest.mark.slow
def test_white_bb_short_exposure(tmp_path_factory):
    spec = small_scene()
    allrows = []
    for seed in SEEDS:
        res, truth = _track(spec, seed, tmp_path_factory)
        rows, n_vis = _compare(res, truth)
        assert res.track.n_points >= n_vis - 1
        assert res.track.shot_ids == (0,)
        np.testing.assert_allclose(rows[:, 4], 0.0, atol=TIME_TOL_S)
        v_true = truth["flight"]["first_in_view"]["speed_mps"]
        assert res.summary.shot_speeds_mps[0] == pytest.approx(v_true, rel=SPEED_REL_TOL)
        allrows.append(rows)
    rows = np.vstack(allrows)
    assert float(np.sqrt(np.mean(rows[:, :2] ** 2))) <= POSITION_RMS_TOL_PX
    ratio = _sigma_ratio(rows)
    assert 1 / SIGMA_FACTOR <= ratio <= SIGMA_FACTOR, f"sigma/scatter {ratio:.2f}"
    # metres: the error on the plane is the pixel error mapped, so its spread matches sigma_m too
    rms_m = float(np.sqrt(np.mean(rows[:, 5:7] ** 2)))
    ratio_m = float(np.sqrt(np.mean(rows[:, 7] ** 2))) / rms_m
    assert 1 / SIGMA_FACTOR <= ratio_m <= SIGMA_FACTOR, f"sigma_m/scatter {ratio_m:.2f}"


@pytest.mark.slow
def test_streaks_centre_at_mid_exposure(tmp_path_factory):
    base = small_scene()
    spec = small_scene(camera=dataclasses.replace(base.camera, exposure_s=2e-4))  # ~9 px streaks
    allrows = []
    for seed in SEEDS:
        res, truth = _track(spec, seed, tmp_path_factory)
        rows, n_vis = _compare(res, truth)
        assert res.track.n_points >= n_vis - 2
        assert np.median(res.track.streak_len_px) > 5
        allrows.append(rows)
    rows = np.vstack(allrows)
    along = rows[:, 2]
    assert abs(float(np.mean(along))) <= STREAK_BIAS_TOL_PX, (
        f"along-track bias {np.mean(along):.3f} ± {np.std(along) / math.sqrt(along.size):.3f} px"
    )
    ratio = _sigma_ratio(rows)
    assert 1 / SIGMA_FACTOR <= ratio <= SIGMA_FACTOR, f"sigma/scatter {ratio:.2f}"


def test_rolling_shutter_times(tmp_path_factory):
    base = small_scene()
    spec = small_scene(camera=dataclasses.replace(base.camera, readout_s=3e-4, exposure_s=1e-4))
    res, truth = _track(spec, 1, tmp_path_factory)
    rows, _ = _compare(res, truth)
    # truth: row v starts exposing at t_k + (v/rows)·readout; mid-exposure half an exposure later
    np.testing.assert_allclose(rows[:, 4], 0.0, atol=TIME_TOL_S)
    assert res.track.meta.readout_s == pytest.approx(3e-4)


def test_distractor_crossing_keeps_only_bb(tmp_path_factory):
    # A glowing moth wobbling down across the BB's path (bright, like the BB).
    base = small_scene()
    clutter = ClutterSpec(
        distractor=True,
        start_px=(150.0, 70.0),
        velocity_pxps=(-1500.0, 2500.0),
        wobble_px=3.0,
        wobble_hz=200.0,
        radius_px=2.0,
        darkness=0.0,
        glow_dn=60.0,
    )
    spec = small_scene(clutter=clutter, flight=dataclasses.replace(base.flight, tail_frames=12))
    res, truth = _track(spec, 1, tmp_path_factory)
    rows, n_vis = _compare(res, truth)
    assert res.track.shot_ids == (0,)
    assert np.max(np.hypot(rows[:, 0], rows[:, 1])) < BB_ONLY_TOL_PX
    assert res.track.n_points >= n_vis - 1
    assert any("wiggles" in r for r in res.summary.rejected_tracks)


@pytest.mark.slow
@pytest.mark.parametrize("name", ["lane-close", "lane-long"])
def test_builtin_scenes(tmp_path_factory, name):
    # lane-close: white BB, 2000 fps, 50 µs exposure; lane-long: 1080p 240 fps phone-like camera, rolling
    # shutter, 1 ms exposure, tracer at dusk, a glowing moth crossing (demo data, invented).
    from hopscope.scenes import builtin_scene

    res, truth = _track(builtin_scene(name), 1, tmp_path_factory)
    rows, n_vis = _compare(res, truth)
    assert res.track.shot_ids == (0,)
    assert res.track.n_points >= n_vis - 1
    assert np.max(np.hypot(rows[:, 0], rows[:, 1])) < BB_ONLY_TOL_PX
    assert float(np.sqrt(np.mean(rows[:, :2] ** 2))) <= POSITION_RMS_TOL_PX
    ratio = _sigma_ratio(rows)
    assert 1 / SIGMA_FACTOR <= ratio <= SIGMA_FACTOR, f"sigma/scatter {ratio:.2f}"
    np.testing.assert_allclose(rows[:, 4], 0.0, atol=TIME_TOL_S)
    v_true = truth["flight"]["first_in_view"]["speed_mps"]
    assert res.summary.shot_speeds_mps[0] == pytest.approx(v_true, rel=SPEED_REL_TOL)
    assert not any("playback timing" in w for w in res.warnings)


def _crossing_distractor(truth, *, dark: bool) -> ClutterSpec:
    """A smooth blob twice the BB's image size crossing its path at a tenth of its image speed.

    It moves down the image and crosses the BB's path 10 frames after the BB passed that point (the BB
    and the blob never overlap), drifting steadily (no wobble: the wiggle test cannot refuse it).
    """
    vis = [f for f in truth["flight"]["frames"] if f["visible"]]
    mid = vis[len(vis) // 2]
    a, b = vis[len(vis) // 2 - 1], vis[len(vis) // 2 + 1]
    bb_speed = math.hypot(b["u_px"] - a["u_px"], b["v_px"] - a["v_px"]) / (b["t_s"] - a["t_s"])
    v_blob = 0.1 * bb_speed
    t_cross = mid["t_s"] + 10 / truth["camera"]["fps"]
    return ClutterSpec(
        distractor=True,
        start_px=(mid["u_px"], mid["v_px"] - v_blob * t_cross),
        velocity_pxps=(0.0, v_blob),
        wobble_px=0.0,
        radius_px=2.0 * mid["radius_px"],
        darkness=0.7 if dark else 0.0,
        glow_dn=0.0 if dark else 90.0,
    )


@pytest.mark.slow
@pytest.mark.parametrize("dark", [True, False], ids=["dark", "bright"])
def test_slow_big_distractor_crossing_is_not_the_bb(tmp_path_factory, dark):
    # lane-close with a blob twice the BB's size crossing its path at a tenth of its speed: the track holds
    # the BB's points, the same ones as without the blob (so the fit is the one without it)
    from hopscope.scenes import builtin_scene

    spec = builtin_scene("lane-close")
    plain, truth = _track(spec, 1, tmp_path_factory)
    clutter = _crossing_distractor(truth, dark=dark)
    res, truth2 = _track(dataclasses.replace(spec, clutter=clutter), 1, tmp_path_factory)
    rows, n_vis = _compare(res, truth2)
    assert res.summary.polarity == "bright"
    assert res.track.shot_ids == (0,)
    assert np.max(np.hypot(rows[:, 0], rows[:, 1])) < BB_ONLY_TOL_PX
    assert res.track.n_points >= n_vis - 1
    np.testing.assert_array_equal(res.track.frame, plain.track.frame)
    shift = np.hypot(res.track.u_px - plain.track.u_px, res.track.v_px - plain.track.v_px)
    assert np.all(shift <= SAME_POINT_SIGMAS * plain.track.sigma_px)
    assert float(np.sqrt(np.mean(rows[:, :2] ** 2))) <= POSITION_RMS_TOL_PX
    assert res.summary.rejected_track_count >= 1
    assert any("outside the BB speed band" in r for r in res.summary.rejected_tracks)


def _playback_copy(src, dst, capture_hz: float, playback_hz: float):
    """The clip re-stored with playback timing: every packet's timestamps stretched by capture/playback
    (packet copy, no re-encoding), as a phone's slow-motion file stores them."""
    import av

    k = capture_hz / playback_hz
    with av.open(str(src)) as c:
        ins = c.streams.video[0]
        with av.open(str(dst), "w") as out:
            ost = out.add_stream_from_template(ins)
            for p in c.demux(ins):
                if p.dts is None:
                    continue
                q = av.Packet(bytes(p))
                q.pts, q.dts = round(p.pts * k), round(p.dts * k)
                q.duration = round((p.duration or 0) * k)
                q.time_base, q.is_keyframe, q.stream = ins.time_base, p.is_keyframe, ost
                out.mux(q)
    return dst


#: Playback rate of the re-stored copies, Hz (phone slow motion plays back at 30 fps).
PLAYBACK_HZ = 30.0


@pytest.mark.slow
@pytest.mark.parametrize("name", ["lane-close", "lane-long", "lane-spin"])
def test_playback_timed_copy_warns_with_the_capture_rate(tmp_path_factory, name):
    from hopscope.scenes import builtin_scene

    spec = builtin_scene(name)
    out = tmp_path_factory.mktemp(f"pb-{name}")
    scene = render_scene(spec, out, rng=1, parts=("flight",))
    copy = _playback_copy(scene.flight_clip_path, out / "playback.mp4", spec.camera.fps, PLAYBACK_HZ)
    res = track_video(str(copy), _rig(scene.truth))
    assert res.ok, res.reason
    rate = f"about {spec.camera.fps:.6g} fps"
    assert any("playback timing" in w and rate in w for w in res.warnings), res.warnings
    assert any(rate in w for w in res.track.meta.warnings)
    # (the clips with their true timing give no such warning: test_builtin_scenes, test_marked_bb_...)


@pytest.mark.slow
def test_marked_bb_is_one_shot_centred_on_the_ball(tmp_path_factory):
    # lane-spin: a half-dark BB spinning ~1000 rev/s at 10,000 fps; its bright and dark halves are fitted as
    # one ball (outline), so the track is one shot with every visible frame, at the ball's centre
    from hopscope.scenes import builtin_scene

    res, truth = _track(builtin_scene("lane-spin"), 1, tmp_path_factory)
    rows, n_vis = _compare(res, truth)
    tr = res.track
    assert tr.shot_ids == (0,)
    assert tr.n_points == n_vis
    assert tr.meta.polarity == "marked" and all("marked" in f for f in tr.flags)
    assert float(np.sqrt(np.mean(rows[:, :2] ** 2))) <= POSITION_RMS_TOL_PX
    assert np.max(np.hypot(rows[:, 0], rows[:, 1])) <= MARKED_MAX_ERR_PX
    # the brightness column is the ball's own light (positive) and follows the mark as it turns
    assert tr.brightness.min() > 0
    assert tr.brightness.max() > MARKED_MIN_SWING * tr.brightness.min()
    v_true = truth["flight"]["first_in_view"]["speed_mps"]
    assert res.summary.shot_speeds_mps[0] == pytest.approx(v_true, rel=SPEED_REL_TOL)
    assert not any("playback timing" in w for w in res.warnings)


@pytest.mark.slow
def test_marked_bb_brightness_gives_the_spin_rate(tmp_path_factory):
    # lane-spin: the brightness column (the ball's own light per px² of its image, per second of exposure)
    # read by the spin estimator gives the true rate at the series' mean time; frame − background alone
    # mixed in the wall texture behind the ball and missed by 2-3.6 %
    from hopscope.fitting.spin import SpinOptions, measure_spin
    from hopscope.scenes import builtin_scene

    res, truth = _track(builtin_scene("lane-spin"), 1, tmp_path_factory)
    tr = res.track
    frames = [f for f in truth["flight"]["frames"] if f["visible"]]
    assert tr.n_points == len(frames)
    est = measure_spin(tr.t_s, tr.brightness, options=SpinOptions(exposure_s=tr.meta.exposure_s or 0.0))
    assert est.measured and not est.aliased, est.reason
    true = float(np.interp(est.at_t_s, [f["t_mid_s"] for f in frames], [f["spin_radps"] for f in frames]))
    assert est.rate_radps == pytest.approx(true, rel=SPIN_RATE_REL_TOL)
