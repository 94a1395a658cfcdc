"""The small least-squares solver of the sub-pixel fits: bounded Levenberg–Marquardt
(:func:`levenberg_marquardt`), the fit's covariance and a forward-difference Jacobian."""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class _Fit:
    x: np.ndarray
    fun: np.ndarray
    jac: np.ndarray
    cost: float
    success: bool
    message: str


def levenberg_marquardt(
    fun: Callable[[np.ndarray], np.ndarray],
    jac: Callable[[np.ndarray], np.ndarray],
    p0: np.ndarray,
    lower: np.ndarray,
    upper: np.ndarray,
    *,
    max_iter: int = 40,
    ftol: float = 1e-5,
) -> _Fit:
    """Minimise ½‖fun(p)‖² by Levenberg–Marquardt with Marquardt's diagonal scaling, p kept in bounds.

    A small dense solver (a few parameters, a few hundred residuals) without the per-call overhead of a
    general one; tests check it reaches the optimum of ``scipy.optimize.least_squares``.

    References
    ----------
    Marquardt, D. W. (1963). An algorithm for least-squares estimation of nonlinear parameters.
    J. SIAM 11(2):431–441.
    """
    p = np.clip(np.asarray(p0, float), lower, upper)
    r = fun(p)
    cost = float(r @ r)
    lam = 1e-3
    j = jac(p)
    for _ in range(max_iter):
        a = j.T @ j
        g = j.T @ r
        dg = np.diag(a).copy()
        dg[dg <= 0] = 1e-12
        # parameters held at a bound by the gradient stay there (projected steps)
        free = ~(((p <= lower) & (g > 0)) | ((p >= upper) & (g < 0)))
        af = a[np.ix_(free, free)]
        while True:
            step = np.zeros_like(p)
            try:
                step[free] = np.linalg.solve(af + lam * np.diag(dg[free]), -g[free])
            except np.linalg.LinAlgError:
                pass
            pn = np.clip(p + step, lower, upper)
            rn = fun(pn)
            cn = float(rn @ rn)
            if np.isfinite(cn) and cn <= cost:
                break
            lam *= 10.0
            if lam > 1e10:
                return _Fit(p, r, j, 0.5 * cost, True, "no further decrease")
        # converged when the step changes the fit by a negligible fraction of the residual
        gain = float(np.sum(dg * (pn - p) ** 2))
        drop = cost - cn
        p, r = pn, rn
        cost = cn
        lam = max(lam / 10.0, 1e-12)
        j = jac(p)
        if drop <= ftol * max(cost, 1e-300) or gain <= ftol * max(cost, 1e-300):
            return _Fit(p, r, j, 0.5 * cost, True, "converged")
    return _Fit(p, r, j, 0.5 * cost, False, f"no convergence in {max_iter} iterations")


def _covariance(jac: np.ndarray, sig2: np.ndarray) -> np.ndarray:
    """Sandwich covariance (JᵀJ)⁻¹ Jᵀ diag(σ²) J (JᵀJ)⁻¹ (equals σ²(JᵀJ)⁻¹ for uniform σ)."""
    jtj_inv = np.linalg.pinv(jac.T @ jac)
    meat = jac.T @ (jac * sig2[:, None])
    return jtj_inv @ meat @ jtj_inv


def _numeric_jacobian(
    fun: Callable[[np.ndarray], np.ndarray], p: np.ndarray, steps: np.ndarray
) -> np.ndarray:
    """Forward-difference Jacobian of ``fun`` at ``p`` with per-parameter ``steps``."""
    base = fun(p)
    cols = []
    for i, h in enumerate(steps):
        dp = np.zeros_like(p)
        dp[i] = h
        cols.append((fun(p + dp) - base) / h)
    return np.column_stack(cols)
