"""Uncertainty of a fit: covariance, the calibration's share, goodness of fit and propagation.

The covariance is the Gauss-Newton (JᵀJ)⁻¹ at the solution over the inlier points (|r| ≤ OUTLIER_SIGMA
times the residual scatter) — the sandwich (JᵀJ)⁻¹JᵀRJ(JᵀJ)⁻¹ when the residuals show errors correlated
between neighbouring frames (:mod:`fitting.serial`) — scaled by the reduced χ² when that is significantly
above 1, plus the calibration's share: for each perturbed calibration k the linearised shift
δθ_k = (JᵀJ)⁻¹Jᵀ(o_k/σ) of the parameters under the points' offsets o_k, and Cov_cal = mean_k δθ_k δθ_kᵀ
(the K perturbations are taken as draws of the calibration error, so the spread is about the nominal
calibration). Shots mapped with the
same rig share the k-th perturbation. Derived quantities use first-order propagation.

References
----------
Gauss-Newton covariance and Fisher information: Press et al. (2007), *Numerical Recipes*, 3rd ed.,
§15.5-15.6. The robust losses ρ(z): scipy.optimize.least_squares documentation (``loss``).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np
import scipy.stats

from . import serial
from .observe import ShotData
from .problem import FitProblem
from .results import Estimate, FitStatistics
from .solver import residual_scatter

#: A point whose normalised residual exceeds this (times the residual scatter) in either coordinate is an
#: outlier: it stays in the robust fit (down-weighted by the loss) but is left out of χ², the covariance
#: and the residual RMS.
OUTLIER_SIGMA = 5.0

#: The error bars are scaled by √(reduced χ²) when χ² exceeds its upper quantile at this probability.
CHI2_SCALE_P = 0.05

#: A normal matrix whose condition (after scaling to unit diagonal) exceeds 1/this is singular.
SINGULAR_RCOND = 1e-13

#: Relative step of the central differences in :func:`derived` (floor on |θ| of 1e-3).
DERIVED_REL_STEP = 1e-6
DERIVED_STEP_FLOOR = 1e-3


@dataclass(frozen=True, eq=False)
class FitState:
    """The residual, Jacobian and covariance of a problem at one point (free parameters).

    ``inlier_entry`` marks the residual entries used for χ² and the covariance; ``point_outlier`` is over
    the padded (n, k) grid of the stacked shots; ``cov_noise`` and ``cov_cal`` are over the free
    parameters; ``singular`` says the normal matrix is numerically singular.
    """

    r: np.ndarray
    jac: np.ndarray
    inlier_entry: np.ndarray
    point_outlier: np.ndarray  # (n, k) over the padded grid
    cov_noise: np.ndarray
    cov_cal: np.ndarray
    stats: FitStatistics
    singular: bool


def inverse(a: np.ndarray) -> tuple[np.ndarray, bool]:
    """Inverse of a symmetric positive (semi-)definite matrix via its scaled eigendecomposition.

    Returns the (pseudo-)inverse and whether the matrix is numerically singular (condition > 1e13 after
    scaling to unit diagonal).
    """
    d = np.sqrt(np.clip(np.diag(a), 1e-300, None))
    scaled = a / np.outer(d, d)
    w, v = np.linalg.eigh(0.5 * (scaled + scaled.T))
    top = float(w[-1]) if w.size else 1.0
    singular = not (w.size and w[0] > top * SINGULAR_RCOND)
    keep = w > top * SINGULAR_RCOND
    inv = (v[:, keep] / w[keep]) @ v[:, keep].T
    return inv / np.outer(d, d), singular


def calibration_groups(shots: Sequence[ShotData]) -> list[list[int]]:
    groups: dict[object, list[int]] = {}
    for i, s in enumerate(shots):
        if s.cal_offsets_m is None:
            continue
        key = s.rig_digest if s.rig_digest is not None else ("shot", i)
        groups.setdefault(key, []).append(i)
    out = []
    for members in groups.values():
        ks = {shots[i].n_calibrations for i in members}
        if len(ks) > 1:
            raise ValueError(
                f"shots {[shots[i].label for i in members]} share a rig but carry different numbers of "
                f"calibration offsets {sorted(ks)}"
            )
        out.append(members)
    return out


def robust_sum(r: np.ndarray, loss: str, f_scale: float) -> float:
    """Σ c²·ρ(r²/c²) for scipy's loss ρ and scale c (σ units): χ² for the linear loss, ≈ χ² for small r.

    References
    ----------
    The loss functions ρ(z) of scipy.optimize.least_squares (documentation of its ``loss`` argument).
    """
    z = np.square(r) / f_scale**2
    if loss == "linear":
        rho = z
    elif loss == "soft_l1":
        rho = 2.0 * (np.sqrt(1.0 + z) - 1.0)
    elif loss == "huber":
        rho = np.where(z <= 1.0, z, 2.0 * np.sqrt(z) - 1.0)
    elif loss == "cauchy":
        rho = np.log1p(z)
    elif loss == "arctan":
        rho = np.arctan(z)
    else:
        raise ValueError(f"loss: unknown {loss!r}")
    return float(f_scale**2 * np.sum(rho))


def fit_state(problem: FitProblem, x: np.ndarray, loss: str = "linear", f_scale: float = 1.0) -> FitState:
    """Residual, outliers, covariance (noise and calibration) and statistics at the free vector ``x``."""
    r, jac = problem._evaluate(x)
    stack = problem.stack
    n_pts_entries = problem.n_point_entries
    pts = r[:n_pts_entries].reshape(-1, 2)
    # outliers relative to the robust scatter (MAD_TO_SIGMA·median |r| estimates σ for Gaussian residuals),
    # so that σ stated too small by the tracker widens the error bars instead of discarding good points
    scatter = residual_scatter(pts)
    out_pt = np.max(np.abs(pts), axis=1) > OUTLIER_SIGMA * scatter
    inlier = np.concatenate([np.repeat(~out_pt, 2), np.ones(r.size - n_pts_entries, dtype=bool)])
    point_outlier = np.zeros(stack.mask.shape, dtype=bool)
    point_outlier[stack.mask] = out_pt
    ji = jac[inlier]
    n_free = ji.shape[1]
    chi2 = float(np.sum(r[inlier] ** 2))
    # model comparison over all residuals (the same data for every law), outliers tamed by the loss
    robust_chi2 = robust_sum(r, loss, f_scale)
    m = int(np.count_nonzero(inlier))
    dof = m - n_free
    red = chi2 / dof if dof > 0 else math.inf
    # scale by the residual scatter only when χ² is significantly (95 %) above its expectation: a χ² that
    # fluctuates within its own spread says the tracked σ are right, and inflating then would over-cover
    significant = dof > 0 and chi2 > float(scipy.stats.chi2.isf(CHI2_SCALE_P, dof))
    scale = math.sqrt(red) if significant else (1.0 if dof > 0 else math.inf)
    normal = ji.T @ ji
    inv, singular = inverse(normal)
    # neighbouring frames' errors may be correlated (video coding): measured from the residuals, and
    # carried by the sandwich (JᵀJ)⁻¹JᵀRJ(JᵀJ)⁻¹, JᵀRJ = JᵀJ + Jᵀ(R − I)J (fitting.serial)
    corr, excess = serial.correlation_excess(r, jac, inlier, stack.t_rel_s, stack.mask, ~out_pt)
    cov_noise = (inv if excess is None else inv @ (normal + excess) @ inv) * scale**2
    cov_cal = np.zeros_like(inv)
    shots = problem.shots
    for members in calibration_groups(shots):
        k = shots[members[0]].n_calibrations
        o = np.zeros((problem.n_entries, k))
        # offsets in the residual layout: for each shot's valid points, (dx, dy) interleaved
        start = 0
        for i, s in enumerate(shots):
            width = 2 * s.n_points
            if i in members:
                off = s.cal_offsets_m / s.sigma_m[None, :, None]  # (K, N, 2)
                o[start : start + width] = off.reshape(k, width).T
            start += width
        o[~inlier] = 0.0
        delta = inv @ (ji.T @ o[inlier])  # (n_free, K)
        cov_cal += delta @ delta.T / k
    pts_in = ~out_pt
    sig = np.repeat(stack.sigma_m[stack.mask][pts_in], 2)
    rr = pts[pts_in].ravel()
    rms_sigma = float(np.sqrt(np.mean(rr**2))) if rr.size else math.nan
    rms_m = float(np.sqrt(np.mean((rr * sig) ** 2))) if rr.size else math.nan
    stats = FitStatistics(
        n_points=int(stack.mask.sum()),
        n_residuals=m,
        n_parameters=n_free,
        dof=dof,
        chi2=chi2,
        reduced_chi2=red,
        stderr_scale=scale,
        aic=robust_chi2 + 2.0 * n_free,
        bic=robust_chi2 + n_free * math.log(max(r.size, 1)),
        residual_rms_m=rms_m,
        residual_rms_sigma=rms_sigma,
        n_outliers=int(out_pt.sum()),
        robust_chi2=robust_chi2,
        serial_correlation_x=corr.x,
        serial_correlation_y=corr.y,
    )
    return FitState(r, jac, inlier, point_outlier, cov_noise, cov_cal, stats, singular)


def make_estimate(value: float | None, var_noise: float, var_cal: float) -> Estimate:
    """An estimate from a value and its noise and calibration variances (None where not finite)."""
    if value is None or not math.isfinite(value):
        return Estimate(None, None)
    vn, vc = max(var_noise, 0.0), max(var_cal, 0.0)
    if not (math.isfinite(vn) and math.isfinite(vc)):
        return Estimate(float(value), None)
    return Estimate(float(value), math.sqrt(vn + vc), math.sqrt(vn), math.sqrt(vc))


def derived(
    fun: Callable[[np.ndarray], float],
    theta: np.ndarray,
    free: np.ndarray,
    cov_n: np.ndarray,
    cov_c: np.ndarray,
    idx: Sequence[int],
) -> Estimate:
    """First-order propagation of fun(theta) through the covariance over the parameters ``idx``."""
    value = float(fun(theta))
    free_pos = np.cumsum(free) - 1
    g = np.zeros(cov_n.shape[0])
    for i in idx:
        if not free[i]:
            continue
        h = DERIVED_REL_STEP * max(abs(theta[i]), DERIVED_STEP_FLOOR)
        tp, tm = theta.copy(), theta.copy()
        tp[i] += h
        tm[i] -= h
        g[free_pos[i]] = (fun(tp) - fun(tm)) / (2 * h)
    return make_estimate(value, float(g @ cov_n @ g), float(g @ cov_c @ g))


def direct(theta: np.ndarray, free: np.ndarray, cov_n: np.ndarray, cov_c: np.ndarray, i: int) -> Estimate:
    """The estimate of parameter ``i`` of the full vector (zero error when it was fixed)."""
    if not free[i]:
        return Estimate(float(theta[i]), 0.0, 0.0, 0.0)
    k = int(np.cumsum(free)[i] - 1)
    return make_estimate(float(theta[i]), float(cov_n[k, k]), float(cov_c[k, k]))


__all__ = [
    "FitState",
    "calibration_groups",
    "derived",
    "direct",
    "fit_state",
    "inverse",
    "make_estimate",
    "robust_sum",
]
