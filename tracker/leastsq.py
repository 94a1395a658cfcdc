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
    last: dict[str, np.ndarray] = {}

    def cost(p: np.ndarray) -> float:
        r = fun(p)
        last["p"], last["r"] = p, r
        return float(r @ r)

    def normal(p: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        r = last["r"] if last.get("p") is p else fun(p)
        j = jac(p)
        last["j"], last["jp"] = j, p
        return j.T @ j, j.T @ r

    p, _, ok, msg = minimise_normal(cost, normal, p0, lower, upper, max_iter=max_iter, ftol=ftol)
    r = last["r"] if last.get("p") is p else fun(p)
    j = last["j"] if last.get("jp") is p else jac(p)
    return _Fit(p, r, j, 0.5 * float(r @ r), ok, msg)


def minimise_normal(
    cost: Callable[[np.ndarray], float],
    normal: Callable[[np.ndarray], tuple[np.ndarray, np.ndarray]],
    p0: np.ndarray,
    lower: np.ndarray,
    upper: np.ndarray,
    *,
    max_iter: int = 40,
    ftol: float = 1e-5,
) -> tuple[np.ndarray, float, bool, str]:
    """The Levenberg–Marquardt iteration of :func:`levenberg_marquardt` on the normal equations.

    ``cost(p)`` is ‖r(p)‖²; ``normal(p)`` is (JᵀJ, Jᵀr) at p, called only at a p that ``cost`` was last
    called with (a model can then share its work between the two). Returns (p, ‖r‖², converged, message).
    A model whose normal equations are cheaper than its Jacobian (a separable spot:
    :func:`tracker.profiles.spot_normal`) is fitted without ever forming J.
    """
    p = np.clip(np.asarray(p0, float), lower, upper)
    c = cost(p)
    lam = 1e-3
    a, g = normal(p)
    for _ in range(max_iter):
        dg = np.diag(a).copy()
        dg[dg <= 0] = 1e-12
        # parameters held at a bound by the gradient stay there (projected steps)
        free = ~(((p <= lower) & (g > 0)) | ((p >= upper) & (g < 0)))
        every = bool(free.all())  # the usual case: no parameter at a bound, no sub-matrix to gather
        af, df, gf = (a, dg, g) if every else (a[np.ix_(free, free)], dg[free], g[free])
        while True:
            step = np.zeros_like(p)
            try:
                sol = np.linalg.solve(af + lam * np.diag(df), -gf)
                if every:
                    step = sol
                else:
                    step[free] = sol
            except np.linalg.LinAlgError:
                pass
            pn = np.clip(p + step, lower, upper)
            cn = cost(pn)
            if np.isfinite(cn) and cn <= c:
                break
            lam *= 10.0
            if lam > 1e10:
                return p, c, True, "no further decrease"
        # converged when the step changes the fit by a negligible fraction of the residual
        gain = float(np.sum(dg * (pn - p) ** 2))
        drop = c - cn
        p, c = pn, cn
        lam = max(lam / 10.0, 1e-12)
        a, g = normal(p)
        if drop <= ftol * max(c, 1e-300) or gain <= ftol * max(c, 1e-300):
            return p, c, True, "converged"
    return p, c, False, f"no convergence in {max_iter} iterations"


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
