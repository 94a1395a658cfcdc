"""Serial correlation of a track's position errors, measured from the fit's residuals.

The tracker's σ per point is right for one frame, but neighbouring frames' errors need not be
independent: lossy video coding predicts each frame from the last (motion compensation), so a BB that
moves little between frames along one image axis (the vertical, for a flat shot) is drawn in frame n
partly as a copy of frame n − 1, with the same sub-pixel error. A slow error along a track is what a
curvature parameter (the lift) cannot tell from a force; the least-squares covariance of independent
points then understates its σ (measured on rendered lanes: lag-one correlation 0.22 and lag-two 0.10 of the
vertical error, C_L's rms z 1.31 before this correction; the horizontal error, ~12 px between frames,
uncorrelated).

The model: per image-aligned world axis a, the normalised errors e = (data − truth)/σ of one shot have
correlation ρ_a^k between frames k apart (a first-order autoregression in frames, one parameter per
axis: its estimate is about half as noisy in the error bars as a free correlation per lag) and the two
axes are uncorrelated. ρ_a is found by the method of moments on the residuals r = M e of the fit,
M = I − J(JᵀJ)⁻¹Jᵀ: E[rᵀ A r] = tr(M A M Σ) for the lag-0 and lag-1 selection matrices A, linear in
(σ_a², σ_a²ρ_a) when the moments beyond one frame are left out of the equations (their ρ² share is
small), so the estimate allows for the correlation the fit itself removes from its residuals (a naive
residual autocorrelation is biased low by about p/n). ρ is kept within [0, :data:`RHO_MAX`]: coding
correlates errors positively, and a negative estimate from a short track would narrow the error bars
below the independent-points value on noise alone (on white noise a free estimate made the bars ~20 %
too small: E[σ²/σ̂²] > 1 for a noisy σ̂). The parameters' covariance is then the sandwich
(JᵀJ)⁻¹ JᵀRJ (JᵀJ)⁻¹ with R the correlation matrix (the fit's estimate itself stays the ordinary
least-squares one).

References
----------
Box, G. E. P., Jenkins, G. M., Reinsel, G. C. (2008). Time Series Analysis, 4th ed., §3.2 (first-order
autoregressive autocorrelation ρ_k = φ^k). White, H. (1980). A heteroskedasticity-consistent covariance
matrix estimator. Econometrica 48:817–838 (the sandwich form). Searle, S. R. (1971). Linear Models, §2.5 (expected value of
a quadratic form, E[rᵀAr] = tr(AΣ_r)).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

#: Lags (in frames) whose moments are measured: one, the autoregression's coefficient.
LAGS = (1,)

#: Largest correlation between neighbouring frames used (a smooth estimate's variance factor (1+ρ)/(1−ρ)
#: is then 19).
RHO_MAX = 0.9

#: R is built out to the lag where ρ^k falls below this.
RHO_NEGLIGIBLE = 1e-3

#: Below this variance of the normalised errors (in units of the stated σ²) nothing is measured.
MIN_VARIANCE = 1e-6

#: Fewest consecutive-frame pairs per axis for the correlation to be measured at all.
MIN_PAIRS = 12


@dataclass(frozen=True)
class SerialCorrelation:
    """Measured correlation of the normalised errors between neighbouring frames, per axis (x, y)."""

    x: float
    y: float

    @classmethod
    def none(cls) -> SerialCorrelation:
        return cls(0.0, 0.0)

    @property
    def is_zero(self) -> bool:
        return self.x == 0.0 and self.y == 0.0


def frame_steps(t_rel_s: np.ndarray, mask: np.ndarray) -> np.ndarray:
    """Integer frame index of every point (n, k) within its shot, from the times: t / (median step).

    The times carry each point's rolling-shutter row offset, a small fraction of a frame, which the rounding
    absorbs; a missing frame is a step of two.
    """
    out = np.zeros(mask.shape, dtype=np.int64)
    for i in range(mask.shape[0]):
        t = t_rel_s[i, mask[i]]
        d = np.diff(t)
        d = d[d > 0]
        if d.size == 0:
            continue
        step = float(np.median(d))  # one frame when most neighbours are consecutive frames
        out[i, mask[i]] = np.rint((t - t[0]) / step).astype(np.int64)
    return out


def _lag_selectors(
    frames: np.ndarray, mask: np.ndarray, point_inlier: np.ndarray, n_entries: int
) -> dict[tuple[int, int], sp.csr_matrix]:
    """Symmetric 0/1 matrices over the residual entries: pairs of one shot and axis ``lag`` frames apart.

    Key (axis, 0) is the axis's inlier diagonal. Entries are the point entries (x, y interleaved, shot by
    shot, as :class:`fitting.problem.FitProblem` lays them out) followed by any prior entries.
    """
    shot, col = np.nonzero(mask)  # row-major: shot by shot, point by point
    n_pts = shot.size
    fr = frames[shot, col]
    out: dict[tuple[int, int], sp.csr_matrix] = {}
    idx = np.arange(n_pts)
    for axis in (0, 1):
        diag = 2 * idx[point_inlier] + axis
        out[(axis, 0)] = sp.csr_matrix((np.ones(diag.size), (diag, diag)), shape=(n_entries, n_entries))
        for lag in LAGS:
            rows: list[np.ndarray] = []
            cols: list[np.ndarray] = []
            for gap_back in range(1, lag + 1):  # a later point `lag` frames on is at most `lag` points on
                a, b = idx[:-gap_back], idx[gap_back:]
                ok = (shot[a] == shot[b]) & (fr[b] - fr[a] == lag) & point_inlier[a] & point_inlier[b]
                rows.append(2 * a[ok] + axis)
                cols.append(2 * b[ok] + axis)
            r, c = np.concatenate(rows), np.concatenate(cols)
            out[(axis, lag)] = sp.csr_matrix(
                (np.ones(2 * r.size), (np.concatenate([r, c]), np.concatenate([c, r]))),
                shape=(n_entries, n_entries),
            )
    return out


def _traces(mats: list[sp.csr_matrix], q: np.ndarray) -> np.ndarray:
    """T[a, b] = tr(M A_a M A_b) for M = I − QQᵀ (Q orthonormal), the A sparse and symmetric.

    tr(MAMB) = tr(AB) − 2 tr(QᵀABQ) + tr(QᵀAQ·QᵀBQ), and tr(QᵀABQ) = Σ (AQ) ∘ (BQ) for symmetric A, B.
    """
    aq = np.stack([m @ q for m in mats])  # (n_mats, n, p)
    g = np.einsum("np,anq->apq", q, aq)  # QᵀAQ
    out = -2.0 * np.einsum("anp,bnp->ab", aq, aq) + np.einsum("apq,bqp->ab", g, g)
    for a in range(len(mats)):
        for b in range(a, len(mats)):
            ab = float(mats[a].multiply(mats[b]).sum())  # tr(AB), A and B symmetric
            out[a, b] += ab
            if b != a:
                out[b, a] += ab
    return out


def correlation_excess(
    r: np.ndarray,
    jac: np.ndarray,
    entry_inlier: np.ndarray,
    t_rel_s: np.ndarray,
    mask: np.ndarray,
    point_inlier: np.ndarray,
) -> tuple[SerialCorrelation, np.ndarray | None]:
    """The measured correlation and Jᵀ(R − I)J over the inlier entries (None when none is measured).

    The sandwich's middle JᵀRJ is the caller's normal matrix JᵀJ plus this excess.

    ``r``, ``jac``: the fit's normalised residuals and Jacobian (all entries); ``entry_inlier`` marks the
    entries of the fit (points and priors); ``t_rel_s``, ``mask``: the stacked shots' times (n, k) and real
    points; ``point_inlier``: the points (the mask's true entries, in order) that are not outliers.
    """
    frames = frame_steps(t_rel_s, mask)
    sel = _lag_selectors(frames, mask, point_inlier, r.size)
    corr = measure(r, jac, entry_inlier, sel, point_inlier.size)
    if corr.is_zero:
        return corr, None
    jz = jac * entry_inlier[:, None]
    excess = np.zeros((jac.shape[1], jac.shape[1]))
    shot, _ = np.nonzero(mask)
    fr = frames[mask]
    for i in np.unique(shot):
        pts = np.nonzero((shot == i) & point_inlier)[0]
        if pts.size < 2:
            continue
        gap = np.abs(fr[pts][:, None] - fr[pts][None, :])
        for axis, rho in ((0, corr.x), (1, corr.y)):
            if rho <= 0:
                continue
            block = jz[2 * pts + axis]
            lags = min(int(math.log(RHO_NEGLIGIBLE) / math.log(rho)) + 1, int(gap.max()))
            band = np.where((gap > 0) & (gap <= lags), rho ** gap.astype(float), 0.0)
            excess += block.T @ band @ block
    return corr, excess


def measure(
    r: np.ndarray,
    jac: np.ndarray,
    entry_inlier: np.ndarray,
    sel: dict[tuple[int, int], sp.csr_matrix],
    n_points: int,
) -> SerialCorrelation:
    """Serial correlation of the normalised errors from the residuals ``r`` of a fit with Jacobian ``jac``.

    ``entry_inlier`` marks the residual entries of the fit (points and priors); ``sel`` are the lag
    selectors (:func:`_lag_selectors`), ``n_points`` the number of points (the first 2·n entries). Returns
    zeros where an axis has fewer than :data:`MIN_PAIRS` consecutive pairs, the errors are far below the
    stated σ, or the moment equations are singular.
    """
    n_entries = r.size
    if any(sel[(axis, 1)].nnz < 2 * MIN_PAIRS for axis in (0, 1)):
        return SerialCorrelation.none()
    w = np.where(entry_inlier, 1.0, 0.0)
    ji = jac * w[:, None]
    q, s, _ = np.linalg.svd(ji, full_matrices=False)
    q = q[:, s > s[0] * 1e-10] if s.size and s[0] > 0 else q[:, :0]
    keys = [(axis, lag) for axis in (0, 1) for lag in (0, *LAGS)]
    prior = sp.diags(np.where(entry_inlier, 1.0, 0.0) * (np.arange(n_entries) >= 2 * n_points))
    rq = r * w
    stat = np.array([float(rq @ (sel[k] @ rq)) for k in keys])
    traces = _traces([sel[k] for k in keys] + [sp.csr_matrix(prior)], q)
    coef, known = traces[:-1, :-1], traces[:-1, -1]  # the priors have unit variance
    try:
        c = np.linalg.solve(coef, stat - known)
    except np.linalg.LinAlgError:
        return SerialCorrelation.none()
    rho: list[float] = []
    for axis in (0, 1):
        var = c[keys.index((axis, 0))]
        # errors far below the stated σ (noise-free or simulated data): round-off, no correlation to see
        if not (np.isfinite(var) and var > MIN_VARIANCE):
            rho.append(0.0)
            continue
        rho.append(float(np.clip(c[keys.index((axis, 1))] / var, 0.0, RHO_MAX)))
    return SerialCorrelation(rho[0], rho[1])


__all__ = ["LAGS", "RHO_MAX", "SerialCorrelation", "correlation_excess", "frame_steps", "measure"]
