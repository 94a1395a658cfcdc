"""Calibration on rendered scenes with a known camera (hopscope.scenes): images in, rig out, vs truth.

The renderer projects through OpenCV's camera model with its own supersampled texture rendering, lens
blur and noise; the truth (camera, board poses, true BB path) comes from its truth.json.
"""

from __future__ import annotations

import dataclasses

import cv2
import numpy as np
import pytest
from calib_synth import truth_rig as _truth_rig

from hopscope.calibration.grid import GridSpec
from hopscope.calibration.pipeline import calibrate_files
from hopscope.calibration.rig import read_rig, rig_to_json
from hopscope.scenes import DropSpec, builtin_scene, prepare_scene, render_scene

pytestmark = pytest.mark.slow

#: The issue's acceptance: focal length and principal point within 0.2 %.
INTRINSICS_RTOL = 2e-3
#: Distortion recovered: displacement field within this many px over the frame's inner 90 %.
DISTORTION_FIELD_TOL_PX = 0.25
#: Plane mapping error along the true path, inside the region the plane references cover (the issue's
#: 0.3 mm for lane-close).
PATH_TOL_COVERED_M = 0.3e-3
#: ... and over the whole visible path, where the lens model extrapolates toward the frame's edges:
#: the error must stay within this many ensemble standard deviations (plus a floor) and below a bound.
PATH_Z_LIMIT = 3.5
PATH_Z_FLOOR_M = 0.02e-3
#: The issue's acceptance: g within 0.5 % on a rendered drop.
G_RTOL = 5e-3


@pytest.fixture(scope="module")
def close_scene(rendered_close):
    spec, scene = rendered_close
    b = scene.truth["board"]
    grid = GridSpec(b["cols"], b["rows"], b["square_m"])
    run = calibrate_files(
        [str(p) for p in scene.lens_view_paths], [f"{p}:{off}" for p, off in scene.plane_views], grid, rng=0
    )
    return spec, scene, run


def test_intrinsics_within_tolerance(close_scene):
    _, scene, run = close_scene
    k_true = np.array(scene.truth["camera"]["camera_matrix"])
    k = run.rig.camera_matrix
    for i, j in [(0, 0), (1, 1), (0, 2), (1, 2)]:
        assert abs(k[i, j] - k_true[i, j]) / k_true[i, j] < INTRINSICS_RTOL, (i, j, k[i, j], k_true[i, j])
    assert run.lens.views_rejected == ()


def test_distortion_recovered(close_scene):
    _, scene, run = close_scene
    c = scene.truth["camera"]
    k_true, d_true = np.array(c["camera_matrix"]), np.array(c["dist_coeffs"])
    w, h = c["image_size"]
    u, v = np.meshgrid(np.linspace(0.05, 0.95, 15) * w, np.linspace(0.05, 0.95, 9) * h)
    xn = (np.column_stack([u.ravel(), v.ravel()]) - k_true[:2, 2]) / np.diag(k_true)[:2]
    obj = np.column_stack([xn, np.ones(len(xn))]).reshape(-1, 1, 3)
    want, _ = cv2.projectPoints(obj, np.zeros(3), np.zeros(3), k_true, d_true)
    got, _ = cv2.projectPoints(obj, np.zeros(3), np.zeros(3), k_true, run.rig.dist_coeffs)
    assert np.max(np.abs(got - want)) < DISTORTION_FIELD_TOL_PX


def test_plane_mapping_along_true_path(close_scene):
    spec, scene, run = close_scene
    truth = _truth_rig(scene.truth)
    frames = [f for f in prepare_scene(spec, rng=0).true_flight_frames() if f["visible"]]
    xy = np.array([[f["x_m"], f["y_m"]] for f in frames])
    uv = truth.world_to_pixel(xy)  # where the plane point under the BB images
    rig = run.rig
    err = np.linalg.norm(rig.pixel_to_world(uv) - xy, axis=1)
    covered = rig.in_coverage(xy)
    assert covered.sum() >= 10
    assert err[covered].max() < PATH_TOL_COVERED_M
    spread = rig.ensemble_pixel_to_world(uv) - rig.pixel_to_world(uv)[None]
    sd = np.sqrt(np.mean(np.sum(spread**2, axis=2), axis=0))
    assert np.all(err < PATH_Z_LIMIT * sd + PATH_Z_FLOOR_M)
    # the 0.3 mm over the whole visible path, to the frame's edges (lane-close stands its board at
    # two places, so the references span most of the field)
    assert err.max() < PATH_TOL_COVERED_M


def test_rig_file_round_trip_of_rendered_calibration(close_scene, tmp_path):
    _, _, run = close_scene
    p = tmp_path / "rig.json"
    p.write_text(rig_to_json(run.rig))
    back = read_rig(p)
    assert back.digest == run.rig.digest
    uv = np.array([[10.0, 10.0], [640.0, 360.0]])
    np.testing.assert_allclose(back.pixel_to_world(uv), run.rig.pixel_to_world(uv))


@pytest.fixture(scope="module")
def drop_clip(tmp_path_factory):
    # a longer fall than the built-in drop (in view for only ~25 ms): the same camera at 500 fps, the ball
    # released just inside the frame, 0.3 s of fall; only the clip is rendered (the rig comes from the
    # lane-close views, the geometry is the same)
    spec = builtin_scene("lane-close")
    spec = dataclasses.replace(
        spec,
        camera=dataclasses.replace(spec.camera, fps=500.0),
        drop=DropSpec(release_m=(0.3, 0.42, 0.0), lead_frames=10, n_frames=150),
    )
    return render_scene(spec, tmp_path_factory.mktemp("drop"), rng=1, parts=("drop",))


def test_rendered_drop_recovers_g_and_wrong_rate_is_flagged(close_scene, drop_clip):
    from hopscope.calibration.drop import apply_level, check_drop

    _, _, run = close_scene
    g_true = drop_clip.truth["drop"]["g_mps2"]
    check, warns = check_drop(run.rig, drop_clip.drop_clip_path)
    assert check.verdict == "consistent", check
    assert abs(check.g_measured_mps2.value - g_true) / g_true < G_RTOL
    assert apply_level(run.rig, check, warns).drop_check.levelled is False  # the board was level
    wrong, warns = check_drop(run.rig, drop_clip.drop_clip_path, fps=600.0)
    assert wrong.verdict == "inconsistent"
    assert any("frame rate" in w for w in warns)


#: The issue's acceptance on the long lane: ≤ 5 mm over 35 m with all placements.
LONG_PATH_TOL_M = 5e-3


def test_long_lane_with_three_placements_and_drop(tmp_path_factory):
    spec = builtin_scene("lane-long")
    scene = render_scene(spec, tmp_path_factory.mktemp("lane-long"), rng=0, parts=("lens", "plane", "drop"))
    b = scene.truth["board"]
    grid = GridSpec(b["cols"], b["rows"], b["square_m"])
    planes = [f"{p}:{off}" for p, off in scene.plane_views]
    assert len(planes) == 3
    run = calibrate_files(
        [str(p) for p in scene.lens_view_paths], planes, grid, drop=str(scene.drop_clip_path)
    )
    rig = run.rig
    truth = _truth_rig(scene.truth)
    frames = [f for f in prepare_scene(spec, rng=0).true_flight_frames() if f["visible"]]
    xy = np.array([[f["x_m"], f["y_m"]] for f in frames])
    assert xy[:, 0].max() - xy[:, 0].min() > 30.0
    uv = truth.world_to_pixel(xy)
    err = np.linalg.norm(rig.pixel_to_world(uv) - xy, axis=1)
    assert err.max() < LONG_PATH_TOL_M
    spread = rig.ensemble_pixel_to_world(uv) - rig.pixel_to_world(uv)[None]
    sd = np.sqrt(np.mean(np.sum(spread**2, axis=2), axis=0))
    assert np.all(err < PATH_Z_LIMIT * sd + PATH_Z_FLOOR_M)
    # the drop (with a moving distractor in the clip): g within 0.5 %, a level board left level
    d = rig.drop_check
    g_true = scene.truth["drop"]["g_mps2"]
    assert d.verdict == "consistent", d
    assert abs(d.g_measured_mps2.value - g_true) / g_true < G_RTOL
    assert d.levelled is False
    np.testing.assert_allclose(rig.rotation, run.rig.rotation)


#: Agreement of the rig's plane mapping with scikit-image's homography inside the board region, m
#: (both from the same rendered corners; the homography has 8 free parameters, the rig 6 + the lens).
SKIMAGE_AGREE_RENDERED_M = 0.1e-3


def test_plane_mapping_agrees_with_scikit_image_on_rendered_board(close_scene):
    # Reference library: scikit-image ProjectiveTransform (van der Walt et al. 2014, PeerJ 2:e453),
    # estimated from the undistorted detected plane corners and their board positions.
    from skimage.transform import ProjectiveTransform

    from hopscope.calibration.grid import detect_grid
    from hopscope.calibration.images import read_image
    from hopscope.calibration.rig import UNDISTORT_CRITERIA

    _, scene, run = close_scene
    rig = run.rig
    b = scene.truth["board"]
    grid = GridSpec(b["cols"], b["rows"], b["square_m"])
    det = detect_grid(read_image(scene.plane_views[0][0]), grid)
    det = det.choose(rig.provenance["corners"]["per_image"][str(scene.plane_views[0][0])]["detector"])
    k, d = rig.camera_matrix, rig.dist_coeffs

    def undistort(uv):
        return cv2.undistortPoints(uv.reshape(-1, 1, 2), k, d, P=k, criteria=UNDISTORT_CRITERIA).reshape(
            -1, 2
        )

    tform = ProjectiveTransform.from_estimate(undistort(det.corners), grid.board_points()[:, :2])
    assert tform
    px, py = np.meshgrid(np.linspace(0.05, 0.95, 9), np.linspace(-0.45, -0.05, 5))
    probe = np.column_stack([px.ravel(), py.ravel()])
    uv = _truth_rig(scene.truth).world_to_pixel(probe)
    np.testing.assert_allclose(rig.pixel_to_world(uv), tform(undistort(uv)), atol=SKIMAGE_AGREE_RENDERED_M)
