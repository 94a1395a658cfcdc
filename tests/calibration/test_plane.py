"""Flight-plane pose from board placements, and the assembled rig, on synthetic corners with known truth."""

from __future__ import annotations

import json

import numpy as np
import pytest
from calib_synth import IMAGE_SIZE, look_at_pose, project, synthetic_lens_views

from hopscope.calibration.build import make_rig, rig_figures
from hopscope.calibration.grid import GridSpec
from hopscope.calibration.lens import calibrate_lens
from hopscope.calibration.plane import Placement, solve_plane
from hopscope.calibration.rig import Rig

#: The issue's acceptance on a close lane: plane mapping error along the true path ≤ 0.3 mm.
CLOSE_PATH_TOL_M = 0.3e-3
#: ... and on a long lane (35 m) with all placements: ≤ 5 mm.
LONG_PATH_TOL_M = 5e-3
#: Agreement with scikit-image's homography inside the board region, m.
SKIMAGE_AGREE_TOL_M = 0.1e-3
#: The ensemble's spread must cover the actual mapping error within this factor.
ENSEMBLE_COVER_FACTOR = 4.0
NOISE_PX = 0.05

CLOSE_K = np.array([[1000.0, 0.0, 641.5], [0.0, 1000.0, 357.0], [0.0, 0.0, 1.0]])
CLOSE_DIST = np.array([-0.15, 0.03, 1e-3, -8e-4, 0.0])
BOARD = GridSpec(11, 6, 0.1)


def _truth(k, dist, centre, target):
    rot, t = look_at_pose(centre, target)
    return Rig(IMAGE_SIZE, k, dist, rot, t, 0.0, 0.0)


def _placements(truth: Rig, spec, offsets, rng, noise_px=NOISE_PX):
    out = []
    for i, off in enumerate(offsets):
        img = project(
            spec.board_points(off), truth.rotation, truth.translation, truth.camera_matrix, truth.dist_coeffs
        )
        out.append(Placement(f"plane{i}.png", img + rng.normal(0, noise_px, img.shape), off))
    return out


def _close_setup(seed=0, offsets=(0.0,), dist=CLOSE_DIST):
    rng = np.random.default_rng(seed)
    truth = _truth(CLOSE_K, dist, (0.5, -0.2, 2.0), (0.5, -0.25, 0.0))
    views = synthetic_lens_views(BOARD, 12, rng, k=CLOSE_K, dist=dist, fill=(0.55, 0.85), noise_px=NOISE_PX)
    lens = calibrate_lens(views, IMAGE_SIZE)
    return truth, views, lens, _placements(truth, BOARD, offsets, rng), rng


def test_close_lane_mapping_along_path_within_tolerance():
    truth, views, lens, placements, rng = _close_setup()
    rig = make_rig(views, lens, placements, BOARD, ensemble_size=0, rng=rng)
    # a flight path across the field at mid height, as the BB would fly it
    x = np.linspace(-0.3, 1.3, 41)
    path = np.column_stack([x, -0.25 + 0.05 * x - 0.02 * x**2])
    uv = truth.world_to_pixel(path)
    assert np.all((uv > 0) & (uv < IMAGE_SIZE))
    err = np.linalg.norm(rig.pixel_to_world(uv) - path, axis=1)
    assert err.max() < CLOSE_PATH_TOL_M
    assert rig.coverage_m == pytest.approx((0.0, 1.0, -0.5, 0.0))


def test_long_lane_with_three_placements_within_tolerance():
    rng = np.random.default_rng(5)
    k = np.array([[2600.0, 0.0, 640.0], [0.0, 2600.0, 360.0], [0.0, 0.0, 1.0]])
    dist = np.array([-0.05, 0.01, 0.0, 0.0, 0.0])
    truth = _truth(k, dist, (17.5, -0.6, 75.0), (17.5, -0.6, 0.0))
    spec = GridSpec(11, 6, 0.1)
    views = synthetic_lens_views(spec, 12, rng, k=k, dist=dist, fill=(0.5, 0.8))
    lens = calibrate_lens(views, IMAGE_SIZE)
    placements = _placements(truth, spec, (0.0, 17.0, 34.0), rng)
    rig = make_rig(views, lens, placements, spec, ensemble_size=0, rng=rng)
    x = np.linspace(0.0, 35.0, 36)
    path = np.column_stack([x, -0.3 - 0.0004 * x**2])
    assert np.all((truth.world_to_pixel(path) > 0) & (truth.world_to_pixel(path) < IMAGE_SIZE))
    err = np.linalg.norm(rig.pixel_to_world(truth.world_to_pixel(path)) - path, axis=1)
    assert err.max() < LONG_PATH_TOL_M
    # one placement alone extrapolates much worse: the joint solution is what keeps the far field right
    single = make_rig(views, lens, placements[:1], spec, ensemble_size=0, rng=rng)
    err1 = np.linalg.norm(single.pixel_to_world(truth.world_to_pixel(path)) - path, axis=1)
    assert err1.max() > err.max()


def test_plane_mapping_agrees_with_scikit_image_homography_in_board_region():
    # Reference library: scikit-image ProjectiveTransform (van der Walt et al. 2014, "scikit-image: image
    # processing in Python", PeerJ 2:e453), a DLT homography fitted to the same undistorted points.
    import cv2
    from skimage.transform import ProjectiveTransform

    truth, views, lens, placements, rng = _close_setup(seed=3)
    rig = make_rig(views, lens, placements, BOARD, ensemble_size=0, rng=rng)
    crit = (cv2.TERM_CRITERIA_COUNT | cv2.TERM_CRITERIA_EPS, 100, 1e-12)
    img = placements[0].image_points
    und = cv2.undistortPoints(
        img.reshape(-1, 1, 2), rig.camera_matrix, rig.dist_coeffs, P=rig.camera_matrix, criteria=crit
    ).reshape(-1, 2)
    tform = ProjectiveTransform.from_estimate(und, BOARD.board_points()[:, :2])
    assert tform
    # probe points inside the board region
    px, py = np.meshgrid(np.linspace(0.05, 0.95, 7), np.linspace(-0.45, -0.05, 5))
    probe = np.column_stack([px.ravel(), py.ravel()])
    uv = truth.world_to_pixel(probe)
    und_probe = cv2.undistortPoints(
        uv.reshape(-1, 1, 2), rig.camera_matrix, rig.dist_coeffs, P=rig.camera_matrix, criteria=crit
    ).reshape(-1, 2)
    np.testing.assert_allclose(rig.pixel_to_world(uv), tform(und_probe), atol=SKIMAGE_AGREE_TOL_M)


def test_joint_pnp_reports_per_placement_residual_and_flags_bad_offset():
    rng = np.random.default_rng(7)
    truth = _truth(CLOSE_K, CLOSE_DIST, (1.5, -0.2, 3.5), (1.5, -0.25, 0.0))
    placements = _placements(truth, BOARD, (0.0, 1.0, 2.0), rng)
    good = solve_plane(placements, BOARD, CLOSE_K, CLOSE_DIST, lens_rms_px=0.07)
    assert len(good.per_placement_rms_px) == 3 and max(good.per_placement_rms_px) < 0.15
    assert good.warnings == ()
    wrong = [*placements[:2], Placement(placements[2].source, placements[2].image_points, 2.05)]
    bad = solve_plane(wrong, BOARD, CLOSE_K, CLOSE_DIST, lens_rms_px=0.07)
    assert any("plane2.png" in w and "offset" in w for w in bad.warnings)


def test_ensemble_spread_covers_actual_error():
    truth, views, lens, placements, rng = _close_setup(seed=11)
    rig = make_rig(views, lens, placements, BOARD, ensemble_size=24, rng=rng)
    assert len(rig.ensemble) == 24
    probe = np.array([[20.0, 360.0], [1260.0, 360.0], [640.0, 360.0], [20.0, 20.0], [1260.0, 700.0]])
    spread = rig.ensemble_pixel_to_world(probe) - rig.pixel_to_world(probe)[None]
    sd = np.sqrt(np.mean(np.sum(spread**2, axis=2), axis=0))
    err = np.linalg.norm(rig.pixel_to_world(probe) - truth.pixel_to_world(probe), axis=1)
    assert np.all(sd > 0)
    assert np.all(err < ENSEMBLE_COVER_FACTOR * sd + 2e-5)
    # the spread grows from the board region toward the frame corners
    assert sd[3] > sd[2] and sd[4] > sd[2]
    figs = rig_figures(rig)
    assert figs.plane_distance_m == pytest.approx(2.0, rel=1e-3)
    assert figs.mm_per_px_centre == pytest.approx(2.0, rel=0.02)  # 2 m / 1000 px
    assert figs.edge_error_mm["corners"] > 0


def test_parallax_moves_the_plane_toward_the_camera():
    truth, views, lens, placements, rng = _close_setup(seed=2)
    d = 0.05
    rig = make_rig(views, lens, placements, BOARD, plane_z_m=d, ensemble_size=0, rng=rng)
    # a point in the flight plane z = d, seen by the true camera, maps back to its x, y
    pts = np.array([[0.2, -0.1, d], [0.9, -0.4, d]])
    uv = truth.world_to_pixel(pts)
    np.testing.assert_allclose(rig.pixel_to_world(uv), pts[:, :2], atol=CLOSE_PATH_TOL_M)
    with pytest.raises(ValueError, match="parallax"):
        make_rig(views, lens, placements, BOARD, plane_z_m=5.0, ensemble_size=0, rng=rng)


#: Over repeated calibrations the actual error divided by the ensemble's spread must have an RMS near 1
#: (honest error bars): within these bounds for 16 repeats.
Z_RMS_BOUNDS = (0.6, 1.6)


@pytest.mark.slow
def test_ensemble_spread_is_honest_over_repeats():
    # Bootstrap standard errors (Efron & Tibshirani 1993, ch. 6): the spread of the ensemble should match
    # the scatter of the actual error over independent repeats of the whole calibration.
    probe = np.array([[20.0, 360.0], [1260.0, 360.0], [640.0, 100.0], [100.0, 650.0]])
    z = []
    for seed in range(16):
        truth, views, lens, placements, rng = _close_setup(seed=100 + seed)
        rig = make_rig(views, lens, placements, BOARD, ensemble_size=16, rng=rng)
        nominal = rig.pixel_to_world(probe)
        sd = (rig.ensemble_pixel_to_world(probe) - nominal[None]).std(axis=0)  # per axis
        z.append((nominal - truth.pixel_to_world(probe)) / sd)
    z_rms = float(np.sqrt(np.mean(np.square(z))))
    assert Z_RMS_BOUNDS[0] < z_rms < Z_RMS_BOUNDS[1], z_rms


def test_offsets_typed_in_millimetres_are_named():
    rng = np.random.default_rng(8)
    truth = _truth(CLOSE_K, CLOSE_DIST, (1.5, -0.2, 3.5), (1.5, -0.25, 0.0))
    placements = _placements(truth, BOARD, (0.0, 1.2), rng)
    mm = [placements[0], Placement(placements[1].source, placements[1].image_points, 1200.0)]
    with pytest.raises(
        ValueError, match=r"plane1\.png:1200: .* offsets are metres \(typed in millimetres\?\)"
    ):
        solve_plane(mm, BOARD, CLOSE_K, CLOSE_DIST)


def test_wrong_square_size_names_the_placements_scale():
    rng = np.random.default_rng(9)
    truth = _truth(CLOSE_K, CLOSE_DIST, (1.5, -0.2, 3.5), (1.5, -0.25, 0.0))
    placements = _placements(truth, BOARD, (0.0, 1.2), rng)
    half = GridSpec(BOARD.cols, BOARD.rows, BOARD.square_m / 2)  # --square-mm typed as half the size
    with pytest.raises(ValueError, match=r"spacing seen in the image \(0\.6 m\) is 0\.5× .*--square-mm 50"):
        solve_plane(placements, half, CLOSE_K, CLOSE_DIST)
    # the right size: the seen spacing matches the tape to well under the tolerance
    pose = solve_plane(placements, BOARD, CLOSE_K, CLOSE_DIST)
    assert pose.rms_px < 0.15


def test_board_standing_turned_90_degrees_gives_the_same_world_frame():
    # --grid 11x6 given, the board stands with 6 corners along the image rows: the placement carries
    # its own orientation and the world x still runs along the image rows
    rng = np.random.default_rng(10)
    truth = _truth(CLOSE_K, CLOSE_DIST, (0.5, -0.2, 2.0), (0.5, -0.25, 0.0))
    upright = BOARD.transposed()
    img = project(upright.board_points(), truth.rotation, truth.translation, CLOSE_K, CLOSE_DIST)
    place = Placement(
        "up.png", img + rng.normal(0, NOISE_PX, img.shape), 0.0, grid=(upright.cols, upright.rows)
    )
    pose = solve_plane([place], BOARD, CLOSE_K, CLOSE_DIST)
    np.testing.assert_allclose(pose.rotation, truth.rotation, atol=2e-3)
    assert pose.coverage_m[1] == pytest.approx((upright.cols - 1) * BOARD.square_m)


#: With the tape 1 mm off, the image puts the board back to within this of where it stood, m (0.05 px
#: corner noise over 66 corners of a board 3.5 m away, f = 1000 px).
SOLVED_OFFSET_TOL_M = 0.3e-3


def test_offsets_are_solved_with_the_tape_as_prior():
    rng = np.random.default_rng(12)
    truth = _truth(CLOSE_K, CLOSE_DIST, (1.5, -0.2, 3.5), (1.5, -0.25, 0.0))
    placements = _placements(truth, BOARD, (0.0, 1.0, 2.0), rng)
    taped = [placements[0], *(Placement(p.source, p.image_points, p.offset_m + 1e-3) for p in placements[1:])]
    exact = solve_plane(taped, BOARD, CLOSE_K, CLOSE_DIST, lens_rms_px=0.07)
    solved = solve_plane(taped, BOARD, CLOSE_K, CLOSE_DIST, lens_rms_px=0.07, offset_sigma_m=1e-3)
    assert exact.offsets_m == (0.0, 1.001, 2.001)
    np.testing.assert_allclose(solved.offsets_m, (0.0, 1.0, 2.0), atol=SOLVED_OFFSET_TOL_M)
    assert 0 < max(solved.offset_stderr_m) < SOLVED_OFFSET_TOL_M and solved.offset_stderr_m[0] == 0
    assert solved.rms_px < exact.rms_px
    # a tape 2 cm off is reported, naming the placement
    wrong = [*placements[:2], Placement(placements[2].source, placements[2].image_points, 2.02)]
    bad = solve_plane(wrong, BOARD, CLOSE_K, CLOSE_DIST, lens_rms_px=0.07, offset_sigma_m=1e-3)
    assert any("plane2.png" in w and "the tape at 2.02 m" in w for w in bad.warnings)


def test_model_choice_joins_the_ensemble_only_beyond_the_noise():
    from hopscope.calibration.build import model_choice
    from hopscope.calibration.lens import distortion_model
    from hopscope.calibration.rig import CameraState

    truth, views, lens, placements, rng = _close_setup(seed=13)
    plane = solve_plane(placements, BOARD, lens.camera_matrix, lens.dist_coeffs)
    nominal = CameraState(lens.camera_matrix, lens.dist_coeffs, plane.rotation, plane.translation)
    # a noise ensemble without spread: any difference of the other model is beyond it
    tight = model_choice(views, lens, placements, BOARD, plane, [nominal] * 3)
    assert tight.distortion_model != distortion_model(lens.flags)
    assert tight.max_difference_m > 0 and tight.included
    # an ensemble spread far wider than the models' difference leaves the choice out
    far = CameraState(
        lens.camera_matrix, lens.dist_coeffs, plane.rotation, plane.translation + [0.5, 0.0, 0.0]
    )
    loose = model_choice(views, lens, placements, BOARD, plane, [far] * 3)
    assert not loose.included and loose.noise_spread_m > loose.max_difference_m
    # the tangential terms' other choice (fitted ↔ zero): this lens has p1, p2 of 1e-3 and the data
    # reject zero, so holding them there is no reasonable alternative, however tight the ensemble
    tangential = model_choice(views, lens, placements, BOARD, plane, [nominal] * 3, term="tangential")
    assert tangential.term == "tangential" and not tangential.included and tangential.lens is None
    assert json.loads(json.dumps(tangential.to_dict(), allow_nan=False))["max_difference_m"] is None
    # a lens without tangential distortion: zero is a fair alternative, included beyond the noise
    flat = np.array([CLOSE_DIST[0], CLOSE_DIST[1], 0.0, 0.0, 0.0])
    _, views, lens, placements, _ = _close_setup(seed=13, dist=flat)
    plane = solve_plane(placements, BOARD, lens.camera_matrix, lens.dist_coeffs)
    nominal = CameraState(lens.camera_matrix, lens.dist_coeffs, plane.rotation, plane.translation)
    tangential = model_choice(views, lens, placements, BOARD, plane, [nominal] * 3, term="tangential")
    assert tangential.lens is not None and tangential.included and tangential.max_difference_m > 0
    assert "p1, p2" in distortion_model(lens.flags) and "p1, p2" not in tangential.distortion_model
    assert ("k3" in tangential.distortion_model) == ("k3" in distortion_model(lens.flags))
    np.testing.assert_array_equal(tangential.lens.dist_coeffs[2:4], 0.0)
