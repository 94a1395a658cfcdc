"""Put lens, plane and uncertainty together into a :class:`~calibration.rig.Rig` (pure, from point lists).

The calibration's own uncertainty is carried as an ensemble of perturbed camera states: each member
re-runs the lens calibration on a bootstrap resample of the lens views (starting from the nominal
solution), perturbs the plane corners by their measured noise and the taped offsets by their tape error,
and re-solves the plane pose. Mapping a track through every member gives the spread the calibration
leaves in the positions (and from there in speed and drag).

Conventions
-----------
World frame: x downrange, y up, z toward the camera, metres; pixels (u, v) in OpenCV order.

References
----------
Efron, B. & Tibshirani, R. J. (1993). An Introduction to the Bootstrap. Chapman & Hall, ch. 6
(bootstrap standard errors).
Zhang, Z. (2000). IEEE TPAMI 22:1330 (the lens calibration re-run on each resample).
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import cv2
import numpy as np

from hopscope.shared.parse import finite_or_none

from .dragbound import DragBound, drag_bound
from .grid import GridSpec
from .lens import K3_SIGNIFICANCE, LensCalibration, ViewPoints, distortion_model, recalibrate
from .plane import (
    Placement,
    PlanePose,
    placement_world_points,
    project_points,
    solve_plane,
    solve_pose,
    solve_with_offsets,
)
from .rig import CameraState, Rig

#: Ensemble members by default: enough for a spread to ±15 % (1/sqrt(2K)) at a second or two of work.
DEFAULT_ENSEMBLE_SIZE = 24

#: The distortion terms whose other choice is tried against the noise ensemble (:func:`model_choice`).
MODEL_TERMS = ("k3", "tangential")

#: Pixel grid (columns, rows) over the frame on which two distortion models' mappings are compared.
MODEL_PROBE_GRID = (9, 5)

#: Standard error of a taped downrange offset, m. # common practice, no published source (a steel tape
#: read to the millimetre over a few tens of metres, held straight along the flight line).
DEFAULT_OFFSET_SIGMA_M = 1.0e-3


@dataclass(frozen=True)
class CalibrationInputs:
    """How the rig was made, for its provenance (names, not data)."""

    lens_sources: tuple[str, ...] = ()
    plane_sources: tuple[str, ...] = ()
    extra: Mapping[str, Any] | None = None


def _rng(rng: int | np.random.Generator | None) -> np.random.Generator:
    return rng if isinstance(rng, np.random.Generator) else np.random.default_rng(rng)


#: Harmonics of a corner's sub-pixel phase in the detector's bias model (:func:`corner_phase_bias`).
PHASE_HARMONICS = (1, 2)
#: Fewest degrees of freedom left after the pose and the phase terms for the split to be made.
MIN_PHASE_DOF = 20


@dataclass(frozen=True, eq=False)
class CornerNoise:
    """A plane corner's error split into a bias set by its sub-pixel phase and an independent rest.

    A sub-pixel corner (or peak) locator pulls each estimate toward preferred positions within the pixel
    (peak locking): the error is then largely a fixed periodic function of the true sub-pixel phase, the
    same for every corner of an image, and not independent noise. Corners at scattered phases sample that
    function evenly, so it moves the board's pose far less than independent noise of the same size would
    (measured on our close-lane renders: 77–86 % of each corner's error variance is phase bias, and the
    true errors move C_D about half as much as independent noise of their size).

    Attributes
    ----------
    independent_px : σ per axis of the rest (residual after the phase terms, corrected for the fitted
        terms and the pose), px.
    phase_coef_px : (2, 2·len(PHASE_HARMONICS)) sin and cos coefficients of the bias per axis (u, v), px.
    phase_cov_px2 : (2, m, m) their least-squares covariances, px².
    total_px : σ per axis of the whole residual (the noise an independent model would use), px.

    References
    ----------
    Westerweel, J. (1997). Fundamentals of digital particle image velocimetry. Meas. Sci. Technol.
    8:1379–1392 (peak locking: the sub-pixel estimator's bias as a periodic function of the displacement's
    fractional part). Christensen, K. T. (2004). The influence of peak-locking errors on turbulence
    statistics computed from PIV ensembles. Exp. Fluids 36:484–497.
    """

    independent_px: float
    phase_coef_px: np.ndarray
    phase_cov_px2: np.ndarray
    total_px: float

    def to_dict(self) -> dict[str, Any]:
        """For ``rig.json``'s provenance: the split of the corner noise, px."""
        amp = np.sqrt(np.sum(self.phase_coef_px**2, axis=1))
        return {
            "total_px": self.total_px,
            "independent_px": self.independent_px,
            "phase_bias_amplitude_px": {"u": float(amp[0]), "v": float(amp[1])},
            "phase_harmonics": list(PHASE_HARMONICS),
        }

    def draw(self, uv: np.ndarray, gen: np.random.Generator) -> np.ndarray:
        """One draw of the corner errors (N, 2) at pixel positions ``uv``: the independent rest, plus the
        measured phase bias times one N(0, 1) factor (plus its coefficients' own least-squares error).

        The bias is one function of the detector, the same for both axes and every corner, so it is drawn
        as a whole: its effect on the pose is then as large as the measured function's own effect, in
        either direction. (Drawing each coefficient's sign apart would turn the one function into many,
        whose effects on the pose do not cancel as the real one's do.)
        """
        out = gen.normal(0.0, self.independent_px, uv.shape)
        factor = gen.normal()
        for axis in (0, 1):
            coef = factor * self.phase_coef_px[axis] + gen.multivariate_normal(
                np.zeros(self.phase_coef_px.shape[1]), self.phase_cov_px2[axis]
            )
            out[:, axis] += phase_basis(uv[:, axis]) @ coef
        return out


def phase_basis(x: np.ndarray) -> np.ndarray:
    """(N, 2·len(PHASE_HARMONICS)): sin and cos of 2πk·x for each harmonic k (x in px)."""
    cols = []
    for k in PHASE_HARMONICS:
        cols += [np.sin(2 * np.pi * k * x), np.cos(2 * np.pi * k * x)]
    return np.column_stack(cols)


def corner_phase_bias(image_px: np.ndarray, residual_px: np.ndarray, n_pose: int = 6) -> CornerNoise:
    """The plane corners' residual (observed − posed, (N, 2) px) split by :class:`CornerNoise`'s model."""
    n = len(image_px)
    m = 2 * len(PHASE_HARMONICS)
    total = math.sqrt(float(np.sum(residual_px**2)) / max(2 * n - n_pose, 1))
    if 2 * n - n_pose - 2 * m < MIN_PHASE_DOF:  # too few corners to tell a phase bias: all independent
        return CornerNoise(total, np.zeros((2, m)), np.zeros((2, m, m)), total)
    coefs, covs, rss = [], [], 0.0
    for axis in (0, 1):
        x = phase_basis(image_px[:, axis])
        r = residual_px[:, axis]
        c, *_ = np.linalg.lstsq(x, r, rcond=None)
        e = r - x @ c
        rss += float(e @ e)
        coefs.append(c)
        covs.append(np.linalg.pinv(x.T @ x))
    sigma_rest = math.sqrt(rss / (2 * n - n_pose - 2 * m))
    cov = np.array(covs) * sigma_rest**2
    return CornerNoise(min(sigma_rest, total), np.array(coefs), cov, total)


def plane_corner_noise(
    lens: LensCalibration, placements: Sequence[Placement], spec: GridSpec, plane: PlanePose
) -> CornerNoise:
    """The plane corners' noise (:class:`CornerNoise`) at the size :func:`plane_corner_sigma_px` gives.

    ``placements`` with their offsets as solved. The lens fit's residual is a floor of the per-corner
    noise (a lucky plane fit can look too clean); the split into phase bias and rest is the plane residual's.
    """
    world = placement_world_points(spec, placements)
    image = np.concatenate([p.image_points for p in placements])
    posed = project_points(world, plane.rotation, plane.translation, lens.camera_matrix, lens.dist_coeffs)
    noise = corner_phase_bias(image, image - posed)
    sigma = plane_corner_sigma_px(plane, len(image), lens)
    scale = sigma / noise.total_px if noise.total_px > 0 else 1.0
    return CornerNoise(
        noise.independent_px * scale, noise.phase_coef_px * scale, noise.phase_cov_px2 * scale**2, sigma
    )


def plane_corner_sigma_px(plane: PlanePose, n_points: int, lens: LensCalibration) -> float:
    """Per-axis noise of a plane corner, px: the larger of the plane fit's and the lens fit's residual.

    The PnP residual is corrected for the 6 pose parameters (2N − 6 degrees of freedom).
    """
    dof = max(2 * n_points - 6, 1)
    plane_sigma = plane.rms_px * np.sqrt(n_points / dof)
    lens_sigma = lens.rms_px / np.sqrt(2.0)
    return float(max(plane_sigma, lens_sigma))


def _as_solved(placements: Sequence[Placement], plane: PlanePose) -> list[Placement]:
    """The placements with their downrange offsets as the plane solve found them."""
    return [
        dataclasses.replace(p, offset_m=o)
        for p, o in zip(placements, plane.offsets_m or [q.offset_m for q in placements], strict=True)
    ]


def build_ensemble(
    lens_views: Sequence[ViewPoints],
    lens: LensCalibration,
    placements: Sequence[Placement],
    spec: GridSpec,
    plane: PlanePose,
    *,
    size: int = DEFAULT_ENSEMBLE_SIZE,
    offset_sigma_m: float = DEFAULT_OFFSET_SIGMA_M,
    plane_z_m: float = 0.0,
    plane_z_sigma_m: float = 0.0,
    rng: int | np.random.Generator | None = None,
    corner_noise: CornerNoise | None = None,
) -> tuple[tuple[CameraState, ...], tuple[ModelChoice, ...]]:
    """Perturbed camera states that carry the calibration's uncertainty, and the distortion-model check.

    Each member: bootstrap resample of the lens views (with replacement) → cv2.calibrateCamera from the
    nominal solution; plane corners + a draw of their noise (:class:`CornerNoise`: an independent rest
    plus the sub-pixel phase bias drawn as one function, at the size :func:`plane_corner_sigma_px`
    gives); the taped offsets redrawn by N(0, offset_sigma_m²) as the prior of a joint solve of pose and offsets
    (:func:`calibration.plane.solve_with_offsets`: the image fixes where each board stood far better than
    the tape, so the tape's error reaches the member only as far as the image lets it); the flight plane's
    distance from
    the board drawn independently at the left and right edges of the field, z ± N(0, plane_z_sigma_m²)
    each, which gives the member both an offset and a slope (a flight line not quite parallel to the
    board: its changing depth changes the apparent scale along the path, which a single camera cannot
    see and which biases the drag coefficient, so it belongs in the error bars). When the other choice of
    k3 or of the tangential terms maps the field differently by more than this spread
    (:func:`model_choice`), the members are shared in turn between the nominal model and each such
    alternative. ``corner_noise``: the plane corners' noise when the caller has it already
    (:func:`plane_corner_noise` of the solved placements).
    """
    gen = _rng(rng)
    used = {s for s in lens.views_used}
    views = [v for v in lens_views if v.source in used] or list(lens_views)
    n = len(views)
    placements = _as_solved(placements, plane)  # the ensemble varies the offsets about the solution
    world0 = placement_world_points(spec, placements)
    bounds = np.cumsum([0] + [len(p.image_points) for p in placements])
    image0 = np.concatenate([p.image_points for p in placements])
    noise = plane_corner_noise(lens, placements, spec, plane) if corner_noise is None else corner_noise
    sigma = noise.total_px  # plane_corner_sigma_px's size
    start = (cv2.Rodrigues(plane.rotation)[0], plane.translation)
    x_left, x_right = _field_x_extent(lens, plane)

    def member(model: LensCalibration) -> CameraState:
        idx = gen.integers(0, n, n)
        while len(set(idx.tolist())) < min(3, n):
            idx = gen.integers(0, n, n)
        k, d = recalibrate([views[i] for i in idx], model)
        taped = np.array([p.offset_m for p in placements], float)
        drawn = taped.copy()
        drawn[1:] += gen.normal(0.0, offset_sigma_m, len(taped) - 1)  # the tape's own error, as a prior
        image = image0 + noise.draw(image0, gen)  # phase bias + independent rest (CornerNoise)
        noisy = [
            Placement(p.source, image[a:b], p.offset_m, p.grid)
            for p, a, b in zip(placements, bounds[:-1], bounds[1:], strict=True)
        ]
        if len(placements) > 1 and offset_sigma_m > 0:
            rot, t, _, _ = solve_with_offsets(
                noisy, spec, k, d, drawn, offset_sigma_m, sigma, (plane.rotation, plane.translation)
            )
        else:
            world = world0.copy()
            world[:, 0] += np.repeat(drawn - taped, [len(p.image_points) for p in placements])
            rot, t = solve_pose(world, image, k, d, start=start)
        z0, slope = plane_z_m, 0.0
        if plane_z_sigma_m > 0:
            z_left, z_right = plane_z_m + gen.normal(0.0, plane_z_sigma_m, 2)
            slope = (z_right - z_left) / (x_right - x_left)
            z0 = z_left - slope * x_left
        return CameraState(k, d, rot, t, z0, slope)

    members = [member(lens) for _ in range(size)]
    if not members:
        return (), ()
    alts = tuple(model_choice(views, lens, placements, spec, plane, members, term=t) for t in MODEL_TERMS)
    models = [lens] + [a.lens for a in alts if a.included and a.lens is not None]
    # the models share the members in turn (each member its own resample): with one alternative every
    # other member, with two every third
    for i in range(1, len(members)):
        if models[i % len(models)] is not lens:
            members[i] = member(models[i % len(models)])
    return tuple(members), alts


@dataclass(frozen=True, eq=False)
class ModelChoice:
    """The other reasonable distortion model and what it does to the mapping over the field.

    Attributes
    ----------
    term : the term whose choice is flipped: "k3" (kept ↔ dropped) or "tangential" (p1, p2 fitted ↔ zero).
    distortion_model : the alternative's terms.
    max_difference_m : distance between its mapping and the nominal one where it is largest in units of
        the noise ensemble's spread, m.
    noise_spread_m : the noise ensemble's RMS spread at that point, m.
    included : the difference exceeds the spread, so a share of the ensemble uses this model.
    lens : the lens calibration with this model (None when not fitted).
    """

    term: str
    distortion_model: str
    max_difference_m: float
    noise_spread_m: float
    included: bool
    lens: LensCalibration | None = None

    def to_dict(self) -> dict[str, Any]:
        return {
            "term": self.term,
            "alternative": self.distortion_model,
            "max_difference_m": finite_or_none(self.max_difference_m),
            "noise_spread_m": finite_or_none(self.noise_spread_m),
            "included": self.included,
        }


def model_choice(
    views: Sequence[ViewPoints],
    lens: LensCalibration,
    placements: Sequence[Placement],
    spec: GridSpec,
    plane: PlanePose,
    members: Sequence[CameraState],
    *,
    term: str = "k3",
) -> ModelChoice:
    """Compare the mapping of the other choice of ``term`` with the nominal over the field.

    ``term`` "k3": k3 kept ↔ dropped; "tangential": p1, p2 fitted ↔ held at zero (the other terms as the
    nominal model has them). Holding a term at zero is an alternative only when the data do not reject it
    (no coefficient differs from zero by more than :data:`calibration.lens.K3_SIGNIFICANCE` of its
    standard errors, the rule that keeps k3); otherwise the choice is reported as not included.

    The alternative lens is fitted on the same views, the plane posed through it on the same corners; the
    two mappings are compared on a grid over the whole frame (:data:`MODEL_PROBE_GRID`), each difference
    against the noise ensemble's spread at that point. When it is larger, the model choice is part
    of the uncertainty (the issue's rule: two reasonable models that disagree by more than the noise both
    belong in the ensemble).
    """
    if term == "k3":
        other = "free" if lens.flags & cv2.CALIB_FIX_K3 else "off"
        flags = lens.flags | cv2.CALIB_FIX_K3 if other == "off" else lens.flags & ~cv2.CALIB_FIX_K3
        zeroed: tuple[tuple[int, str], ...] = ((4, "k3"),) if other == "off" else ()
        alt_lens = dataclasses.replace(lens, k3_rule=other)
    elif term == "tangential":
        flags = lens.flags ^ cv2.CALIB_ZERO_TANGENT_DIST
        zeroed = ((2, "p1"), (3, "p2")) if flags & cv2.CALIB_ZERO_TANGENT_DIST else ()
        start = np.ravel(lens.dist_coeffs).astype(float).copy()
        if zeroed:
            start[2:4] = 0.0
        k3_rule = "off" if lens.flags & cv2.CALIB_FIX_K3 else "free"  # k3 as the nominal has it
        alt_lens = dataclasses.replace(lens, dist_coeffs=start, flags=flags, k3_rule=k3_rule)
    else:
        raise ValueError(f"internal: unknown distortion term {term!r}")
    if zeroed and _significant(lens, zeroed):  # the data reject those terms at zero: no fair alternative
        return ModelChoice(term, distortion_model(flags), float("nan"), float("nan"), False, None)
    k, d = recalibrate(views, alt_lens)
    alt_lens = dataclasses.replace(alt_lens, camera_matrix=k, dist_coeffs=d, flags=flags)
    world = placement_world_points(spec, placements)
    image = np.concatenate([p.image_points for p in placements])
    rot, t = solve_pose(world, image, k, d, start=(cv2.Rodrigues(plane.rotation)[0], plane.translation))
    nominal = CameraState(lens.camera_matrix, lens.dist_coeffs, plane.rotation, plane.translation)
    alternative = CameraState(k, d, rot, t)
    w, h = lens.image_size
    gu, gv = np.meshgrid(
        np.linspace(0, w - 1, MODEL_PROBE_GRID[0]), np.linspace(0, h - 1, MODEL_PROBE_GRID[1])
    )
    uv = np.column_stack([gu.ravel(), gv.ravel()])
    base = nominal.pixel_to_world(uv)
    diff = np.linalg.norm(alternative.pixel_to_world(uv) - base, axis=1)
    name = distortion_model(alt_lens.flags)
    if not members or not np.any(np.isfinite(diff)):
        return ModelChoice(term, name, float("nan"), float("nan"), False, alt_lens)
    spread = np.sqrt(
        np.nanmean([np.sum((m.pixel_to_world(uv) - base) ** 2, axis=1) for m in members], axis=0)
    )
    i = int(np.nanargmax(diff / np.maximum(spread, 1e-12)))  # where the models differ most, in noise units
    return ModelChoice(term, name, float(diff[i]), float(spread[i]), bool(diff[i] > spread[i]), alt_lens)


def _significant(lens: LensCalibration, terms: Sequence[tuple[int, str]]) -> bool:
    """Any of the distortion ``terms`` ((index, name)) differs from zero by more than K3_SIGNIFICANCE
    standard errors (the rule that keeps k3), or has no standard error to tell."""
    d = np.ravel(lens.dist_coeffs)
    std = lens.intrinsics_std
    for i, name in terms:
        s = std.get(name)
        if s is None or not (s > 0) or abs(float(d[i])) > K3_SIGNIFICANCE * float(s):
            return True
    return False


def _field_x_extent(lens: LensCalibration, plane: PlanePose) -> tuple[float, float]:
    """World x (m) where the image's left and right edges, at mid-height, meet the board's plane."""
    w, h = lens.image_size
    state = CameraState(lens.camera_matrix, lens.dist_coeffs, plane.rotation, plane.translation, 0.0)
    xy = state.pixel_to_world(np.array([[0.0, 0.5 * (h - 1)], [w - 1.0, 0.5 * (h - 1)]]))
    x_left, x_right = float(np.min(xy[:, 0])), float(np.max(xy[:, 0]))
    if not (np.isfinite(x_left) and np.isfinite(x_right) and x_right - x_left > 1e-6):
        raise ValueError("plane: the image edges do not meet the board's plane (camera looks past it)")
    return x_left, x_right


def make_rig(
    lens_views: Sequence[ViewPoints],
    lens: LensCalibration,
    placements: Sequence[Placement],
    spec: GridSpec,
    *,
    plane_z_m: float = 0.0,
    plane_z_sigma_m: float = 0.0,
    ensemble_size: int = DEFAULT_ENSEMBLE_SIZE,
    offset_sigma_m: float = DEFAULT_OFFSET_SIGMA_M,
    rng: int | np.random.Generator | None = None,
    provenance: Mapping[str, Any] | None = None,
) -> Rig:
    """The rig from a lens calibration and the plane placements (joint PnP), with its ensemble.

    Parameters
    ----------
    lens_views : corners of the lens views (the resampling draws from those ``lens`` used).
    lens : the lens calibration.
    placements : the board placements in (or behind) the flight plane.
    spec : the grid.
    plane_z_m : flight plane's world z, m: the distance the boards stood *behind* the flight plane
        (parallax option; 0 when the boards stood in it).
    plane_z_sigma_m : standard error of that distance, m (goes into the ensemble).
    ensemble_size : members of the uncertainty ensemble (0 for none).
    offset_sigma_m : standard error of each taped offset, m.
    rng : seed or generator for the ensemble.
    provenance : extra provenance entries.

    Notes
    -----
    World frame: x downrange, y up, z toward the camera; origin at the first placement's first inner
    corner; the boards are taken as level (see :mod:`calibration.drop` to level from a drop).
    """
    if not (np.isfinite(plane_z_m) and np.isfinite(plane_z_sigma_m) and plane_z_sigma_m >= 0):
        raise ValueError("parallax: expected a finite distance and a non-negative uncertainty")
    if ensemble_size < 0:
        raise ValueError(f"--ensemble: expected a count >= 0, got {ensemble_size}")
    plane = solve_plane(
        placements,
        spec,
        lens.camera_matrix,
        lens.dist_coeffs,
        lens_rms_px=lens.rms_px,
        offset_sigma_m=offset_sigma_m,
    )
    centre_z = float((-plane.rotation.T @ plane.translation)[2])
    if plane_z_m >= centre_z:
        raise ValueError(
            f"parallax: the flight plane {plane_z_m * 1e3:g} mm in front of the board would be at or behind "
            f"the camera ({centre_z:.3f} m from the board)"
        )
    noise = plane_corner_noise(lens, _as_solved(placements, plane), spec, plane)
    members, choice = build_ensemble(
        lens_views, lens, placements, spec, plane, size=ensemble_size, offset_sigma_m=offset_sigma_m,
        plane_z_m=plane_z_m, plane_z_sigma_m=plane_z_sigma_m, rng=rng, corner_noise=noise,
    )  # fmt: skip
    prov: dict[str, Any] = {
        "method": "Zhang (2000) lens calibration (cv2.calibrateCameraExtended); joint PnP of all plane "
        "placements through the lens model (IPPE start, LM refinement); bootstrap ensemble over lens views "
        "with plane-corner noise and taped-offset error",
        "grid": {"cols": spec.cols, "rows": spec.rows, "square_m": spec.square_m},
        "lens": {
            "views_used": list(lens.views_used),
            "per_view_rms_px": list(lens.per_view_rms_px),
            "views_rejected": [{"view": s, "reason": r} for s, r in lens.views_rejected],
            "intrinsics_std": dict(lens.intrinsics_std),
            "frame_coverage": lens.frame_coverage,
            "corner_extent_px": list(lens.corner_extent_px),
            "distortion_model": distortion_model(lens.flags),
        },
        "plane": {
            "placements": [
                {
                    "image": p.source,
                    "offset_m": p.offset_m,
                    "rms_px": e,
                    "offset_solved_m": o,
                    "offset_stderr_m": oe,
                }
                for p, e, o, oe in zip(
                    placements,
                    plane.per_placement_rms_px,
                    plane.offsets_m,
                    plane.offset_stderr_m,
                    strict=True,
                )
            ],
            "rms_px": plane.rms_px,
            "corner_sigma_px": noise.total_px,
            "corner_noise": noise.to_dict(),
            "offset_sigma_m": offset_sigma_m,
            "plane_z_sigma_m": plane_z_sigma_m,
        },
        "ensemble": {
            "size": ensemble_size,
            "method": "bootstrap over lens views (k3 rule repeated) + plane-corner noise (independent rest and "
            "sub-pixel phase bias) + taped offsets as the prior of a joint pose and offset solve"
            + (" + parallax error" if plane_z_sigma_m > 0 else "")
            + (
                " + the other distortion model(s) in a share of the members"
                if any(c.included for c in choice)
                else ""
            ),
            "model_choice": [c.to_dict() for c in choice],
        },
    }
    if provenance:
        prov.update(provenance)
    return Rig(
        image_size=lens.image_size,
        camera_matrix=lens.camera_matrix,
        dist_coeffs=lens.dist_coeffs,
        rotation=plane.rotation,
        translation=plane.translation,
        plane_z_m=plane_z_m,
        reprojection_rms_px=lens.rms_px,
        ensemble=members,
        coverage_m=plane.coverage_m,
        drop_check=None,
        provenance=prov,
        warnings=lens.warnings + plane.warnings,
    )


@dataclass(frozen=True)
class RigFigures:
    """Figures for the on-screen summary.

    Attributes
    ----------
    focal_px, focal_std_px : mean of fx, fy and its standard deviation, px.
    plane_distance_m : camera centre to the flight plane, m.
    mm_per_px_centre : scale at the image centre, mm/px.
    field_width_m : width of the plane seen across the middle row of the image, m.
    edge_error_mm : ensemble RMS spread of the mapped position at the left / right edge of the middle
        row and at the image corners (max), mm.
    drag_bound : the C_D error the geometry allows a reference BB (:func:`calibration.dragbound.drag_bound`).
    """

    focal_px: float
    focal_std_px: float
    plane_distance_m: float
    mm_per_px_centre: float
    field_width_m: float
    edge_error_mm: dict[str, float]
    drag_bound: DragBound | None = None


def rig_figures(rig: Rig) -> RigFigures:
    """Summary figures of ``rig`` (see :class:`RigFigures`)."""
    w, h = rig.image_size
    k = rig.camera_matrix
    std = (
        rig.provenance.get("lens", {}).get("intrinsics_std", {})
        if isinstance(rig.provenance, Mapping)
        else {}
    )
    f = 0.5 * (k[0, 0] + k[1, 1])
    fstd = float(np.hypot(std.get("fx", np.nan), std.get("fy", np.nan)) / 2) if std else float("nan")
    centre = np.array([[(w - 1) / 2, (h - 1) / 2]])
    edge = np.array([[0.0, (h - 1) / 2], [w - 1.0, (h - 1) / 2]])
    corners = np.array([[0.0, 0.0], [w - 1.0, 0.0], [0.0, h - 1.0], [w - 1.0, h - 1.0]])
    nominal_edge = rig.pixel_to_world(edge)
    width = float(np.linalg.norm(nominal_edge[1] - nominal_edge[0]))
    errs: dict[str, float] = {}
    if rig.ensemble:
        pts = np.vstack([edge, corners])
        nominal = rig.pixel_to_world(pts)
        spread = rig.ensemble_pixel_to_world(pts) - nominal[None]
        rms = np.sqrt(np.nanmean(np.sum(spread**2, axis=2), axis=0)) * 1e3
        errs = {"left": float(rms[0]), "right": float(rms[1]), "corners": float(np.nanmax(rms[2:]))}
    return RigFigures(
        focal_px=float(f),
        focal_std_px=fstd,
        plane_distance_m=rig.plane_distance_m,
        mm_per_px_centre=float(rig.metres_per_pixel(centre)[0] * 1e3),
        field_width_m=width,
        edge_error_mm=errs,
        drag_bound=drag_bound(rig),
    )
