"""Lens calibration (intrinsics and distortion) from grid corners seen in several views.

A pure function of point lists: detection from images is in :mod:`calibration.grid`.

Conventions
-----------
Pixel points are (u, v) in OpenCV order, pixel centres at integers; board points in metres.

References
----------
Zhang, Z. (2000). A flexible new technique for camera calibration. IEEE TPAMI 22(11):1330–1334
(closed-form start from plane homographies, then maximum-likelihood refinement, as in
cv2.calibrateCamera).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field

import cv2
import numpy as np

#: Fewest usable lens views: 5 distortion and 4 intrinsic parameters need several well-spread planes
#: (Zhang 2000 needs ≥ 3 for the intrinsics alone). # common practice, no published source
MIN_LENS_VIEWS = 5

#: A view whose own RMS reprojection error exceeds OUTLIER_FACTOR × the median view's (and
#: OUTLIER_FLOOR_PX) is dropped as a bad detection. # common practice, no published source
OUTLIER_FACTOR = 4.0
OUTLIER_FLOOR_PX = 0.5

#: Frame coverage: the frame is cut into COVERAGE_CELLS (cols, rows); the share of cells holding a corner
#: from some view below POOR_COVERAGE_FRACTION gives a warning (distortion then extrapolates to the edges).
COVERAGE_CELLS = (8, 6)
POOR_COVERAGE_FRACTION = 0.6
#: Corners should reach within this fraction of the frame's size from every edge; beyond them the
#: distortion model extrapolates (on lane-close renders, 114 px short of the left edge gave ≈ 0.9 mm error
#: at the edge at 2 m [measured]).
EDGE_REACH_FRACTION = 0.05

#: Levenberg–Marquardt stopping rule for cv2.calibrateCamera.
CALIB_CRITERIA = (cv2.TERM_CRITERIA_COUNT | cv2.TERM_CRITERIA_EPS, 100, 1e-12)

#: k3 (the sixth-order radial term) is kept only when it is this many standard errors from zero; otherwise
#: the lens is refitted with k3 = 0 (CALIB_FIX_K3). Without views near the frame's corners k3 is poorly
#: determined and, left free, bends the distortion where no corner constrains it. The ensemble repeats the
#: same choice on each resample, so its spread includes the model choice. # common practice, no published
#: source (parsimony rule; Bevington & Robinson 2003, sec. 11.4, for testing an added term)
K3_SIGNIFICANCE = 2.0

#: Names of cv2.calibrateCameraExtended's stdDeviationsIntrinsics, in its order.
INTRINSIC_NAMES = ("fx", "fy", "cx", "cy", "k1", "k2", "p1", "p2", "k3", "k4", "k5", "k6",
                   "s1", "s2", "s3", "s4", "tau_x", "tau_y")  # fmt: skip


@dataclass(frozen=True, eq=False)
class ViewPoints:
    """The grid corners of one view.

    Attributes
    ----------
    source : the view's name (file or ``video#frame``).
    image_points : (N, 2) corner pixels (u, v), px.
    object_points : (N, 3) the same corners on the board, m (z = 0).
    """

    source: str
    image_points: np.ndarray
    object_points: np.ndarray

    def __post_init__(self) -> None:
        img = np.asarray(self.image_points, float).reshape(-1, 2)
        obj = np.asarray(self.object_points, float).reshape(-1, 3)
        if len(img) != len(obj) or len(img) < 4:
            raise ValueError(
                f"{self.source}: need matching image and board points (≥ 4), got {len(img)} and {len(obj)}"
            )
        object.__setattr__(self, "image_points", img)
        object.__setattr__(self, "object_points", obj)


@dataclass(frozen=True, eq=False)
class LensCalibration:
    """Result of :func:`calibrate_lens`.

    Attributes
    ----------
    image_size : (w, h), px.
    camera_matrix : (3, 3) K, px.
    dist_coeffs : (5,) k1, k2, p1, p2, k3 (k3 = 0 when it was not significant).
    rms_px : RMS reprojection error over all corners of the views used, px (2-D distance).
    views_used : names of the views used.
    per_view_rms_px : RMS reprojection error of each used view, px.
    views_rejected : (name, reason) of each view left out.
    intrinsics_std : standard deviations of the intrinsics (``fx``, ``fy``, ``cx``, ``cy`` px, ``k1`` ...),
        from cv2.calibrateCameraExtended.
    frame_coverage : share of the frame's cells (:data:`COVERAGE_CELLS`) holding a corner, 0..1.
    corner_extent_px : (u_min, u_max, v_min, v_max) of all corners of the views used, px.
    warnings : warnings for the user.
    flags : the cv2.CALIB_* flags of the final fit (CALIB_FIX_K3 when k3 was dropped).
    k3_rule : how k3 was chosen ("auto", "free" or "off"); resamples repeat it.
    """

    image_size: tuple[int, int]
    camera_matrix: np.ndarray
    dist_coeffs: np.ndarray
    rms_px: float
    views_used: tuple[str, ...]
    per_view_rms_px: tuple[float, ...]
    views_rejected: tuple[tuple[str, str], ...]
    intrinsics_std: dict[str, float]
    frame_coverage: float
    corner_extent_px: tuple[float, float, float, float] = (0.0, 0.0, 0.0, 0.0)
    warnings: tuple[str, ...] = field(default=())
    flags: int = 0
    k3_rule: str = "auto"


def frame_coverage(
    points: Sequence[np.ndarray], image_size: tuple[int, int], cells: tuple[int, int] = COVERAGE_CELLS
) -> float:
    """Share (0..1) of the frame's ``cells`` grid that holds at least one corner."""
    w, h = image_size
    hit = np.zeros((cells[1], cells[0]), bool)
    for p in points:
        p = np.asarray(p, float).reshape(-1, 2)
        ci = np.clip((p[:, 0] / w * cells[0]).astype(int), 0, cells[0] - 1)
        ri = np.clip((p[:, 1] / h * cells[1]).astype(int), 0, cells[1] - 1)
        hit[ri, ci] = True
    return float(hit.mean())


def _calibrate(views: Sequence[ViewPoints], image_size, k0=None, d0=None, flags: int = 0):
    obj = [v.object_points.astype(np.float32) for v in views]
    img = [v.image_points.astype(np.float32).reshape(-1, 1, 2) for v in views]
    if k0 is None:
        k0, d0 = np.eye(3), np.zeros(5)
    else:
        flags |= cv2.CALIB_USE_INTRINSIC_GUESS
    try:
        return cv2.calibrateCameraExtended(
            obj, img, tuple(image_size), np.array(k0, float), np.array(d0, float).reshape(-1, 1), flags=flags,
            criteria=CALIB_CRITERIA,
        )  # fmt: skip
    except cv2.error as exc:
        detail = " ".join(str(exc).split()).split(") ")[-1][:160]
        raise ValueError(
            f"--views: the lens calibration failed on these {len(views)} views ({detail}); "
            "use more views at varied angles"
        ) from None


def _calibrate_selecting_k3(views, image_size, k0, d0, flags: int, k3: str = "auto"):
    """Calibrate with k3 free; with ``k3="auto"`` refit with k3 = 0 when it is not significant
    (:data:`K3_SIGNIFICANCE`), ``"free"`` keeps it, ``"off"`` fixes it at 0 from the start.
    Returns (rms, K, dist, std of intrinsics, per-view RMS, flags used)."""
    if k3 == "off":
        flags |= cv2.CALIB_FIX_K3
        rms, k, d, _, _, std_int, _, per_view = _calibrate(views, image_size, k0, d0, flags=flags)
        return rms, k, d, std_int, np.ravel(per_view), flags
    base = flags & ~cv2.CALIB_FIX_K3
    rms, k, d, _, _, std_int, _, per_view = _calibrate(views, image_size, k0, d0, flags=base)
    k3_value, s3 = float(np.ravel(d)[4]), float(np.ravel(std_int)[8])
    if k3 == "auto" and not (abs(k3_value) > K3_SIGNIFICANCE * s3):
        fixed = base | cv2.CALIB_FIX_K3
        if d0 is not None:
            d0 = np.ravel(d0).copy()
            d0[4] = 0.0
        rms, k, d, _, _, std_int, _, per_view = _calibrate(views, image_size, k0, d0, flags=fixed)
        return rms, k, d, std_int, np.ravel(per_view), fixed
    return rms, k, d, std_int, np.ravel(per_view), base


def calibrate_lens(
    views: Sequence[ViewPoints],
    image_size: tuple[int, int],
    *,
    rejected: Sequence[tuple[str, str]] = (),
    min_views: int = MIN_LENS_VIEWS,
    flags: int = 0,
    k3: str = "auto",
    reject_outliers: bool = True,
) -> LensCalibration:
    """Zhang's calibration of intrinsics and distortion (k1, k2, p1, p2, k3) from corner lists.

    Parameters
    ----------
    views : the corners of each view where the grid was found.
    image_size : (w, h), px.
    rejected : (name, reason) of views already left out (grid not found), carried into the result.
    min_views : fewest usable views; fewer raises ValueError.
    flags : extra cv2.CALIB_* flags (e.g. CALIB_FIX_ASPECT_RATIO; CALIB_FIX_K3 follows ``k3``).
    k3 : "auto" (kept only when significant, :data:`K3_SIGNIFICANCE`), "free" or "off".
    reject_outliers : drop views whose residual is an outlier (:data:`OUTLIER_FACTOR`) and refit.

    Returns
    -------
    LensCalibration. Views whose own reprojection error is an outlier (:data:`OUTLIER_FACTOR`) are
    dropped, listed with the reason, and the calibration is repeated without them.

    References
    ----------
    Zhang (2000), IEEE TPAMI 22:1330, sec. 3 (closed form) and 3.3 (maximum likelihood).
    """
    views = list(views)
    rejected = list(rejected)
    if len(views) < min_views:
        raise ValueError(
            f"--views: only {len(views)} usable lens view(s) with the grid found, need at least {min_views}"
        )
    if k3 not in ("auto", "free", "off"):
        raise ValueError(f"k3: expected 'auto', 'free' or 'off', got {k3!r}")
    rms, k, d, std_int, per_view, used = _calibrate_selecting_k3(views, image_size, None, None, flags, k3)
    med = float(np.median(per_view))
    bad = [i for i, e in enumerate(per_view) if e > max(OUTLIER_FACTOR * med, OUTLIER_FLOOR_PX)]
    if reject_outliers and bad and len(views) - len(bad) >= min_views:
        rejected += [(views[i].source, f"reprojection error {per_view[i]:.2f} px is an outlier") for i in bad]
        views = [v for i, v in enumerate(views) if i not in set(bad)]
        rms, k, d, std_int, per_view, used = _calibrate_selecting_k3(views, image_size, None, None, flags, k3)
    flags = used
    std = {n: float(s) for n, s in zip(INTRINSIC_NAMES, np.ravel(std_int), strict=False)}
    cover = frame_coverage([v.image_points for v in views], image_size)
    allpts = np.vstack([v.image_points for v in views])
    extent = (
        float(allpts[:, 0].min()),
        float(allpts[:, 0].max()),
        float(allpts[:, 1].min()),
        float(allpts[:, 1].max()),
    )
    w, h = image_size
    gaps = {
        "left": extent[0],
        "right": w - 1 - extent[1],
        "top": extent[2],
        "bottom": h - 1 - extent[3],
    }
    limit = {"left": w, "right": w, "top": h, "bottom": h}
    short = [
        f"{side} by {gap:.0f} px" for side, gap in gaps.items() if gap > EDGE_REACH_FRACTION * limit[side]
    ]
    warns = []
    if short:
        warns.append(
            "lens-view corners stop short of the frame's edges (" + ", ".join(short) + "): the distortion is "
            "extrapolated there and the mapping is less certain (see the ensemble); add views with the board "
            "touching those edges"
        )
    if cover < POOR_COVERAGE_FRACTION:
        warns.append(
            f"lens views cover only {cover:.0%} of the frame with corners: distortion near the uncovered edges "
            "is extrapolated; add views with the board near the frame's edges and corners"
        )
    return LensCalibration(
        image_size=(int(image_size[0]), int(image_size[1])),
        camera_matrix=np.array(k, float),
        dist_coeffs=np.ravel(d).astype(float),
        rms_px=float(rms),
        views_used=tuple(v.source for v in views),
        per_view_rms_px=tuple(float(e) for e in per_view),
        views_rejected=tuple(rejected),
        intrinsics_std=std,
        frame_coverage=cover,
        corner_extent_px=extent,
        warnings=tuple(warns),
        flags=flags,
        k3_rule=k3,
    )


def recalibrate(views: Sequence[ViewPoints], start: LensCalibration) -> tuple[np.ndarray, np.ndarray]:
    """Re-run the calibration on ``views`` (e.g. a resample) starting from ``start``, with the same k3
    rule as :func:`calibrate_lens`; returns (K, dist)."""
    _, k, d, *_ = _calibrate_selecting_k3(
        views, start.image_size, start.camera_matrix, start.dist_coeffs, start.flags, start.k3_rule
    )
    return np.array(k, float), np.ravel(d).astype(float)


def distortion_model(flags: int) -> str:
    """Names of the fitted distortion terms for ``flags``."""
    return (
        "k1, k2"
        + ("" if flags & cv2.CALIB_ZERO_TANGENT_DIST else ", p1, p2")
        + ("" if flags & cv2.CALIB_FIX_K3 else ", k3")
    )
