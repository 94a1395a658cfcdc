"""The solver adapter: the one module that imports lmfit.

:func:`solve` minimises a :class:`fitting.problem.FitProblem` with lmfit's ``least_squares`` method
(trust-region reflective, physical bounds), first with the plain squared loss and, when a residual is larger
than clean Gaussian data would give, again with a robust loss.

References
----------
Robust losses and their scale: scipy.optimize.least_squares documentation (``loss``, ``f_scale``).
"""

from __future__ import annotations

from dataclasses import dataclass

import lmfit
import numpy as np
import scipy.stats

from hopscope.shared.constants import MAD_TO_SIGMA

from .problem import FitProblem

#: With a robust loss, the fit is redone with it when any least-squares residual exceeds this (σ units), or
#: the level a clean Gaussian residual vector of that length exceeds with probability 1 %, if higher.
ROBUST_TRIGGER_SIGMA = 4.0
#: Two-sided probability behind the length-dependent trigger (1 % over the whole residual vector).
ROBUST_TRIGGER_P = 0.01
#: Convergence tolerances handed to least_squares (relative, in x, cost and gradient).
SOLVER_TOL = 1e-10


@dataclass(frozen=True, eq=False)
class Solution:
    """Where the solver stopped.

    Attributes
    ----------
    x : free parameter vector (order of ``problem.free_names``).
    success, message, nfev : the optimiser's report (evaluations summed over the runs).
    loss, f_scale : the loss of the final run and its scale (σ units times the residual scatter).
    """

    x: np.ndarray
    success: bool
    message: str
    nfev: int
    loss: str
    f_scale: float


def residual_scatter(points: np.ndarray) -> float:
    """Robust scatter of normalised residuals, MAD_TO_SIGMA·median |r|, at least 1 (σ units)."""
    return max(1.0, MAD_TO_SIGMA * float(np.median(np.abs(points)))) if points.size else 1.0


def _lmfit_run(
    problem: FitProblem, x0: np.ndarray, *, loss: str, f_scale: float, max_nfev: int
) -> tuple[np.ndarray, bool, str, int]:
    """One lmfit least_squares run from ``x0``: (x, success, message, evaluations)."""
    params = lmfit.Parameters()
    for name, v, a, b in zip(problem.free_names, x0, problem.lower, problem.upper, strict=True):
        params.add(name, value=float(v), min=float(a), max=float(b))
    names = problem.free_names

    def vec(p: lmfit.Parameters) -> np.ndarray:
        return np.array([p[nm].value for nm in names])

    def fcn(p: lmfit.Parameters) -> np.ndarray:
        return problem.residual(vec(p))

    def dfun(p: lmfit.Parameters) -> np.ndarray:
        return problem.jacobian(vec(p))

    mini = lmfit.Minimizer(fcn, params)
    out = mini.minimize(
        method="least_squares",
        loss=loss,
        f_scale=f_scale,
        jac=dfun,
        x_scale="jac",
        max_nfev=max_nfev,
        xtol=SOLVER_TOL,
        ftol=SOLVER_TOL,
        gtol=SOLVER_TOL,
    )
    return vec(out.params), bool(out.success), str(getattr(out, "message", "") or ""), int(out.nfev)


def solve(
    problem: FitProblem, *, loss: str, f_scale: float, max_nfev: int, x0: np.ndarray | None = None
) -> Solution:
    """Least squares first; with a robust ``loss``, refit with it when a residual exceeds the trigger.

    The trigger is :data:`ROBUST_TRIGGER_SIGMA` (or the level a clean Gaussian residual vector of this
    length exceeds with probability :data:`ROBUST_TRIGGER_P`, if higher) times the robust scatter of the
    residuals (:func:`residual_scatter`), so that σ stated too small by the tracker do not pass for
    outliers; the robust loss's scale is ``f_scale`` times the same scatter. For clean Gaussian data the
    plain fit stands: it is the efficient one, and it converges in far fewer steps.
    """
    start = problem.x0 if x0 is None else x0
    x, ok, msg, nfev = _lmfit_run(problem, start, loss="linear", f_scale=1.0, max_nfev=max_nfev)
    r = problem.residual(x)
    scatter = residual_scatter(r[: problem.n_point_entries])
    trigger = scatter * max(
        ROBUST_TRIGGER_SIGMA, float(scipy.stats.norm.isf(0.5 * ROBUST_TRIGGER_P / r.size))
    )
    if loss == "linear" or np.max(np.abs(r)) <= trigger:
        return Solution(x, ok, msg, nfev, "linear", f_scale)
    scale = f_scale * scatter
    x, ok, msg, nfev2 = _lmfit_run(problem, x, loss=loss, f_scale=scale, max_nfev=max_nfev)
    return Solution(x, ok, msg, nfev + nfev2, loss, scale)


__all__ = ["ROBUST_TRIGGER_SIGMA", "Solution", "residual_scatter", "solve"]
