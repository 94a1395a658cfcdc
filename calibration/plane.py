"""The flight plane's pose from board placements standing in it, seen by the calibrated camera.

All placements' corners are solved together for one camera pose (PnP through the full lens model, not
a free 8-parameter homography), each placement's board shifted downrange by its taped offset.

Conventions
-----------
World frame: x along the board's rows toward image right (downrange), y up, z = x × y toward the camera,
metres; origin at the first placement's first inner corner (top left in the image). Camera pose is
world → camera, ``X_cam = R X_world + t``. Pixels (u, v) in OpenCV order.

References
----------
Collins, T. & Bartoli, A. (2014). Infinitesimal plane-based pose estimation. IJCV 109:252–286
(IPPE, the planar start); Levenberg–Marquardt refinement of the reprojection error (cv2.solvePnPRefineLM).
"""

from __future__ import annotations

import dataclasses
from collections.abc import Sequence
from dataclasses import dataclass

import cv2
import numpy as np

from .grid import GridSpec

#: A placement whose RMS residual after the joint pose exceeds BAD_PLACEMENT_FACTOR × the lens RMS
#: (and BAD_PLACEMENT_FLOOR_PX) is reported: its taped offset or the board's height is probably off.
#: # common practice, no published source
BAD_PLACEMENT_FACTOR = 4.0
BAD_PLACEMENT_FLOOR_PX = 0.5

#: The placements' spacing seen in the image (each board's own pose) may differ from the taped offsets by
#: this fraction before the calibration stops: a wrong --square-mm scales the seen spacing, an offset typed
#: in millimetres inflates the taped one. (A single board's pose puts its neighbour to well under 1 %
#: [measured on lane renders].) # common practice, no published source
SPACING_TOLERANCE = 0.03
#: Seen/taped ratios in this range mean offsets typed in millimetres.
MM_FOR_M_RATIO = (300.0, 3000.0)

#: A solved offset further than this many tape σ from the taped one is reported.
OFFSET_WARN_SIGMA = 4.0
#: Floor of the corner noise that weighs the reprojection residuals against the tape, px.
MIN_PIXEL_SIGMA_PX = 0.02

_REFINE_CRITERIA = (cv2.TERM_CRITERIA_COUNT | cv2.TERM_CRITERIA_EPS, 200, 1e-14)


@dataclass(frozen=True, eq=False)
class Placement:
    """One board placement in the flight plane.

    Attributes
    ----------
    source : the plane image's name.
    image_points : (rows*cols, 2) corners (u, v) in reading order, px.
    offset_m : taped shift downrange from the first placement, m (first: 0).
    grid : (cols, rows) corners along the image rows and down the columns as seen, or None for the
        board as ``--grid`` gives it (a board standing turned by 90° is seen transposed).
    """

    source: str
    image_points: np.ndarray
    offset_m: float
    grid: tuple[int, int] | None = None

    def board(self, spec: GridSpec) -> GridSpec:
        """``spec`` oriented as this placement stands."""
        return spec if self.grid is None else spec.oriented(*self.grid)

    def __post_init__(self) -> None:
        object.__setattr__(self, "image_points", np.asarray(self.image_points, float).reshape(-1, 2))
        if not np.isfinite(self.offset_m):
            raise ValueError(f"{self.source}: offset must be a finite number of metres")
        object.__setattr__(self, "offset_m", float(self.offset_m))


@dataclass(frozen=True, eq=False)
class PlanePose:
    """Result of :func:`solve_plane`.

    Attributes
    ----------
    rotation, translation : world → camera pose (t in m).
    rms_px : RMS reprojection error over all placements' corners, px.
    per_placement_rms_px : each placement's RMS reprojection error, px.
    coverage_m : (x_min, x_max, y_min, y_max) of the boards' corners on the plane, m.
    warnings : warnings for the user.
    offsets_m : each placement's downrange offset as solved, m (the taped ones when the tape is taken as
        exact; else the image's evidence combined with the tape, :func:`solve_with_offsets`).
    offset_stderr_m : standard error of each solved offset, m (0 for the first placement and for taped ones).
    """

    rotation: np.ndarray
    translation: np.ndarray
    rms_px: float
    per_placement_rms_px: tuple[float, ...]
    coverage_m: tuple[float, float, float, float]
    warnings: tuple[str, ...] = ()
    offsets_m: tuple[float, ...] = ()
    offset_stderr_m: tuple[float, ...] = ()


def placement_world_points(spec: GridSpec, placements: Sequence[Placement]) -> np.ndarray:
    """(M, 3) world positions of all placements' corners (each board shifted by its offset), m."""
    return np.concatenate([p.board(spec).board_points(p.offset_m) for p in placements])


def solve_pose(
    world: np.ndarray, image: np.ndarray, camera_matrix: np.ndarray, dist_coeffs: np.ndarray, start=None
) -> tuple[np.ndarray, np.ndarray]:
    """World → camera (R, t) from coplanar (z = 0) world points and their pixels, through the lens model.

    IPPE start (Collins & Bartoli 2014) unless ``start`` (rvec, tvec) is given, then LM refinement.
    """
    obj = np.ascontiguousarray(world, np.float64).reshape(-1, 1, 3)
    img = np.ascontiguousarray(image, np.float64).reshape(-1, 1, 2)
    k = np.asarray(camera_matrix, np.float64)
    d = np.asarray(dist_coeffs, np.float64)
    if start is None:
        ok, rvec, tvec = cv2.solvePnP(obj, img, k, d, flags=cv2.SOLVEPNP_IPPE)
        if not ok:
            raise ValueError("plane pose: PnP found no solution")
    else:
        rvec, tvec = (np.array(s, np.float64).reshape(3, 1) for s in start)
    rvec, tvec = cv2.solvePnPRefineLM(obj, img, k, d, rvec, tvec, criteria=_REFINE_CRITERIA)
    rot, _ = cv2.Rodrigues(rvec)
    return rot, tvec.ravel()


def pose_residual_px(
    world: np.ndarray, image: np.ndarray, camera_matrix: np.ndarray, dist_coeffs: np.ndarray
) -> float:
    """RMS reprojection residual (2-D distance, px) of coplanar points after their own best pose
    (:func:`solve_pose`) under the lens model; inf when no pose is found."""
    try:
        rot, t = solve_pose(world, image, camera_matrix, dist_coeffs)
    except (ValueError, cv2.error):
        return float("inf")
    err = project_points(world, rot, t, camera_matrix, dist_coeffs) - np.asarray(image, float).reshape(-1, 2)
    return float(np.sqrt(np.mean(np.sum(err**2, axis=1))))


def solve_plane(
    placements: Sequence[Placement],
    spec: GridSpec,
    camera_matrix: np.ndarray,
    dist_coeffs: np.ndarray,
    *,
    lens_rms_px: float = 0.0,
    offset_sigma_m: float = 0.0,
) -> PlanePose:
    """One camera pose from all board placements together.

    Parameters
    ----------
    placements : the board placements (corners in reading order, taped offsets).
    spec : the grid.
    camera_matrix, dist_coeffs : the calibrated lens.
    lens_rms_px : the lens calibration's RMS, px, to judge each placement's residual.
    offset_sigma_m : standard error of the taped offsets, m: with more than one placement and a positive
        value, the offsets after the first are solved with the pose, the tape as their prior
        (:func:`solve_with_offsets`); 0 takes the tape as exact.

    Returns
    -------
    PlanePose with per-placement residuals and the covered region.

    Notes
    -----
    World frame: x downrange along the rows, y up, z toward the camera, origin at the first placement's
    first inner corner; the boards are taken as level and in one plane.
    """
    if not placements:
        raise ValueError("--plane: need at least one plane image")
    check_spacing(placements, spec, camera_matrix, dist_coeffs)
    image = np.concatenate([p.image_points for p in placements])
    rot, t = solve_pose(placement_world_points(spec, placements), image, camera_matrix, dist_coeffs)
    offsets = np.array([p.offset_m for p in placements], float)
    off_err = np.zeros(len(placements))
    if len(placements) > 1 and offset_sigma_m > 0:
        pixel_sigma = max(lens_rms_px / np.sqrt(2.0), MIN_PIXEL_SIGMA_PX)
        rot, t, offsets, off_err = solve_with_offsets(
            placements, spec, camera_matrix, dist_coeffs, offsets, offset_sigma_m, pixel_sigma, (rot, t)
        )
    warns = []
    for p, o in zip(placements, offsets, strict=True):
        if offset_sigma_m > 0 and abs(o - p.offset_m) > OFFSET_WARN_SIGMA * offset_sigma_m:
            warns.append(
                f"{p.source}: the image puts this placement at {o:.4f} m downrange, the tape at {p.offset_m:g} m "
                f"({1e3 * (o - p.offset_m):+.1f} mm): check the taped offset; the image's value is used"
            )
    placements = [dataclasses.replace(p, offset_m=float(o)) for p, o in zip(placements, offsets, strict=True)]
    world = placement_world_points(spec, placements)
    centre = -rot.T @ t
    if centre[2] <= 0:
        raise ValueError(
            f"{placements[0].source}: no single plane fits the placements (the camera would stand behind the "
            "board): check the offsets (metres downrange from the first) and --square-mm"
        )
    proj = project_points(world, rot, t, camera_matrix, dist_coeffs)
    err = np.linalg.norm(proj - image, axis=1)
    per, start = [], 0
    for p in placements:
        n = len(p.image_points)
        per.append(float(np.sqrt(np.mean(err[start : start + n] ** 2))))
        start += n
    limit = max(BAD_PLACEMENT_FACTOR * lens_rms_px, BAD_PLACEMENT_FLOOR_PX)
    for p, e in zip(placements, per, strict=True):
        if e > limit and len(placements) > 1:
            warns.append(
                f"{p.source}: plane placement residual {e:.2f} px is large: check its offset "
                f"({p.offset_m:g} m), its height and that it stands in the same plane"
            )
    x0 = min(p.offset_m for p in placements)
    x1 = max(p.offset_m + (p.board(spec).cols - 1) * spec.square_m for p in placements)
    cover = (x0, x1, -max(p.board(spec).rows - 1 for p in placements) * spec.square_m, 0.0)
    return PlanePose(
        rot, t, float(np.sqrt(np.mean(err**2))), tuple(per), cover, tuple(warns),
        tuple(float(o) for o in offsets), tuple(float(e) for e in off_err),
    )  # fmt: skip


def solve_with_offsets(
    placements: Sequence[Placement],
    spec: GridSpec,
    camera_matrix: np.ndarray,
    dist_coeffs: np.ndarray,
    prior_offsets_m: np.ndarray,
    offset_sigma_m: float,
    pixel_sigma_px: float,
    start: tuple[np.ndarray, np.ndarray],
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Camera pose and the placements' offsets together: reprojection residuals / pixel σ plus
    (offset − tape) / tape σ for each placement after the first (a Gaussian prior; Levenberg–Marquardt).

    The image fixes where each board stood far better than a tape (a 0.05 px corner noise over 54 corners
    puts a board to a few hundredths of a millimetre at 2 m), so a taped offset's error must not be carried
    into the error bars whole.

    Returns
    -------
    (R, t, offsets m, their standard errors m) — the first offset stays the origin's (error 0).

    References
    ----------
    Bevington & Robinson (2003), sec. 8.1 (parameter errors from the curvature matrix); a prior as an
    extra residual: Gelman et al. (2013), Bayesian Data Analysis, 3rd ed., sec. 14.8 (from memory).
    """
    from scipy.optimize import least_squares

    k = np.asarray(camera_matrix, float)
    d = np.asarray(dist_coeffs, float)
    boards = [p.board(spec).board_points() for p in placements]
    image = np.concatenate([p.image_points for p in placements])
    prior = np.asarray(prior_offsets_m, float)
    n = len(placements)

    def world(off: np.ndarray) -> np.ndarray:
        pts = [b.copy() for b in boards]
        for i in range(n):
            pts[i][:, 0] += off[i]
        return np.concatenate(pts)

    def resid(x: np.ndarray) -> np.ndarray:
        off = np.concatenate([[prior[0]], x[6:]])
        proj = _project_rvec(world(off), x[:3], x[3:6], k, d)
        return np.concatenate(
            [((proj - image) / pixel_sigma_px).ravel(), (x[6:] - prior[1:]) / offset_sigma_m]
        )

    rvec0 = cv2.Rodrigues(np.asarray(start[0], float))[0].ravel()
    x0 = np.concatenate([rvec0, np.asarray(start[1], float).ravel(), prior[1:]])
    res = least_squares(resid, x0, method="lm", x_scale="jac", xtol=1e-12, ftol=1e-12)
    try:
        cov = np.linalg.inv(res.jac.T @ res.jac)
        err = np.sqrt(np.clip(np.diag(cov)[6:], 0, None))
    except np.linalg.LinAlgError:
        err = np.full(n - 1, offset_sigma_m)
    rot = cv2.Rodrigues(res.x[:3])[0]
    offsets = np.concatenate([[prior[0]], res.x[6:]])
    return rot, res.x[3:6].copy(), offsets, np.concatenate([[0.0], err])


def _project_rvec(world, rvec, tvec, k, d) -> np.ndarray:
    img, _ = cv2.projectPoints(np.asarray(world, float).reshape(-1, 1, 3), rvec, tvec, k, d)
    return img.reshape(-1, 2)


def check_spacing(
    placements: Sequence[Placement], spec: GridSpec, camera_matrix: np.ndarray, dist_coeffs: np.ndarray
) -> tuple[float, ...]:
    """Compare the placements' spacing seen in the image with their taped offsets.

    Each board's own pose (its corners alone, through the lens) puts it in the camera frame; the seen
    spacing is the shift of each board's first corner from the first placement's, along that board's rows.

    Returns
    -------
    The ratios seen / taped of the placements after the first (empty for one placement).

    Raises
    ------
    ValueError
        A ratio off 1 by more than :data:`SPACING_TOLERANCE`, naming the placement and the likely cause:
        offsets typed in millimetres (ratio near 1/1000) or a wrong square size or offset.
    """
    if len(placements) < 2:
        return ()
    poses = []
    for p in placements:
        rot, t = solve_pose(p.board(spec).board_points(), p.image_points, camera_matrix, dist_coeffs)
        poses.append((rot, t))
    rot0, t0 = poses[0]
    ratios = []
    for p, (_, t) in zip(placements[1:], poses[1:], strict=True):
        taped = p.offset_m - placements[0].offset_m
        seen = float((t - t0) @ rot0[:, 0])
        if taped == 0:
            raise ValueError(f"--plane {p.source}: offset {p.offset_m:g} m is the first placement's too")
        ratio = seen / taped
        ratios.append(ratio)
        if abs(ratio - 1.0) <= SPACING_TOLERANCE:
            continue
        lo, hi = MM_FOR_M_RATIO
        if lo <= 1.0 / max(abs(ratio), 1e-12) <= hi:
            raise ValueError(
                f"--plane {p.source}:{p.offset_m:g}: the board stands {seen:.3g} m from the first in the image, "
                f"the offset says {taped:g} m: offsets are metres (typed in millimetres?)"
            )
        raise ValueError(
            f"--plane {p.source}: the placements' spacing seen in the image ({seen:.4g} m) is {ratio:.3g}× "
            f"the taped offset ({taped:g} m): the square size (--square-mm {spec.square_m * 1e3:g}) or this "
            "offset is wrong"
        )
    return tuple(ratios)


def project_points(world, rot, t, k, d) -> np.ndarray:
    """World points (N, 3) through the pose (rotation matrix, translation) and the lens → pixels (N, 2)."""
    rvec, _ = cv2.Rodrigues(rot)
    img, _ = cv2.projectPoints(np.asarray(world, float).reshape(-1, 1, 3), rvec, t, k, d)
    return img.reshape(-1, 2)
