"""Estimation: fit the flight model to one or several tracked shots, with honest error bars.

Parameters
----------
Per shot (own): position at the first tracked point ``x0_m, y0_m`` (m), ``speed_mps`` (m/s, along the
flight), ``elevation_rad`` (above horizontal) and ``lift_coefficient`` C_L0 (C_L at the first point).
Shared by all shots of the fit (one BB type): the drag parameter (``drag_coefficient`` for the constant law,
``drag_scale`` for the sphere law) and the spin-decay parameter (``spin_decay_rate_per_s`` = 1/τ for the
exponential law, ``spin_torque_slope`` for the aerodynamic law). The layout of the vector:
:mod:`fitting.layout`.

The parts
---------
Inputs and results: :mod:`fitting.results`. The residual r = (model − data)/σ per coordinate, plus an
optional chronograph prior per shot: :mod:`fitting.problem`. The solver (lmfit's ``least_squares``,
plain then robust loss): :mod:`fitting.solver`. Covariance, the calibration's share and propagation:
:mod:`fitting.uncertainty`. When the spin decay is fitted or fixed: :mod:`fitting.spin_decay`. This module
puts them together (:func:`fit_shots`) and reads the per-shot and shared results off the solution.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np

from hopscope.shared.constants import STANDARD_GRAVITY_MPS2

from .air import Air
from .bb import BB
from .guess import BOUNDS
from .layout import BOUND_HIT_FRACTION, OWN_SLOTS, ParamLayout, decay_param_name, drag_param_name
from .observe import ModelSpec, RowParams, ShotData, drag_coefficient_at, initial_spin_radps
from .problem import FitProblem
from .results import (
    DEFAULT_F_SCALE,
    DEFAULT_LOSS,
    LOSSES,
    ChronoPrior,
    Estimate,
    FitStatistics,
    FittedModel,
    FlightFit,
    ShotFit,
)
from .solver import Solution
from .spin_decay import fit_with_decay_policy
from .uncertainty import OUTLIER_SIGMA, FitState, derived, direct, robust_sum

#: A larger fraction of outliers than this suggests a wrong model or a broken track (warning).
OUTLIER_FRACTION_WARN = 0.1

#: Reduced χ² above this draws a warning (the tracker's σ look too small).
CHI2_WARN = 2.0

#: Lift laws from whose published C_L(S) relation a spin figure is derived (as an assumption). The linear
#: law's k is a convention (k = 1), not a measurement of spheres: no spin figure from it.
SPIN_FROM_LIFT_LAWS = ("saturating",)

#: Fewer calibration perturbations than this make the calibration share rough (warning).
FEW_CALIBRATIONS = 10


def parameter_names(spec: ModelSpec, n_shots: int) -> tuple[str, ...]:
    """Names of the full parameter vector: ``s{i}_{slot}`` for each shot, then the shared ones."""
    return ParamLayout.for_spec(spec, n_shots).names


def rows_from_vector(spec: ModelSpec, theta: np.ndarray, n_shots: int) -> RowParams:
    """Per-shot row parameters from a full parameter vector (own slots shot by shot, then shared)."""
    return ParamLayout.for_spec(spec, n_shots).rows(theta)


def fit_shots(
    shots: Sequence[ShotData],
    *,
    bb: BB,
    air: Air,
    drag: str = "constant",
    lift: str = "linear",
    decay: str = "exponential",
    chrono: ChronoPrior | None = None,
    lift_k: float = 1.0,
    gravity_mps2: float = STANDARD_GRAVITY_MPS2,
    sphere_correlation: str = "clift-grace-weber",
    loss: str = DEFAULT_LOSS,
    f_scale: float = DEFAULT_F_SCALE,
    decay_fixed: float | None = None,
    max_nfev: int = 200,
) -> FlightFit:
    """Fit the flight model to one shot or jointly to several shots of one BB type.

    Parameters
    ----------
    shots : tracked shots (world frame, SI).
    bb, air : the BB (mass, diameter) and the air (density, viscosity).
    drag, lift, decay : law names (:data:`fitting.laws.DRAG_LAWS`, ``LIFT_LAWS``, ``DECAY_LAWS``).
    chrono : optional chronograph prior on every shot's speed.
    lift_k : nominal k of the linear lift law (only k·ω₀ is identifiable; spin is model-based).
    gravity_mps2 : m/s².
    loss, f_scale : robust loss of scipy.optimize.least_squares and its scale in σ.
    decay_fixed : fix the decay parameter (1/τ in 1/s, or the torque slope) instead of fitting it.
    max_nfev : evaluation budget of the optimiser.

    Returns
    -------
    FlightFit. ``converged`` is False (with ``reason``) when the optimiser failed or a parameter ran to
    its bound; the estimates are then those where it stopped.

    Raises
    ------
    ValueError
        Bad input: no shots, fewer residuals than parameters, unknown law or loss, bad options.
    """
    shots = tuple(shots)
    _check_inputs(shots, loss, f_scale)
    spec = ModelSpec(bb, air, drag, lift, decay, lift_k, sphere_correlation, gravity_mps2)
    lay = ParamLayout.for_spec(spec, len(shots))
    n_par = lay.size - (1 if decay_fixed is not None else 0)
    n_res = sum(2 * s.n_points for s in shots) + (len(shots) if chrono else 0)
    if n_res <= n_par:
        raise ValueError(f"shots: {n_res} coordinates for {n_par} parameters; need more tracked points")
    lower, upper = lay.bounds(spec, shots)
    theta = lay.start(spec, shots, lower, upper)
    free = np.ones(lay.size, dtype=bool)
    if decay_fixed is not None:
        lo, hi = BOUNDS[lay.decay_name]
        if not (math.isfinite(decay_fixed) and lo <= decay_fixed <= hi):
            raise ValueError(f"decay_fixed: {lay.decay_name} must lie in {lo:g}..{hi:g}, got {decay_fixed!r}")
        theta[lay.decay] = decay_fixed
        free[lay.decay] = False
    problem = FitProblem(shots, spec, theta, free, lower, upper, chrono)
    out = fit_with_decay_policy(
        problem, caller_fixed=decay_fixed is not None, loss=loss, f_scale=f_scale, max_nfev=max_nfev
    )
    problem, sol, st = out.problem, out.solution, out.state
    theta_hat = problem.full(sol.x)
    cov_n, cov_c = st.cov_noise, st.cov_cal
    cov = cov_n + cov_c
    warnings = [*out.warnings, *_scatter_warnings(st.stats)]
    drag_cd, drag_scale, tau = _shared_results(
        problem, theta_hat, st, determined=not (out.undetermined or decay_fixed is not None)
    )
    if decay_fixed is not None:
        warnings.append(
            f"spin decay fixed by the caller at {lay.decay_name} = {decay_fixed:g}; not estimated"
        )
        decay_param_est = None
    elif out.undetermined:
        decay_param_est = out.estimate
    else:
        decay_param_est = direct(theta_hat, problem.free, cov_n, cov_c, lay.decay)
    k_cal = max((s.n_calibrations for s in shots), default=0)
    warnings += _calibration_warnings(k_cal)
    reasons = _convergence_problems(problem, sol, st)
    return FlightFit(
        spec=spec,
        shots=_shot_results(problem, sol.x, st),
        drag_coefficient=drag_cd,
        drag_scale=drag_scale,
        spin_decay_time_s=tau,
        spin_decay_parameter=decay_param_est,
        decay_fixed_value=None if problem.free[lay.decay] else float(theta_hat[lay.decay]),
        parameter_names=problem.names,
        parameter_values=theta_hat,
        free=problem.free.copy(),
        covariance=cov,
        covariance_noise=cov_n,
        covariance_calibration=cov_c,
        correlation=_correlation(cov),
        statistics=st.stats,
        converged=not reasons,
        reason="; ".join(reasons),
        warnings=tuple(warnings),
        chrono=chrono,
        n_calibrations=k_cal,
        loss=sol.loss,
        f_scale_sigma=sol.f_scale,
        loss_requested=loss,
    )


# ---------------------------------------------------------------------------------------------- parts


def _check_inputs(shots: tuple[ShotData, ...], loss: str, f_scale: float) -> None:
    if not shots:
        raise ValueError("shots: need at least one shot to fit")
    for s in shots:
        if not isinstance(s, ShotData):
            raise ValueError(f"shots: expected ShotData, got {type(s).__name__}")
    if loss not in LOSSES:
        raise ValueError(f"loss: unknown {loss!r}, choose one of {', '.join(LOSSES)}")
    if not (math.isfinite(f_scale) and f_scale > 0):
        raise ValueError(f"f_scale must be positive, got {f_scale!r}")


def _correlation(cov: np.ndarray) -> np.ndarray:
    d = np.sqrt(np.clip(np.diag(cov), 0, None))
    with np.errstate(invalid="ignore", divide="ignore"):
        corr = cov / np.outer(d, d)
    corr[~np.isfinite(corr)] = 0.0
    return corr


def _convergence_problems(problem: FitProblem, sol: Solution, st: FitState) -> list[str]:
    """Why the fit does not count as converged (empty when it does)."""
    reasons = []
    if not sol.success:
        reasons.append(
            f"optimiser stopped without converging ({sol.message.strip() or 'no message'}, {sol.nfev} evaluations)"
        )
    lo_f, hi_f = problem.lower, problem.upper
    span_f = hi_f - lo_f
    decay_name = problem.layout.decay_name
    for name, v, a, b, s in zip(problem.free_names, sol.x, lo_f, hi_f, span_f, strict=True):
        at_lower = v <= a + BOUND_HIT_FRACTION * s
        if name == decay_name and at_lower:
            continue  # no decay is a physical answer (the decay policy handles it)
        if at_lower or v >= b - BOUND_HIT_FRACTION * s:
            reasons.append(f"parameter {_pretty(name, problem)} ran to its bound {a if at_lower else b:.6g}")
    if st.singular:
        reasons.append("the normal matrix is singular: some parameters are not determined by the data")
    return reasons


def _scatter_warnings(stats: FitStatistics) -> list[str]:
    warnings = []
    if stats.reduced_chi2 > CHI2_WARN:
        warnings.append(
            f"residual scatter is {math.sqrt(stats.reduced_chi2):.2g}× the tracked σ "
            f"(reduced χ² {stats.reduced_chi2:.3g}): error bars scaled up to match"
        )
    if stats.n_outliers:
        frac = stats.n_outliers / stats.n_points
        warnings.append(
            f"{stats.n_outliers} of {stats.n_points} points are outliers (> {OUTLIER_SIGMA:g}× the "
            "residual scatter): down-weighted in the fit, left out of χ² and the error bars"
            + ("; so many that the model or the track may be wrong" if frac > OUTLIER_FRACTION_WARN else "")
        )
    return warnings


def _calibration_warnings(k_cal: int) -> list[str]:
    if k_cal == 0:
        return ["no calibration offsets in the tracks: error bars leave out the calibration's uncertainty"]
    if k_cal < FEW_CALIBRATIONS:
        return [f"only {k_cal} calibration perturbations: the calibration share of the error bars is rough"]
    return []


def _shot_results(problem: FitProblem, x: np.ndarray, st: FitState) -> tuple[ShotFit, ...]:
    """Per-shot estimates, derived C_D and model spin, and residuals (observed − model)."""
    spec, lay = problem.spec, problem.layout
    theta, free, cov_n, cov_c = problem.full(x), problem.free, st.cov_noise, st.cov_cal
    positions = problem.positions(x)
    out = []
    for i, s in enumerate(problem.shots):
        m = s.n_points
        dx = s.x_m - positions[i, :m, 0]
        dy = s.y_m - positions[i, :m, 1]
        outl = st.point_outlier[i, :m]
        keep = ~outl
        both = np.concatenate([dx[keep], dy[keep]])
        rms_m = float(np.sqrt(np.mean(both**2))) if keep.any() else math.nan
        rs = both / np.concatenate([s.sigma_m[keep]] * 2)
        est = {slot: direct(theta, free, cov_n, cov_c, lay.index(i, slot)) for slot in OWN_SLOTS}
        i_speed, i_cl = lay.index(i, "speed_mps"), lay.index(i, "lift_coefficient")

        def cd_at(th, i_speed=i_speed):
            return float(drag_coefficient_at(spec, th[lay.drag], th[i_speed])[()])

        def spin_at(th, i_speed=i_speed, i_cl=i_cl):
            return float(initial_spin_radps(spec, th[i_cl], th[i_speed])[()])

        out.append(
            ShotFit(
                label=s.label,
                t0_s=float(s.t_s[0]),
                n_points=m,
                x0_m=est["x0_m"],
                y0_m=est["y0_m"],
                speed_mps=est["speed_mps"],
                elevation_rad=est["elevation_rad"],
                lift_coefficient=est["lift_coefficient"],
                drag_coefficient=derived(cd_at, theta, free, cov_n, cov_c, [lay.drag, i_speed]),
                spin_radps_model=(
                    derived(spin_at, theta, free, cov_n, cov_c, [i_speed, i_cl])
                    if spec.lift in SPIN_FROM_LIFT_LAWS
                    else Estimate(None, None)
                ),
                residual_t_s=s.t_s.copy(),
                residual_dx_m=dx,
                residual_dy_m=dy,
                outlier=outl,
                residual_rms_m=rms_m,
                residual_rms_sigma=float(np.sqrt(np.mean(rs**2))) if rs.size else math.nan,
                chi2=float(np.sum(rs**2)),
                rig_digest=s.rig_digest,
            )
        )
    return tuple(out)


def _shared_results(
    problem: FitProblem, theta: np.ndarray, st: FitState, *, determined: bool
) -> tuple[Estimate, Estimate | None, Estimate]:
    """C_D (at the mean first-point speed for the sphere law), the sphere law's scale, and τ."""
    spec, lay = problem.spec, problem.layout
    free, cov_n, cov_c = problem.free, st.cov_noise, st.cov_cal
    speeds = lay.slot("speed_mps")
    if spec.drag == "constant":
        drag_cd, drag_scale = direct(theta, free, cov_n, cov_c, lay.drag), None
    else:
        drag_scale = direct(theta, free, cov_n, cov_c, lay.drag)

        def cd_mean(th):
            return float(drag_coefficient_at(spec, th[lay.drag], np.mean(th[speeds]))[()])

        drag_cd = derived(cd_mean, theta, free, cov_n, cov_c, [lay.drag, *speeds])
    if not determined:
        return drag_cd, drag_scale, Estimate(None, None)
    if spec.decay == "exponential":
        tau = derived(lambda th: 1.0 / th[lay.decay], theta, free, cov_n, cov_c, [lay.decay])
    else:
        bb, air = spec.bb, spec.air

        def tau_fun(th):
            c = th[lay.decay]
            length = 2.0 * bb.inertia_kgm2 / (c * air.density_kgm3 * bb.area_m2 * bb.radius_m**2)
            return length / np.mean(th[speeds])

        tau = derived(tau_fun, theta, free, cov_n, cov_c, [lay.decay, *speeds])
    return drag_cd, drag_scale, tau


def _pretty(name: str, problem: FitProblem) -> str:
    shot = problem.layout.shot_of(name)
    if shot is None:
        return name
    return f"{name[name.index('_') + 1 :]} of shot {problem.shots[shot].label!r}"


__all__ = [
    "DEFAULT_F_SCALE",
    "DEFAULT_LOSS",
    "LOSSES",
    "ChronoPrior",
    "Estimate",
    "FitProblem",
    "FitStatistics",
    "FittedModel",
    "FlightFit",
    "ShotFit",
    "decay_param_name",
    "drag_param_name",
    "fit_shots",
    "parameter_names",
    "robust_sum",
    "rows_from_vector",
]
