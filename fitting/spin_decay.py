"""The spin-decay policy of a fit: fit the decay where the data see it, fix it at a default where not.

A short track cannot tell a spinning BB's decay from no decay, and a free parameter the data do not
determine only widens every other error bar. So: before fitting, if at the starting point the data cannot
tell the decay from the default at 1σ (:data:`PRECHECK_FACTOR`), it is fixed at the default; at the
solution one Gauss-Newton step with it free says what the data think of it, and a decay the data do
determine (relative error below :data:`DECAY_DETERMINED_REL`) or one that contradicts the default at
:data:`CONTRADICT_SIGMAS` σ is then fitted freely. A freely fitted decay that turns out undetermined but
allows the default is fixed there. The outcome says which, and its warning says what the other
parameters assume.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .guess import DEFAULT_SPIN_DECAY_TIME_S, DEFAULT_TORQUE_SLOPE
from .layout import BOUND_HIT_FRACTION
from .problem import FitProblem
from .results import Estimate
from .solver import Solution, solve
from .uncertainty import FitState, direct, fit_state, inverse

#: Spin decay counts as determined when its relative standard error is below this. τ = 1/λ is reported
#: with a first-order σ, which needs λ well away from zero: at a relative error ε the transform's
#: second-order bias is ≈ ε² (25 % at ε = 0.5, 6 % at 0.25). A one-board close lane reported
#: τ = 0.025 ± 0.010 s for a true 2 s at ε = 0.4.
DECAY_DETERMINED_REL = 0.25

#: Before fitting, the decay is fixed at its default when its standard error at the start exceeds this many
#: times the default decay parameter (a 2 m close-up sees nothing of it; saves a wasted free fit).
PRECHECK_FACTOR = 1.0

#: A fitted decay more than this many standard errors from the default contradicts it (at 2σ one shot in
#: twenty would free its decay by chance; then a short track's noise reads as a fast decay).
CONTRADICT_SIGMAS = 3.0


@dataclass(frozen=True, eq=False)
class DecayOutcome:
    """The fit after the decay policy.

    Attributes
    ----------
    problem : the final problem (decay free or fixed). solution, state : the solver's result and the
        covariance there.
    fixed_value : the value the decay parameter ended fixed at by the policy, or None (fitted, or fixed
        by the caller).
    estimate : the decay parameter as the data see it (also when undetermined), or None.
    undetermined : the data do not determine the decay.
    warnings : one line each.
    """

    problem: FitProblem
    solution: Solution
    state: FitState
    fixed_value: float | None
    estimate: Estimate | None
    undetermined: bool
    warnings: tuple[str, ...]


def default_decay_param(problem: FitProblem) -> float:
    """The default decay parameter of the problem's law: 1/τ (1/s) or the torque slope."""
    if problem.spec.decay == "exponential":
        return 1.0 / DEFAULT_SPIN_DECAY_TIME_S
    return DEFAULT_TORQUE_SLOPE


def decay_stderr(problem: FitProblem, x: np.ndarray) -> float:
    """Noise-only standard error of the (free) decay parameter from the Jacobian at ``x``."""
    jac = problem.jacobian(x)
    inv, _ = inverse(jac.T @ jac)
    col = problem.free_names.index(problem.layout.decay_name)
    v = float(inv[col, col])
    return math.sqrt(v) if v >= 0 and math.isfinite(v) else math.inf


def _probe(problem: FitProblem, x: np.ndarray, ref: float, loss: str, f_scale: float) -> Estimate:
    """The decay as the data see it at ``x`` (decay fixed at ``ref``): one Gauss-Newton step with it free."""
    lay = problem.layout
    probe = problem.with_all_free(problem.full(x))
    st = fit_state(probe, probe.x0, loss, f_scale)
    ji = st.jac[st.inlier_entry]
    step = -inverse(ji.T @ ji)[0] @ (ji.T @ st.r[st.inlier_entry])
    col = probe.free_names.index(lay.decay_name)
    val = float(np.clip(ref + step[col], problem.lower_full[lay.decay], problem.upper_full[lay.decay]))
    est = direct(probe.full(probe.x0), probe.free, st.cov_noise, st.cov_cal, lay.decay)
    return Estimate(val, est.stderr, est.stderr_noise, est.stderr_calibration)


def fit_with_decay_policy(
    problem: FitProblem, *, caller_fixed: bool, loss: str, f_scale: float, max_nfev: int
) -> DecayOutcome:
    """Solve ``problem`` under the policy of the module docstring.

    ``caller_fixed``: the caller fixed the decay in ``problem`` already; it is then solved as it is.
    """
    if caller_fixed:
        sol = solve(problem, loss=loss, f_scale=f_scale, max_nfev=max_nfev)
        return DecayOutcome(problem, sol, fit_state(problem, sol.x, loss, f_scale), None, None, False, ())
    lay = problem.layout
    ref = default_decay_param(problem)
    upper = float(problem.upper_full[lay.decay])
    lower = float(problem.lower_full[lay.decay])
    fixed_value: float | None = None
    if not decay_stderr(problem, problem.x0) <= PRECHECK_FACTOR * ref:
        fixed_value = ref
        problem = problem.with_decay_fixed(problem.x0, ref)
    sol = solve(problem, loss=loss, f_scale=f_scale, max_nfev=max_nfev)
    nfev = sol.nfev
    st = fit_state(problem, sol.x, loss, f_scale)
    est: Estimate | None = None
    if fixed_value is not None:
        est = _probe(problem, sol.x, ref, loss, f_scale)
        val, err = est.value, est.stderr
        finite = val is not None and err is not None and math.isfinite(err)
        determined = finite and err <= DECAY_DETERMINED_REL * val  # type: ignore[operator]
        contradicts = finite and abs(val - ref) > CONTRADICT_SIGMAS * err  # type: ignore[operator]
        if determined or contradicts:
            theta = problem.full(sol.x)
            theta[lay.decay] = val
            problem = problem.with_all_free(theta)
            sol = solve(problem, loss=loss, f_scale=f_scale, max_nfev=max_nfev)
            nfev += sol.nfev
            st = fit_state(problem, sol.x, loss, f_scale)
            fixed_value = None
    if fixed_value is None:
        est = direct(problem.full(sol.x), problem.free, st.cov_noise, st.cov_cal, lay.decay)
    val = None if est is None else est.value
    err = None if est is None else est.stderr
    at_upper = val is not None and val >= upper - BOUND_HIT_FRACTION * (upper - lower)
    undetermined = (
        fixed_value is not None
        or val is None
        or err is None
        or not (err <= DECAY_DETERMINED_REL * val)
        or at_upper
        or st.singular
    )
    if undetermined and fixed_value is None:
        allows_default = (
            val is None
            or err is None
            or not math.isfinite(err)
            or at_upper
            or val - CONTRADICT_SIGMAS * err <= ref <= val + CONTRADICT_SIGMAS * err
        )
        if allows_default:
            # fix it there so the other error bars are not widened by a parameter the data cannot see
            fixed_value = ref
            problem = problem.with_decay_fixed(sol.x, ref)
            sol = solve(problem, loss=loss, f_scale=f_scale, max_nfev=max_nfev)
            nfev += sol.nfev
            st = fit_state(problem, sol.x, loss, f_scale)
    warnings = (_warning(problem, val, err, fixed_value),) if undetermined else ()
    sol = Solution(sol.x, sol.success, sol.message, nfev, sol.loss, sol.f_scale)
    return DecayOutcome(problem, sol, st, fixed_value, est, undetermined, warnings)


def _warning(problem: FitProblem, val: float | None, err: float | None, fixed_value: float | None) -> str:
    name = problem.layout.decay_name
    span = max(s.duration_s for s in problem.shots)
    if err is not None and val is not None and math.isfinite(err):
        what = f"{name} = {val:.3g} ± {err:.2g} over a {span:.3g} s track"
    else:
        what = f"{name} undetermined over a {span:.3g} s track"
    exponential = problem.spec.decay == "exponential"
    if fixed_value is not None:
        tau_txt = (
            f"τ = {DEFAULT_SPIN_DECAY_TIME_S:g} s"
            if exponential
            else f"torque slope {DEFAULT_TORQUE_SLOPE:g}"
        )
        return (
            f"spin decay not determined by the data ({what}): spin_decay_time_s is null; "
            f"the other parameters and predictions assume {tau_txt}"
        )
    bound = (
        1.0 / (val + CONTRADICT_SIGMAS * err)
        if (exponential and val is not None and err is not None)
        else None
    )
    extra = f"; τ > {bound:.3g} s at {CONTRADICT_SIGMAS:g}σ" if bound else ""
    return f"spin decay not determined by the data ({what}): spin_decay_time_s is null{extra}"


__all__ = [
    "DECAY_DETERMINED_REL",
    "DecayOutcome",
    "decay_stderr",
    "default_decay_param",
    "fit_with_decay_policy",
]
