"""The renderer itself: geometry of the BB and the board, timing effects, determinism, files."""

from __future__ import annotations

import dataclasses
import json
import math

import av
import cv2
import numpy as np
import pytest
from scene_probe import CLEAN, bb_centroid, flat_clean, flicker_series, interior_frames

from hopscope.fitting.air import Air
from hopscope.fitting.bb import BB
from hopscope.fitting.flight import FlightModel, LaunchState, fly
from hopscope.fitting.laws import ConstantDrag, ExponentialDecay, LinearLift
from hopscope.scenes import (
    BBSpec,
    CameraSpec,
    LightingSpec,
    SceneCamera,
    board_corners,
    builtin_scene,
    load_truth,
    prepare_scene,
    project_board_corners,
    render_board_image,
    render_scene,
    small_scene,
)
from hopscope.scenes.poses import lens_view_poses

#: Projected true BB centre vs the rendered BB's intensity centroid (frames without blur), px.
CENTROID_TOL_PX = 0.1
#: RMS of OpenCV's findChessboardCornersSB corners against the projected true corners, px. The detector's
#: own precision is about 0.1 px (0.06-0.15 px RMS here; references.md "Corners" [measured]); the tight
#: check of the renderer is the sub-pixel one below (0.03-0.05 px RMS, < 0.09 px max).
SB_CORNER_RMS_TOL_PX = 0.2
#: RMS / max of the classic detector + cornerSubPix against the projected true corners, px.
SUBPIX_CORNER_RMS_TOL_PX = 0.06
SUBPIX_CORNER_MAX_TOL_PX = 0.1
#: Inverse mapping (bicubic rays) round trip through cv2.projectPoints, px.
RAY_ROUND_TRIP_TOL_PX = 1e-3
#: Relative tolerance on the streak length recovered from the trail's second moment.
STREAK_REL_TOL = 0.03
#: Streak length vs speed × exposure × f/Z near the principal point (distortion and obliquity < 0.5 %).
CENTRAL_SCALE_REL_TOL = 0.01
#: Rolling-shutter shift of the centroid vs v·Δt, px.
ROLLING_SHIFT_TOL_PX = 0.1
#: Truth path re-flown from truth.json's own numbers, m.
REFLY_TOL_M = 1e-6

FLAT = LightingSpec(wall_distance_m=0.5, texture_contrast=0.0, gradient=0.0)


@pytest.mark.parametrize("kind", ["white", "tracer"])
def test_projected_truth_lands_on_rendered_centroid(kind):
    spec = small_scene(image=CLEAN, lighting=FLAT, bb=BBSpec(kind=kind))
    scene = prepare_scene(spec, rng=1)
    truth = scene.true_flight_frames()
    frames = interior_frames(truth, spec.camera.image_size)
    assert len(frames) >= 8
    errs = []
    for f in frames:
        img = scene.flight_frame(f["frame"], quantise=False)
        bg = scene.flight_frame(f["frame"], quantise=False, bb=False)
        cu, cv = bb_centroid(img, bg, f["u_px"], f["v_px"])
        errs.append(math.hypot(cu - f["u_px"], cv - f["v_px"]))
    assert max(errs) < CENTROID_TOL_PX, errs


def test_truth_frames_agree_with_projecting_the_truth_path():
    spec = small_scene()
    scene = prepare_scene(spec, rng=0)
    frames = [f for f in scene.true_flight_frames() if f["visible"]]
    pts = np.array([[f["x_m"], f["y_m"], f["z_m"]] for f in frames])
    uv = scene.camera.project(pts)
    assert np.allclose(uv, [[f["u_px"], f["v_px"]] for f in frames], atol=1e-9)


def test_ray_interpolation_round_trips_through_opencv():
    cam = SceneCamera.from_spec(
        CameraSpec(image_size=(640, 360), focal_px=500.0, dist_coeffs=(-0.25, 0.06, 1.2e-3, -1e-3, 0.0))
    )
    rng = np.random.default_rng(4)
    u = np.sort(rng.uniform(-0.5, 639.5, 50))
    v = np.sort(rng.uniform(-0.5, 359.5, 40))
    xn, yn = cam.rays(u, v)
    pts = np.stack([xn.ravel(), yn.ravel(), np.ones(xn.size)], axis=1)
    uv, _ = cv2.projectPoints(pts, np.zeros(3), np.zeros(3), cam.camera_matrix, cam.dist_coeffs)
    uu, vv = np.meshgrid(u, v)
    err = np.hypot(uv[:, 0, 0] - uu.ravel(), uv[:, 0, 1] - vv.ravel())
    assert err.max() < RAY_ROUND_TRIP_TOL_PX


def _board_case(size=(640, 480), focal=520.0, n=3, seed=5):
    spec = small_scene()
    cam = SceneCamera.from_spec(dataclasses.replace(spec.camera, image_size=size, focal_px=focal))
    poses = lens_view_poses(cam, spec.board, n, (20.0, 45.0), (0.55, 0.85), np.random.default_rng(seed))
    return cam, spec.board, poses


def test_sb_detector_corners_match_projected_truth_in_documented_order():
    cam, board, poses = _board_case()
    for rot, tr in poses:
        img = render_board_image(cam, board, rot, tr, background=110.0)
        ok, corners = cv2.findChessboardCornersSB(
            img,
            (board.cols, board.rows),
            flags=cv2.CALIB_CB_NORMALIZE_IMAGE | cv2.CALIB_CB_EXHAUSTIVE | cv2.CALIB_CB_ACCURACY,
        )
        assert ok
        true = project_board_corners(cam, board, rot, tr)
        err = np.linalg.norm(corners.reshape(-1, 2) - true, axis=1)
        assert math.sqrt(np.mean(err**2)) < SB_CORNER_RMS_TOL_PX, err


def test_classic_detector_with_subpixel_refinement_matches_truth_reversed():
    # The classic detector orders this board's corners from the other end (documented in CORNER_ORDER).
    cam, board, poses = _board_case(seed=6)
    for rot, tr in poses:
        img = render_board_image(cam, board, rot, tr, background=110.0)
        ok, corners = cv2.findChessboardCorners(img, (board.cols, board.rows))
        assert ok
        corners = cv2.cornerSubPix(
            img, corners, (5, 5), (-1, -1), (cv2.TERM_CRITERIA_EPS + cv2.TERM_CRITERIA_COUNT, 60, 1e-4)
        )
        true = project_board_corners(cam, board, rot, tr)
        err = np.linalg.norm(corners.reshape(-1, 2)[::-1] - true, axis=1)
        assert math.sqrt(np.mean(err**2)) < SUBPIX_CORNER_RMS_TOL_PX
        assert err.max() < SUBPIX_CORNER_MAX_TOL_PX


def test_board_corner_order_is_row_major_along_plus_x():
    board = small_scene().board
    c = board_corners(board)
    assert c.shape == (board.cols * board.rows, 3)
    assert np.allclose(c[1] - c[0], [board.square_m, 0, 0])
    assert np.allclose(c[board.cols] - c[0], [0, -board.square_m, 0])


def test_rendering_is_deterministic_for_a_seed_and_differs_between_seeds(tmp_path):
    spec = small_scene(lens=dataclasses.replace(small_scene().lens, n_views=1))
    a = render_scene(spec, tmp_path / "a", rng=11)
    b = render_scene(spec, tmp_path / "b", rng=11)
    c = render_scene(spec, tmp_path / "c", rng=12)
    for pa, pb, pc in zip(a.lens_view_paths, b.lens_view_paths, c.lens_view_paths, strict=True):
        assert pa.read_bytes() == pb.read_bytes()
        assert pa.read_bytes() != pc.read_bytes()
    assert a.flight_clip_path.read_bytes() == b.flight_clip_path.read_bytes()
    assert a.plane_views[0][0].read_bytes() == b.plane_views[0][0].read_bytes()
    assert a.truth["flight"] == b.truth["flight"]


def test_render_is_cached_for_same_spec_and_seed(tmp_path):
    spec = small_scene(lens=dataclasses.replace(small_scene().lens, n_views=1))
    a = render_scene(spec, tmp_path, rng=3)
    stamp = a.truth_path.stat().st_mtime_ns
    b = render_scene(spec, tmp_path, rng=3)
    assert b.truth_path.stat().st_mtime_ns == stamp
    assert b.truth == a.truth
    c = render_scene(spec, tmp_path, rng=4)
    assert c.truth["spec_digest"] != a.truth["spec_digest"]


def test_clip_is_readable_by_opencv_and_pyav_with_right_count_size_and_times(tmp_path):
    spec = small_scene(lens=dataclasses.replace(small_scene().lens, n_views=0))
    scene = render_scene(spec, tmp_path, rng=0, parts=("flight",))
    n = scene.truth["flight"]["n_frames"]
    w, h = spec.camera.image_size
    cap = cv2.VideoCapture(str(scene.flight_clip_path))
    count = 0
    while True:
        ok, frame = cap.read()
        if not ok:
            break
        assert frame.shape == (h, w, 3)
        count += 1
    cap.release()
    assert count == n
    with av.open(str(scene.flight_clip_path)) as container:
        times = [fr.time for fr in container.decode(video=0)]
        stream = container.streams.video[0]
        assert (stream.width, stream.height) == (w, h)
    assert len(times) == n
    assert np.allclose(times, np.arange(n) / spec.camera.fps, atol=1e-6)


def test_truth_file_is_complete_enough_to_refly_the_path(tmp_path):
    scene = render_scene(small_scene(), tmp_path, rng=0, parts=("flight",))
    truth = load_truth(scene.truth_path)
    assert truth == scene.truth
    fl = truth.flight
    assert fl is not None and len(fl.frames) == fl.n_frames
    model = FlightModel(
        BB(fl.mass_kg, fl.diameter_m),
        Air(**dataclasses.asdict(fl.air)),
        ConstantDrag(fl.laws.drag_coefficient),
        LinearLift(fl.laws.lift_slope),
        ExponentialDecay(fl.laws.spin_decay_time_s),
        fl.gravity_mps2,
    )
    la = fl.launch
    launch = LaunchState(
        la.position_m[None, :], la.velocity_mps[None, :], np.array([la.spin_radps]), la.spin_axis[None, :]
    )
    t = fl.path.t_s
    assert np.max(np.diff(t)) <= 2e-4 + 1e-12
    traj = fly(model, launch, float(t[-1] - la.t_s) + 1e-3, step_s=2e-4)
    st = traj.sample(t - la.t_s)[0]
    assert np.max(np.abs(st[:, 0] - fl.path.x_m)) < REFLY_TOL_M
    assert np.max(np.abs(st[:, 1] - fl.path.y_m)) < REFLY_TOL_M
    # C_L at launch is the linear law at the launch spin ratio
    cl0 = fl.laws.lift_slope * 0.5 * fl.diameter_m * la.spin_radps / la.speed_mps
    assert cl0 == pytest.approx(fl.laws.lift_coefficient_launch, rel=1e-12)
    # the typed view and the file's own layout say the same
    assert la.elevation_deg == pytest.approx(truth["flight"]["launch"]["elevation_deg"], abs=1e-12)
    assert np.array_equal(fl.frames.visible, [f["visible"] for f in truth["flight"]["frames"]])
    assert truth.spec == small_scene()
    json.loads(truth.to_json())  # plain JSON types only


def test_load_truth_rejects_another_schema(tmp_path):
    p = tmp_path / "truth.json"
    p.write_text(json.dumps({"schema": "hopscope.truth/0"}))
    with pytest.raises(ValueError, match=r"truth\.json: expected schema 'hopscope.truth/1'"):
        load_truth(p)


def test_rolling_shutter_shifts_the_bb_by_its_image_velocity_times_the_row_delay():
    readout = 4.0e-4
    base = small_scene(lighting=FLAT)
    cam = dataclasses.replace(base.camera, readout_s=readout)
    on = prepare_scene(
        dataclasses.replace(base, camera=cam, image=dataclasses.replace(CLEAN, rolling_shutter=True)), rng=0
    )
    off = prepare_scene(dataclasses.replace(base, camera=cam, image=CLEAN), rng=0)
    fps = base.camera.fps
    h = base.camera.image_size[1]
    frames_off = off.true_flight_frames()
    frames_on = on.true_flight_frames()
    inner = interior_frames(frames_off, base.camera.image_size, margin=20)
    assert len(inner) >= 6
    for f in inner[1:-1]:
        k = f["frame"]
        c_off, c_on = (
            bb_centroid(sc.flight_frame(k, quantise=False), sc.flight_frame(k, quantise=False, bb=False),
                        f["u_px"], f["v_px"], half=16)
            for sc in (off, on)
        )  # fmt: skip
        # image velocity from the global-shutter truth of the neighbouring frames, px/s
        prev, nxt = frames_off[k - 1], frames_off[k + 1]
        vel = np.array([nxt["u_px"] - prev["u_px"], nxt["v_px"] - prev["v_px"]]) * fps / 2.0
        delay = c_on[1] * readout / h
        expected = np.array(c_off) + vel * delay
        assert np.hypot(*(np.array(c_on) - expected)) < ROLLING_SHIFT_TOL_PX
        # and truth.json's own frame record (mid-exposure time at the BB's row) lands on it
        g = frames_on[k]
        assert math.hypot(c_on[0] - g["u_px"], c_on[1] - g["v_px"]) < CENTROID_TOL_PX
        assert g["t_mid_s"] == pytest.approx(
            k / fps + g["v_px"] * readout / h + base.camera.exposure_s / 2, abs=1e-9
        )


def _second_moment_along(diff: np.ndarray, r0: int, c0: int, direction: np.ndarray) -> float:
    rr, cc = np.mgrid[r0 : r0 + diff.shape[0], c0 : c0 + diff.shape[1]]
    wgt = diff / diff.sum()
    mu_c, mu_r = (wgt * cc).sum(), (wgt * rr).sum()
    s = (cc - mu_c) * direction[0] + (rr - mu_r) * direction[1]
    return float((wgt * s * s).sum())


def test_motion_blur_streak_length_is_speed_times_exposure():
    # A trail is the BB's still image convolved with the segment it travels during the exposure
    # (Vereš et al. 2012, PASP 124:1197, "Improved asteroid astrometry and photometry with trail fitting",
    # trail model eq. 1); a convolution with a uniform segment of length L adds L²/12 to the variance
    # along the track, so L = sqrt(12 (var_blurred − var_still)).
    exposure = 4.0e-4
    base = small_scene(lighting=FLAT, camera=dataclasses.replace(small_scene().camera, exposure_s=exposure))
    blur = prepare_scene(dataclasses.replace(base, image=dataclasses.replace(CLEAN, motion_blur=True)), rng=0)
    still = prepare_scene(dataclasses.replace(base, image=CLEAN), rng=0)
    truth = blur.true_flight_frames()
    frames = interior_frames(truth, base.camera.image_size, margin=30)
    assert len(frames) >= 4
    cx = blur.camera.camera_matrix[0, 2]
    central = min(frames, key=lambda f: abs(f["u_px"] - cx))
    half = 24
    for f in frames:
        k = f["frame"]
        r0, c0 = int(round(f["v_px"])) - half, int(round(f["u_px"])) - half
        cut = (slice(r0, r0 + 2 * half + 1), slice(c0, c0 + 2 * half + 1))
        d_blur = np.abs(
            blur.flight_frame(k, quantise=False) - blur.flight_frame(k, quantise=False, bb=False)
        )[cut]
        d_still = np.abs(
            still.flight_frame(k, quantise=False) - still.flight_frame(k, quantise=False, bb=False)
        )[cut]
        nxt = truth[k + 1]
        direction = np.array([nxt["u_px"] - f["u_px"], nxt["v_px"] - f["v_px"]])
        direction /= np.linalg.norm(direction)
        var_b = _second_moment_along(d_blur, r0, c0, direction)
        var_s = _second_moment_along(d_still, r0, c0, direction)
        length = math.sqrt(12.0 * (var_b - var_s))
        assert length == pytest.approx(f["streak_len_px"], rel=STREAK_REL_TOL)
        # the blurred streak is centred on the mid-exposure position
        cu, cv = bb_centroid(
            blur.flight_frame(k, quantise=False),
            blur.flight_frame(k, quantise=False, bb=False),
            f["u_px"],
            f["v_px"],
            half=half,
        )
        assert math.hypot(cu - f["u_px"], cv - f["v_px"]) < CENTROID_TOL_PX
        if f is not central:
            continue
        # near the principal point (no distortion), the streak is speed × exposure × f/Z
        speed = np.interp(
            f["t_mid_s"],
            blur.flight_motion.t0_s + blur.plan.trajectory.t_s,
            blur.plan.trajectory.speed_mps[0],
        )
        z_cam = blur.camera.to_camera(np.array([[f["x_m"], f["y_m"], f["z_m"]]]))[0, 2]
        expected_px = speed * exposure * blur.camera.camera_matrix[0, 0] / z_cam
        assert f["streak_len_px"] == pytest.approx(expected_px, rel=CENTRAL_SCALE_REL_TOL)


#: Spin frequency from the marked BB's brightness periodogram vs the true spin, relative.
SPIN_FREQ_REL_TOL = 0.02


def test_marked_bb_brightness_flickers_at_the_spin_frequency():
    # Periodogram of unevenly weighted samples: Lomb (1976), Astrophys. Space Sci. 39:447; Scargle (1982),
    # ApJ 263:835; computed by scipy.signal.lombscargle (angular frequencies).
    from scipy.signal import lombscargle

    spec = flat_clean(builtin_scene("lane-spin"))
    scene = prepare_scene(spec, rng=0)
    frames = interior_frames(scene.true_flight_frames(), spec.camera.image_size, margin=15)
    assert len(frames) >= 20
    t, bright = flicker_series(scene, frames, half=14)
    y = bright - np.mean(bright)
    assert np.std(y) > 0.05 * np.mean(np.abs(bright))  # a visible flicker
    f_true = frames[0]["spin_radps"] / (2 * np.pi)
    freqs = np.linspace(0.3 * f_true, 1.7 * f_true, 4000)
    power = lombscargle(t, y, 2 * np.pi * freqs)
    assert freqs[np.argmax(power)] == pytest.approx(f_true, rel=SPIN_FREQ_REL_TOL)


def test_rerender_with_fewer_views_leaves_no_stale_views(tmp_path):
    spec3 = small_scene()
    render_scene(spec3, tmp_path, rng=0, parts=("lens",))
    assert len(list((tmp_path / "lens").glob("*.png"))) == 3
    spec1 = small_scene(lens=dataclasses.replace(spec3.lens, n_views=1))
    scene = render_scene(spec1, tmp_path, rng=0, parts=("lens",))
    assert sorted((tmp_path / "lens").glob("*.png")) == list(scene.lens_view_paths)


def test_drop_clip_truth_lands_on_the_rendered_bb_and_falls_under_gravity():
    from hopscope.scenes import DropSpec

    spec = small_scene(
        image=CLEAN, lighting=FLAT, drop=DropSpec(release_m=(0.15, 0.05, 0.0), lead_frames=2, n_frames=60)
    )
    scene = prepare_scene(spec, rng=0)
    frames = interior_frames(scene.true_drop_frames(), spec.camera.image_size)
    assert len(frames) >= 50
    for f in frames[::10]:
        cu, cv = bb_centroid(
            scene.drop_frame(f["frame"], quantise=False),
            scene.drop_frame(f["frame"], quantise=False, bb=False),
            f["u_px"],
            f["v_px"],
        )
        assert math.hypot(cu - f["u_px"], cv - f["v_px"]) < CENTROID_TOL_PX
    # free fall from rest, drag negligible at < 0.3 m/s: y = y0 − g t²/2 (Galileo), to 0.1 %
    t0 = scene.drop_plan()[2]
    t = np.array([f["t_mid_s"] for f in frames]) - t0
    y = np.array([f["y_m"] for f in frames])
    g = scene.plan.model.gravity_mps2
    assert np.allclose(0.05 - y, 0.5 * g * t**2, rtol=1e-3)


def test_load_truth_names_a_missing_flight_field(tmp_path):
    scene = render_scene(
        small_scene(lens=dataclasses.replace(small_scene().lens, n_views=0)),
        tmp_path / "s",
        rng=0,
        parts=("flight",),
    )
    data = json.loads(scene.truth_path.read_text())
    del data["flight"]["launch"]
    p = tmp_path / "broken.json"
    p.write_text(json.dumps(data))
    with pytest.raises(ValueError, match=r"broken\.json: flight lacks field\(s\) launch"):
        load_truth(p)


def test_load_truth_names_the_file_and_field_of_a_bad_number(tmp_path):
    scene = render_scene(
        small_scene(lens=dataclasses.replace(small_scene().lens, n_views=0)),
        tmp_path / "s",
        rng=0,
        parts=("flight",),
    )
    data = json.loads(scene.truth_path.read_text())
    data["flight"]["laws"]["drag_coefficient"] = "high"
    p = tmp_path / "bad.json"
    p.write_text(json.dumps(data))
    with pytest.raises(
        ValueError, match=r"bad\.json: flight\.laws\.drag_coefficient: expected a finite number, got 'high'"
    ):
        load_truth(p)
