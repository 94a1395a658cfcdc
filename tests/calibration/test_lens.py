"""Lens calibration from synthetic corner lists (a known camera projected with OpenCV)."""

from __future__ import annotations

import numpy as np
import pytest
from calib_synth import IMAGE_SIZE, TRUE_DIST, TRUE_K, synthetic_lens_views

from hopscope.calibration.grid import GridSpec
from hopscope.calibration.lens import MIN_LENS_VIEWS, ViewPoints, calibrate_lens, frame_coverage

SPEC = GridSpec(9, 6, 0.04)
#: The issue's acceptance: focal length and principal point within 0.2 %.
INTRINSICS_RTOL = 2e-3
#: Distortion recovered: the mapped displacement field agrees within this many px over the frame.
DISTORTION_FIELD_TOL_PX = 0.15
#: ... of a lens whose distortion moves points by more than this near the frame edges.
DISTORTION_PRESENT_PX = 10.0
#: Reported σ of fx must explain the actual error (within this many σ).
SIGMA_EXPLAINS = 4.0


def _distortion_field(d):
    """Distortion displacement (px at the true focal length) over normalized points of the inner frame."""
    import cv2

    u, v = np.meshgrid(
        np.linspace(0.05, 0.95, 15) * IMAGE_SIZE[0], np.linspace(0.05, 0.95, 9) * IMAGE_SIZE[1]
    )
    xn = (np.column_stack([u.ravel(), v.ravel()]) - TRUE_K[:2, 2]) / np.diag(TRUE_K)[:2]
    obj = np.column_stack([xn, np.ones(len(xn))])
    img, _ = cv2.projectPoints(obj.reshape(-1, 1, 3), np.zeros(3), np.zeros(3), TRUE_K, d)
    ideal = xn * np.diag(TRUE_K)[:2] + TRUE_K[:2, 2]
    return img.reshape(-1, 2) - ideal


def test_recovers_known_camera_from_noisy_corners():
    # Zhang (2000), IEEE TPAMI 22:1330: a camera is recoverable from >= 3 views of a plane; we check the
    # OpenCV implementation through our wrapper against the camera we projected with.
    rng = np.random.default_rng(1)
    views = synthetic_lens_views(SPEC, 12, rng)
    cal = calibrate_lens(views, IMAGE_SIZE)
    k = cal.camera_matrix
    for i, j in [(0, 0), (1, 1), (0, 2), (1, 2)]:
        assert abs(k[i, j] - TRUE_K[i, j]) / TRUE_K[i, j] < INTRINSICS_RTOL
    assert abs(k[0, 0] - TRUE_K[0, 0]) < SIGMA_EXPLAINS * cal.intrinsics_std["fx"]
    assert abs(k[0, 2] - TRUE_K[0, 2]) < SIGMA_EXPLAINS * cal.intrinsics_std["cx"]
    field = _distortion_field(cal.dist_coeffs) - _distortion_field(TRUE_DIST)
    assert np.max(np.abs(_distortion_field(TRUE_DIST))) > DISTORTION_PRESENT_PX
    assert np.max(np.abs(field)) < DISTORTION_FIELD_TOL_PX
    assert len(cal.views_used) == 12 and cal.views_rejected == ()
    assert len(cal.per_view_rms_px) == 12
    # 0.05 px per axis noise -> 2-D RMS about 0.07 px
    assert 0.04 < cal.rms_px < 0.1


def test_outlier_view_is_rejected_and_listed():
    rng = np.random.default_rng(2)
    views = synthetic_lens_views(SPEC, 10, rng)
    bad = views[3]
    shuffled = bad.image_points.copy()
    shuffled[:9] = shuffled[:9][::-1]  # a mis-ordered first row: a wrong detection
    views[3] = ViewPoints(bad.source, shuffled, bad.object_points)
    cal = calibrate_lens(views, IMAGE_SIZE)
    assert [s for s, _ in cal.views_rejected] == [bad.source]
    assert "outlier" in cal.views_rejected[0][1]
    assert bad.source not in cal.views_used


def test_too_few_views_is_an_error():
    views = synthetic_lens_views(SPEC, MIN_LENS_VIEWS - 1, np.random.default_rng(3))
    with pytest.raises(ValueError, match=rf"^--views: only {MIN_LENS_VIEWS - 1} usable lens view"):
        calibrate_lens(views, IMAGE_SIZE)


def test_poor_frame_coverage_warns():
    rng = np.random.default_rng(4)
    views = synthetic_lens_views(SPEC, 8, rng)
    # keep only views whose corners lie in the left half of the frame; make more such by shifting
    centred = [ViewPoints(v.source, v.image_points * 0.45 + [30, 30], v.object_points) for v in views]
    assert frame_coverage([v.image_points for v in centred], IMAGE_SIZE) < 0.6
    cal = calibrate_lens(centred, IMAGE_SIZE)
    assert any("cover only" in w for w in cal.warnings)


def test_frame_coverage_counts_cells():
    pts = np.array([[1.0, 1.0], [1279.0, 719.0]])
    assert frame_coverage([pts], IMAGE_SIZE, (8, 6)) == pytest.approx(2 / 48)
