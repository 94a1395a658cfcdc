"""The tracker end to end on small synthetic clips with known truth."""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pytest
from track_synth import flight_frames, simple_rig, textured_background, write_clip

from hopscope.calibration.rig import CameraState
from hopscope.tracker.pipeline import TrackOptions, track_video
from hopscope.tracker.trackfile import read_track, track_to_csv

SHAPE = (240, 320)
#: Position RMS vs truth on lossless synthetic clips (issue 5: ≤ 0.1 px).
POSITION_RMS_TOL_PX = 0.1
#: No point of a shot may be further than this from the true BB (a distractor point would be pixels off).
BB_ONLY_TOL_PX = 0.5
#: Times are computed exactly from the container timestamps (1/90000 s or finer time base).
TIME_TOL_S = 1e-6


def _clip(tmp_path, name, rng, **kw):
    frames, truth = flight_frames(SHAPE, kw.pop("n", 40), rng=rng, **kw)
    path = write_clip(tmp_path / name, frames, fps=kw.pop("fps", 240.0))
    return str(path), np.array(truth)


def _errors(track, truth):
    by_frame = {int(f): (u, v) for f, u, v in truth}
    e = []
    for f, u, v in zip(track.frame, track.u_px, track.v_px, strict=True):
        tu, tv = by_frame[int(f)]
        e.append((u - tu, v - tv))
    return np.array(e)


def test_bright_bb_with_distractor(tmp_path, rng):
    video, truth = _clip(
        tmp_path,
        "d.mp4",
        rng,
        start_uv=(20.0, 60.0),
        vel_px=(8.0, -1.5),
        acc_px=(-0.05, 0.01),  # drag and a fall of about g at 25 mm per px, 240 fps
        first_frame=5,
        distractor=((150.0, 150.0), (0.3, -0.5), 1.5),
    )
    rig = simple_rig(*SHAPE[::-1])
    opt = TrackOptions(readout_s=0.002, exposure_s=0.0005)
    res = track_video(video, rig, opt)
    assert res.ok, res.reason
    tr = res.track
    assert tr.shot_ids == (0,)
    assert res.summary.polarity == "bright" and tr.meta.polarity == "bright"
    e = _errors(tr, truth)  # every point is a BB frame (KeyError otherwise)
    assert np.max(np.hypot(e[:, 0], e[:, 1])) < BB_ONLY_TOL_PX
    assert float(np.sqrt(np.mean(e**2))) <= POSITION_RMS_TOL_PX
    assert tr.n_points >= len(truth) - 1
    assert res.summary.rejected_candidates > 0  # the distractor's blobs were seen and turned down
    # timing: frame time + row offset + half the exposure
    expect_t = tr.frame / 240.0 + (tr.v_px / SHAPE[0]) * 0.002 + 0.00025
    np.testing.assert_allclose(tr.t_s, expect_t, atol=TIME_TOL_S)
    # metres through the rig, σ through its Jacobian
    xy = rig.pixel_to_world(np.column_stack([tr.u_px, tr.v_px]))
    np.testing.assert_allclose(np.column_stack([tr.x_m, tr.y_m]), xy, rtol=0, atol=1e-12)
    scale = rig.metres_per_pixel(np.column_stack([tr.u_px, tr.v_px]))
    np.testing.assert_allclose(tr.sigma_m, tr.sigma_px * scale, rtol=1e-6)
    assert tr.n_ensemble == 0
    assert tr.meta.timing_source == "container" and tr.meta.frame_rate_hz == pytest.approx(240.0)
    assert tr.meta.rig_digest == rig.digest
    # the file round-trips
    p = tmp_path / "t.csv"
    p.write_text(track_to_csv(tr))
    back = read_track(p)
    np.testing.assert_array_equal(back.u_px, tr.u_px)


def test_calibration_offsets_from_ensemble(tmp_path, rng):
    video, truth = _clip(
        tmp_path, "e.mp4", rng, start_uv=(20.0, 100.0), vel_px=(9.0, 0.5), first_frame=2, n=30
    )
    base = simple_rig(*SHAPE[::-1])
    members = []
    for dz in (0.01, -0.02):
        c = base.camera_center_m + np.array([0.0, 0.0, dz])
        members.append(
            CameraState(base.camera_matrix, base.dist_coeffs, base.rotation, -base.rotation @ c, 0.0)
        )
    rig = dataclasses.replace(base, ensemble=tuple(members))
    tr = track_video(video, rig).track
    assert tr.n_ensemble == 2
    uv = np.column_stack([tr.u_px, tr.v_px])
    ens = rig.ensemble_pixel_to_world(uv) - rig.pixel_to_world(uv)[None]
    np.testing.assert_allclose(tr.cal_offsets_m(), ens, atol=1e-12)
    assert np.all(np.abs(tr.cal_dx_m) > 0)


def test_two_shots_in_one_clip(tmp_path, rng):
    f1, t1 = flight_frames(SHAPE, 70, start_uv=(15.0, 80.0), vel_px=(10.0, 0.3), first_frame=3, rng=rng)
    f2, t2 = flight_frames(SHAPE, 70, start_uv=(15.0, 150.0), vel_px=(9.0, -0.4), first_frame=45, rng=rng)
    # both BBs on one set of frames (the second only after the first has left)
    base = np.full(SHAPE, 30.0)
    frames = []
    for a, b in zip(f1, f2, strict=True):
        frames.append(np.clip(a.astype(float) + b.astype(float) - base, 0, 255).astype(np.uint8))
    video = str(write_clip(tmp_path / "two.mp4", frames, fps=240.0))
    res = track_video(video, simple_rig(*SHAPE[::-1]))
    tr = res.track
    assert tr.shot_ids == (0, 1)
    first, second = tr.select_shot(0), tr.select_shot(1)
    assert first.frame.min() < second.frame.min()
    assert abs(np.median(first.v_px) - 80) < 5 and abs(np.median(second.v_px) - 150) < 5
    assert len(res.summary.shot_speeds_mps) == 2


def test_dark_bb_on_bright_wall(tmp_path, rng):
    wall = textured_background(SHAPE, level=170.0, contrast=12.0, rng=rng)
    video, truth = _clip(
        tmp_path,
        "dark.mp4",
        rng,
        start_uv=(20.0, 120.0),
        vel_px=(7.0, 0.8),
        first_frame=4,
        background=wall,
        amplitude=-110.0,
        noise=2.5,
    )
    rig = simple_rig(*SHAPE[::-1])
    res = track_video(video, rig)
    assert res.ok, res.reason
    assert res.summary.polarity == "dark"
    assert np.all(res.track.brightness < 0)
    e = _errors(res.track, truth)
    assert float(np.sqrt(np.mean(e**2))) <= POSITION_RMS_TOL_PX
    forced = track_video(video, rig, TrackOptions(polarity="bright"))
    assert not forced.ok and "no BB found" in forced.reason


def test_noise_only_clip_finds_no_bb(tmp_path, rng):
    frames = [np.clip(40 + rng.normal(0, 3, SHAPE), 0, 255).astype(np.uint8) for _ in range(25)]
    video = str(write_clip(tmp_path / "noise.mp4", frames))
    res = track_video(video, simple_rig(*SHAPE[::-1]))
    assert res.track is None
    assert res.reason.startswith("no BB found")
    assert res.summary.points == 0


def test_slow_implied_speed_warns(tmp_path, rng):
    # 30 fps playback timing of a 240 fps capture: the BB seems 8x slower (about 0.9 m/s).
    video, _ = _clip(
        tmp_path, "slow.mp4", rng, start_uv=(20.0, 100.0), vel_px=(8.0, 0.0), first_frame=2, n=30
    )
    res = track_video(video, simple_rig(*SHAPE[::-1]), TrackOptions(fps_override=30.0))
    assert res.ok
    assert any("implied speed" in w and "playback time" in w for w in res.warnings)
    assert res.track.meta.timing_source == "override"
    assert any("implied speed" in w for w in res.track.meta.warnings)


def test_rig_for_another_size_and_bad_options(tmp_path, rng):
    video, _ = _clip(tmp_path, "s.mp4", rng, start_uv=(20.0, 100.0), vel_px=(8.0, 0.0), n=12)
    with pytest.raises(ValueError, match="rig.json: made for 640x480 px images, but .*320x240"):
        track_video(video, simple_rig(640, 480), rig_name="rig.json")
    with pytest.raises(ValueError, match="--readout-ms: readout 5 ms is not shorter than the frame period"):
        track_video(video, simple_rig(320, 240), TrackOptions(readout_s=0.005))
    with pytest.raises(ValueError, match="--polarity"):
        TrackOptions(polarity="grey")
    with pytest.raises(ValueError, match="--exposure-ms"):
        TrackOptions(exposure_s=-1e-3)
    with pytest.raises(ValueError, match="--fps"):
        TrackOptions(fps_override=-240.0)


def test_start_speed_is_the_derivative_at_the_first_point():
    from hopscope.tracker.pipeline import start_speed

    t = np.arange(12) / 240.0
    x = 0.1 + 90.0 * t - 0.5 * 300.0 * t**2  # decelerating
    y = -0.2 + 5.0 * t - 0.5 * 9.81 * t**2
    assert start_speed(t, x, y) == pytest.approx(np.hypot(90.0, 5.0), rel=1e-9)
    assert start_speed(t[:2], x[:2], y[:2]) == pytest.approx(
        np.hypot(np.diff(x[:2]), np.diff(y[:2]))[0] * 240.0
    )


def test_prefetched_keeps_order_raises_in_place_and_stops_early():
    from hopscope.tracker.pipeline import prefetched

    assert list(prefetched(iter(range(50)), depth=3)) == list(range(50))

    def broken():
        yield 1
        yield 2
        raise ValueError("clip.mp4: video is corrupt")

    got = []
    with pytest.raises(ValueError, match="clip.mp4: video is corrupt"):
        for x in prefetched(broken()):
            got.append(x)
    assert got == [1, 2]

    closed = []

    def endless():
        try:
            k = 0
            while True:
                yield k
                k += 1
        finally:
            closed.append(True)

    stream = prefetched(endless(), depth=2)
    assert [next(stream) for _ in range(5)] == [0, 1, 2, 3, 4]
    stream.close()
    assert closed == [True]


def test_brightness_is_per_px2_of_the_image_and_per_second_of_exposure():
    from hopscope.tracker.pipeline import brightness_per_area

    light = np.array([1000.0, 4000.0])  # the same ball, the second seen twice as large
    radius = np.array([2.0, 4.0])
    per_area = brightness_per_area(light, radius, None)
    np.testing.assert_allclose(per_area, 1000.0 / (math.pi * 4.0))
    np.testing.assert_allclose(brightness_per_area(light, radius, 2e-4), per_area / 2e-4)
