"""End-to-end check of the built-in lane-close render against OpenCV's own calibration (slow)."""

from __future__ import annotations

import cv2
import numpy as np
import pytest

from hopscope.scenes import BoardSpec, board_corners, builtin_scene, load_truth, render_scene

#: findChessboardCornersSB on the noisy renders vs the projected true corners, RMS px.
NOISY_SB_RMS_TOL_PX = 0.2
#: Zhang's calibration (cv2.calibrateCamera) from the rendered lens views vs the true intrinsics.
FOCAL_REL_TOL = 2e-3
PRINCIPAL_TOL_PX = 2.0
K1_ABS_TOL = 0.01
#: The tracked BB (median-background centroid in the decoded mp4) vs the truth, RMS px.
DECODED_CENTROID_RMS_TOL_PX = 0.25
#: Lens-view corners span at least this fraction of the image width and height.
MIN_COVERAGE = 0.75


@pytest.mark.slow
def test_lane_close_render_calibrates_and_shows_the_bb_where_the_truth_says(tmp_path):
    scene = render_scene(builtin_scene("lane-close"), tmp_path / "lane-close", rng=0)
    truth = load_truth(scene.truth_path)
    b = truth["board"]
    board = BoardSpec(cols=b["cols"], rows=b["rows"], square_m=b["square_m"], margin_m=b["margin_m"])
    cam = truth["camera"]
    k_true = np.array(cam["camera_matrix"])
    d_true = np.array(cam["dist_coeffs"])
    w, h = cam["image_size"]
    obj = board_corners(board).astype(np.float32)
    objs, imgs = [], []
    for view in truth["lens_views"] + truth["plane_views"]:
        img = cv2.imread(str(scene.out_dir / view["file"]), cv2.IMREAD_GRAYSCALE)
        ok, corners = cv2.findChessboardCornersSB(
            img,
            (board.cols, board.rows),
            flags=cv2.CALIB_CB_NORMALIZE_IMAGE | cv2.CALIB_CB_EXHAUSTIVE | cv2.CALIB_CB_ACCURACY,
        )
        assert ok, view["file"]
        rvec, _ = cv2.Rodrigues(np.array(view["rotation"]))
        true, _ = cv2.projectPoints(obj.astype(float), rvec, np.array(view["translation"]), k_true, d_true)
        err = np.linalg.norm(corners.reshape(-1, 2) - true.reshape(-1, 2), axis=1)
        assert np.sqrt(np.mean(err**2)) < NOISY_SB_RMS_TOL_PX, view["file"]
        if view in truth["lens_views"]:
            objs.append(obj)
            imgs.append(corners.astype(np.float32))
    pts = np.concatenate(imgs).reshape(-1, 2)
    assert np.ptp(pts[:, 0]) > MIN_COVERAGE * w and np.ptp(pts[:, 1]) > MIN_COVERAGE * h
    # Zhang (2000), "A flexible new technique for camera calibration", IEEE TPAMI 22:1330, as implemented by
    # OpenCV's calibrateCamera: the rendered views must give back the lens they were rendered with.
    _, k, d, _, _ = cv2.calibrateCamera(objs, imgs, (w, h), None, None)
    assert k[0, 0] == pytest.approx(k_true[0, 0], rel=FOCAL_REL_TOL)
    assert k[1, 1] == pytest.approx(k_true[1, 1], rel=FOCAL_REL_TOL)
    assert np.hypot(k[0, 2] - k_true[0, 2], k[1, 2] - k_true[1, 2]) < PRINCIPAL_TOL_PX
    assert d.ravel()[0] == pytest.approx(d_true[0], abs=K1_ABS_TOL)
    # the BB in the decoded (lossy) clip sits where the truth says
    cap = cv2.VideoCapture(str(scene.flight_clip_path))
    frames = []
    while True:
        ok, frame = cap.read()
        if not ok:
            break
        frames.append(frame[:, :, 0].astype(float))
    cap.release()
    fl = truth["flight"]
    assert len(frames) == fl["n_frames"]
    first = min(f["frame"] for f in fl["frames"] if f["visible"])
    background = np.median(np.stack(frames[: first - 1]), axis=0)
    errs = []
    for f in fl["frames"]:
        if not (f["visible"] and 8 < f["u_px"] < w - 9 and 8 < f["v_px"] < h - 9):
            continue
        r0, c0 = int(round(f["v_px"])) - 5, int(round(f["u_px"])) - 5
        diff = np.clip(
            frames[f["frame"]][r0 : r0 + 11, c0 : c0 + 11] - background[r0 : r0 + 11, c0 : c0 + 11] - 3.0,
            0.0,
            None,
        )
        rr, cc = np.mgrid[r0 : r0 + 11, c0 : c0 + 11]
        errs.append(
            np.hypot((diff * cc).sum() / diff.sum() - f["u_px"], (diff * rr).sum() / diff.sum() - f["v_px"])
        )
    assert len(errs) >= 40
    assert np.sqrt(np.mean(np.square(errs))) < DECODED_CENTROID_RMS_TOL_PX
