"""Estimation: fit the flight model to one or several tracked shots with lmfit, with honest error bars.

Parameters
----------
Per shot (own): position at the first tracked point ``x0_m, y0_m`` (m), ``speed_mps`` (m/s, along the
flight), ``elevation_rad`` (above horizontal) and ``lift_coefficient`` C_L0 (C_L at the first point).
Shared by all shots of the fit (one BB type): the drag parameter (``drag_coefficient`` for the constant law,
``drag_scale`` for the sphere law) and the spin-decay parameter (``spin_decay_rate_per_s`` = 1/τ for the
exponential law, ``spin_torque_slope`` for the aerodynamic law).

Residual and loss
-----------------
r = (model − data)/σ per coordinate, plus an optional chronograph prior per shot; minimised by lmfit's
``least_squares`` method (trust-region reflective, physical bounds), first with the plain squared loss and,
when a residual is larger than clean Gaussian data would give, again with a robust loss (soft-L1, f_scale
2.5 σ by default) against the leftover outliers.

Uncertainty
-----------
The covariance is the Gauss-Newton (JᵀJ)⁻¹ at the solution over the inlier points (|r| ≤ 5), scaled by the
reduced χ² when that exceeds 1 (the residual scatter), plus the calibration's share: for each perturbed
calibration k the linearised shift δθ_k = (JᵀJ)⁻¹Jᵀ(o_k/σ) of the parameters under the points' offsets
o_k, and Cov_cal = mean_k δθ_k δθ_kᵀ (the K perturbations are taken as draws of the calibration error,
so the spread is about the nominal calibration). Shots mapped with the same rig share the k-th
perturbation. Derived quantities (τ, spin, C_D at a speed) use first-order propagation.

References
----------
Gauss-Newton covariance and Fisher information: e.g. Press et al. (2007), *Numerical Recipes*, 3rd ed.,
§15.5-15.6. Robust soft-L1 loss: scipy.optimize.least_squares documentation.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import lmfit
import numpy as np
import scipy.stats

from hopscope.shared.constants import STANDARD_GRAVITY_MPS2

from .air import Air
from .bb import BB
from .guess import (
    BOUNDS,
    DEFAULT_SPIN_DECAY_TIME_S,
    DEFAULT_TORQUE_SLOPE,
    guess_decay_param,
    guess_drag_param,
    guess_shot,
)
from .observe import (
    ModelSpec,
    RowParams,
    ShotData,
    StackedShots,
    drag_coefficient_at,
    initial_spin_radps,
    model_positions,
)

OWN_SLOTS: tuple[str, ...] = ("x0_m", "y0_m", "speed_mps", "elevation_rad", "lift_coefficient")

#: Central-difference steps for the Jacobian, per parameter kind (SI). The model is smooth in every
#: parameter (fixed integration grid), so the truncation error is ~h²; these steps keep round-off small.
JAC_STEP = {
    "x0_m": 1e-6,
    "y0_m": 1e-6,
    "speed_mps": 1e-4,
    "elevation_rad": 1e-6,
    "lift_coefficient": 1e-6,
    "drag_coefficient": 1e-6,
    "drag_scale": 1e-6,
    "spin_decay_rate_per_s": 1e-4,
    "spin_torque_slope": 1e-5,
}

#: A point whose normalised residual exceeds this in either coordinate is an outlier: it stays in the robust
#: fit (down-weighted by the loss) but is left out of χ², the covariance and the residual RMS.
OUTLIER_SIGMA = 5.0

#: With a robust loss, the fit is redone with it when any least-squares residual exceeds this (σ units), or
#: the level a clean Gaussian residual vector of that length exceeds with probability 1 %, if higher.
ROBUST_TRIGGER_SIGMA = 4.0

#: A larger fraction of outliers than this suggests a wrong model or a broken track (warning).
OUTLIER_FRACTION_WARN = 0.1

#: Default robust loss and its scale in units of σ.
DEFAULT_LOSS = "soft_l1"
DEFAULT_F_SCALE = 2.5

#: Spin decay counts as determined when its relative standard error is below this.
DECAY_DETERMINED_REL = 0.5

#: Before fitting, the decay is fixed at its default when its standard error at the start exceeds this many
#: times the default decay parameter (a 2 m close-up sees nothing of it; saves a wasted free fit).
PRECHECK_FACTOR = 1.0

#: A parameter within this fraction of its bound range from a bound "ran to its bound".
BOUND_HIT_FRACTION = 1e-6

#: The error bars are scaled by √(reduced χ²) when χ² exceeds its upper quantile at this probability.
CHI2_SCALE_P = 0.05

#: Reduced χ² above this draws a warning (the tracker's σ look too small).
CHI2_WARN = 2.0

LOSSES = ("linear", "soft_l1", "huber", "cauchy", "arctan")


@dataclass(frozen=True)
class ChronoPrior:
    """A chronograph speed used as a Gaussian prior on each shot's muzzle speed.

    Attributes
    ----------
    speed_mps : measured speed, m/s.
    sigma_mps : its standard uncertainty, m/s (with several shots it should cover the shot-to-shot spread).
    muzzle_x_m : downrange position of the chronograph/muzzle, m, or None to apply the prior at the first
        tracked point. With a muzzle position, the speed there is linked to the first-point speed by the
        drag-only decay v_muzzle = v₀·exp(q·C_D·d), d the path length from muzzle to first point
        (gravity changes the speed only to second order over such a gap).
    """

    speed_mps: float
    sigma_mps: float
    muzzle_x_m: float | None = None

    def __post_init__(self) -> None:
        if not (math.isfinite(self.speed_mps) and self.speed_mps > 0):
            raise ValueError(f"chronograph speed must be positive, got {self.speed_mps!r}")
        if not (math.isfinite(self.sigma_mps) and self.sigma_mps > 0):
            raise ValueError(f"chronograph sigma must be positive, got {self.sigma_mps!r}")
        if self.muzzle_x_m is not None and not math.isfinite(self.muzzle_x_m):
            raise ValueError(f"muzzle position must be finite, got {self.muzzle_x_m!r}")


@dataclass(frozen=True)
class Estimate:
    """A value with its standard error (SI), split into the noise and calibration parts.

    ``value``/``stderr`` are None when the data cannot determine the quantity.
    """

    value: float | None
    stderr: float | None
    stderr_noise: float | None = None
    stderr_calibration: float | None = None

    @property
    def calibration_share(self) -> float | None:
        """Fraction of the variance due to the calibration (0..1), or None."""
        if self.stderr is None or self.stderr_calibration is None or not self.stderr > 0:
            return None
        return float(min(1.0, (self.stderr_calibration / self.stderr) ** 2))


@dataclass(frozen=True)
class FitStatistics:
    """Goodness of fit (χ² in units of the tracked σ).

    ``chi2``, ``dof``, the RMS and the error-bar scale use the inlier points. ``aic`` = R + 2k and
    ``bic`` = R + k·ln(n) use ``robust_chi2`` R = Σ c²ρ(r²/c²) over all n residuals with the requested
    loss ρ (= χ² for clean data or the linear loss), so laws fitted to the same data compare fairly.
    """

    n_points: int
    n_residuals: int
    n_parameters: int
    dof: int
    chi2: float
    reduced_chi2: float
    stderr_scale: float
    aic: float
    bic: float
    residual_rms_m: float
    residual_rms_sigma: float
    n_outliers: int
    robust_chi2: float = math.nan


@dataclass(frozen=True, eq=False)
class ShotFit:
    """The fitted state of one shot and its residuals.

    Residuals are observed − model (dx, dy), m, at the shot's times ``residual_t_s`` (s, track clock);
    ``outlier`` marks the points left out of χ² and the covariance.
    """

    label: str
    t0_s: float
    n_points: int
    x0_m: Estimate
    y0_m: Estimate
    speed_mps: Estimate
    elevation_rad: Estimate
    lift_coefficient: Estimate
    drag_coefficient: Estimate
    spin_radps_model: Estimate
    residual_t_s: np.ndarray
    residual_dx_m: np.ndarray
    residual_dy_m: np.ndarray
    outlier: np.ndarray
    residual_rms_m: float
    residual_rms_sigma: float
    chi2: float
    rig_digest: str | None = None


@dataclass(frozen=True, eq=False)
class FittedModel:
    """What prediction needs from a fit: the model, the parameter vector and its covariance (SI).

    ``theta`` is the full vector (names ``names``: own slots shot by shot, then the shared drag and decay
    parameters); ``covariance`` is over the ``free`` entries. ``t0_s`` are the shots' first tracked times.
    """

    spec: ModelSpec
    names: tuple[str, ...]
    theta: np.ndarray
    free: np.ndarray
    covariance: np.ndarray
    labels: tuple[str, ...]
    t0_s: np.ndarray
    #: the calibration's part of ``covariance`` (shared by shots mapped with one rig), or None if unknown
    covariance_calibration: np.ndarray | None = None

    @property
    def noise_covariance(self) -> np.ndarray:
        """The covariance without the calibration's part (what differs from shot to shot)."""
        if self.covariance_calibration is None:
            return self.covariance
        return self.covariance - self.covariance_calibration

    @property
    def n_shots(self) -> int:
        return len(self.labels)

    def rows(self, theta: np.ndarray | None = None) -> RowParams:
        """Per-shot row parameters of ``theta`` (default: the fitted vector)."""
        return rows_from_vector(self.spec, self.theta if theta is None else theta, self.n_shots)

    def sample_theta(self, n: int, rng) -> np.ndarray:
        """n parameter vectors (n, p) drawn from N(θ̂, Cov) over the free entries; decay kept ≥ 0."""
        gen = np.random.default_rng(rng)
        out = np.tile(self.theta, (n, 1))
        cov = 0.5 * (self.covariance + self.covariance.T)
        w, v = np.linalg.eigh(cov)
        z = gen.standard_normal((n, w.size)) * np.sqrt(np.clip(w, 0.0, None))
        out[:, self.free] += z @ v.T
        out[:, -1] = np.abs(out[:, -1])  # decay parameters are ≥ 0 (reflect at the bound)
        out[:, -2] = np.abs(out[:, -2])
        return out


@dataclass(frozen=True, eq=False)
class FlightFit:
    """Result of :func:`fit_shots` (SI throughout).

    Attributes
    ----------
    spec : the model (BB, air, laws).
    shots : per-shot results.
    drag_coefficient : C_D (constant law) or C_D at the mean first-point speed (sphere law).
    drag_scale : the fitted scale of the sphere law, or None.
    spin_decay_time_s : τ, s (exponential law; for the aerodynamic law the equivalent L/u at the mean
        first-point speed). ``value`` None when the data cannot determine it (see ``warnings``).
    spin_decay_parameter : the fitted decay parameter (1/τ or torque slope) as estimated (even when τ is
        not determined), or None when it was fixed.
    decay_fixed_value : the value the decay parameter was fixed at, or None when it was fitted.
    parameter_names, parameter_values : the full parameter vector (own slots shot by shot, then shared).
    free : which parameters were fitted. covariance, covariance_noise, covariance_calibration, correlation :
        over the free parameters, in the order of ``free_names``.
    statistics : χ², AIC/BIC, RMS.
    converged : False when the optimiser failed or a parameter ran to its bound; ``reason`` says why.
    warnings : one line each.
    loss : the loss of the final fit ("linear" when no residual called for the robust one);
        loss_requested : the robust loss asked for (used only when outliers appear, see :func:`fit_shots`).
    """

    spec: ModelSpec
    shots: tuple[ShotFit, ...]
    drag_coefficient: Estimate
    drag_scale: Estimate | None
    spin_decay_time_s: Estimate
    spin_decay_parameter: Estimate | None
    decay_fixed_value: float | None
    parameter_names: tuple[str, ...]
    parameter_values: np.ndarray
    free: np.ndarray
    covariance: np.ndarray
    covariance_noise: np.ndarray
    covariance_calibration: np.ndarray
    correlation: np.ndarray
    statistics: FitStatistics
    converged: bool
    reason: str
    warnings: tuple[str, ...]
    chrono: ChronoPrior | None = None
    n_calibrations: int = 0
    method: str = "lmfit least_squares (trf)"
    loss: str = DEFAULT_LOSS
    f_scale_sigma: float = DEFAULT_F_SCALE
    loss_requested: str = DEFAULT_LOSS

    @property
    def free_names(self) -> tuple[str, ...]:
        return tuple(n for n, f in zip(self.parameter_names, self.free, strict=True) if f)

    def fitted_model(self) -> FittedModel:
        """The model, parameters and covariance for prediction."""
        return FittedModel(
            self.spec,
            self.parameter_names,
            self.parameter_values.copy(),
            self.free.copy(),
            self.covariance.copy(),
            tuple(s.label for s in self.shots),
            np.array([s.t0_s for s in self.shots]),
            self.covariance_calibration.copy(),
        )


def drag_param_name(spec: ModelSpec) -> str:
    return "drag_coefficient" if spec.drag == "constant" else "drag_scale"


def decay_param_name(spec: ModelSpec) -> str:
    return "spin_decay_rate_per_s" if spec.decay == "exponential" else "spin_torque_slope"


def parameter_names(spec: ModelSpec, n_shots: int) -> tuple[str, ...]:
    """Names of the full parameter vector: ``s{i}_{slot}`` for each shot, then the shared ones."""
    own = tuple(f"s{i}_{slot}" for i in range(n_shots) for slot in OWN_SLOTS)
    return (*own, drag_param_name(spec), decay_param_name(spec))


def rows_from_vector(spec: ModelSpec, theta: np.ndarray, n_shots: int) -> RowParams:
    """Per-shot row parameters from a full parameter vector (own slots shot by shot, then shared)."""
    own = np.asarray(theta[: 5 * n_shots], dtype=float).reshape(n_shots, 5)
    drag = np.full(n_shots, float(theta[5 * n_shots]))
    decay = np.full(n_shots, float(theta[5 * n_shots + 1]))
    return RowParams(own[:, 0], own[:, 1], own[:, 2], own[:, 3], own[:, 4], drag, decay)


class FitProblem:
    """The residual of a (joint) fit as a function of the free parameters, with a batched Jacobian.

    ``residual(x)`` and ``jacobian(x)`` take the vector of free parameters (order :attr:`free_names`).
    The Jacobian uses central differences, all perturbations integrated in one vectorised call: each shot's
    residual depends only on its own five parameters and the shared ones, so perturbing slot s of every shot
    at once gives all of slot s's columns.

    Notes
    -----
    World frame: x downrange, y up, metres.
    """

    def __init__(
        self,
        shots: Sequence[ShotData],
        spec: ModelSpec,
        theta_full: np.ndarray,
        free: np.ndarray,
        lower: np.ndarray,
        upper: np.ndarray,
        chrono: ChronoPrior | None = None,
    ) -> None:
        self.shots = tuple(shots)
        self.spec = spec
        self.n = len(self.shots)
        self.theta_full = np.asarray(theta_full, dtype=float).copy()
        self.free = np.asarray(free, dtype=bool)
        self.lower_full = np.asarray(lower, dtype=float)
        self.upper_full = np.asarray(upper, dtype=float)
        self.names = parameter_names(spec, self.n)
        self.chrono = chrono
        self.stack = StackedShots.from_shots(self.shots)
        mask = self.stack.mask
        # shot index of every residual entry: points (x, y interleaved), then the priors
        pts_shot = np.repeat(np.nonzero(mask)[0], 2)
        self.n_point_entries = pts_shot.size
        prior_shot = np.arange(self.n) if chrono is not None else np.zeros(0, dtype=int)
        self.entry_shot = np.concatenate([pts_shot, prior_shot])
        self.n_entries = self.entry_shot.size
        self.free_names = tuple(n for n, f in zip(self.names, self.free, strict=True) if f)
        self._col = {name: i for i, name in enumerate(self.free_names)}
        self._cache_key: bytes | None = None
        self._cache: tuple[np.ndarray, np.ndarray] | None = None
        if chrono is not None and chrono.muzzle_x_m is not None:
            for s in self.shots:
                if chrono.muzzle_x_m > s.x_m[0]:
                    raise ValueError(
                        f"muzzle position {chrono.muzzle_x_m:g} m lies downrange of the first tracked point "
                        f"of shot {s.label!r} ({s.x_m[0]:.4g} m)"
                    )

    # ------------------------------------------------------------------ vectors
    @property
    def x0(self) -> np.ndarray:
        return self.theta_full[self.free].copy()

    @property
    def lower(self) -> np.ndarray:
        return self.lower_full[self.free]

    @property
    def upper(self) -> np.ndarray:
        return self.upper_full[self.free]

    def full(self, x: np.ndarray) -> np.ndarray:
        theta = self.theta_full.copy()
        theta[self.free] = x
        return theta

    # ------------------------------------------------------------------ model
    def _prior(self, rows: RowParams) -> np.ndarray:
        c = self.chrono
        if c is None:
            raise ValueError("internal: chronograph residual requested without a prior")
        speed = np.asarray(rows.speed_mps, dtype=float)
        if c.muzzle_x_m is None:
            v_mz = speed
        else:
            q = 0.5 * self.spec.air.density_kgm3 * self.spec.bb.area_m2 / self.spec.bb.mass_kg
            cd = drag_coefficient_at(self.spec, rows.drag_param, speed)
            gap = (np.asarray(rows.x0_m) - c.muzzle_x_m) / np.cos(rows.elevation_rad)
            v_mz = speed * np.exp(q * cd * gap)
        return (v_mz - c.speed_mps) / c.sigma_mps

    def _entries(self, pos: np.ndarray, rows: RowParams, shot_of_row: np.ndarray) -> np.ndarray:
        """Residual entries (blocks of n rows each) → (n_blocks, n_entries)."""
        res = self.stack.residuals(pos, shot_of_row)
        n_blocks = pos.shape[0] // self.n
        res = res.reshape(n_blocks, self.n, *res.shape[1:])
        pts = res[:, self.stack.mask, :].reshape(n_blocks, -1)
        if self.chrono is None:
            return pts
        pri = self._prior(rows).reshape(n_blocks, self.n)
        return np.concatenate([pts, pri], axis=1)

    def _evaluate(self, x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        key = np.asarray(x, dtype=float).tobytes()
        if key == self._cache_key and self._cache is not None:
            return self._cache
        theta = self.full(np.asarray(x, dtype=float))
        base = rows_from_vector(self.spec, theta, self.n)
        fields = (
            "x0_m",
            "y0_m",
            "speed_mps",
            "elevation_rad",
            "lift_coefficient",
            "drag_param",
            "decay_param",
        )
        slot_names = [*OWN_SLOTS, self.names[-2], self.names[-1]]
        slot_free = [True] * 5 + [bool(self.free[-2]), bool(self.free[-1])]
        perts: list[tuple[int, float]] = []
        for s, (name, is_free) in enumerate(zip(slot_names, slot_free, strict=True)):
            if is_free:
                h = JAC_STEP[name]
                h_minus = h
                if s == 6:  # decay parameters are >= 0: shorten the lower arm at the bound
                    h_minus = min(h, float(theta[-1]))
                perts += [(s, +h), (s, -h_minus)]
        blocks = [dict((f, np.asarray(getattr(base, f), dtype=float)) for f in fields)]
        for s, h in perts:
            b = {f: v.copy() for f, v in blocks[0].items()}
            b[fields[s]] = b[fields[s]] + h
            blocks.append(b)
        rows = RowParams(**{f: np.concatenate([b[f] for b in blocks]) for f in fields})
        n_blocks = len(blocks)
        shot_of_row = np.tile(np.arange(self.n), n_blocks)
        t = np.tile(self.stack.t_rel_s, (n_blocks, 1))
        pos = model_positions(self.spec, rows, t)
        ent = self._entries(pos, rows, shot_of_row)
        r = ent[0]
        jac = np.zeros((self.n_entries, len(self.free_names)))
        rows_idx = np.arange(self.n_entries)
        for j in range(len(perts) // 2):
            s, h = perts[2 * j]
            width = h - perts[2 * j + 1][1]
            diff = (ent[1 + 2 * j] - ent[2 + 2 * j]) / width
            if s < 5:
                cols = np.array([self._col[f"s{i}_{OWN_SLOTS[s]}"] for i in range(self.n)])
                jac[rows_idx, cols[self.entry_shot]] = diff
            else:
                jac[:, self._col[slot_names[s]]] = diff
        self._cache_key, self._cache = key, (r, jac)
        return r, jac

    def residual(self, x: np.ndarray) -> np.ndarray:
        """Residual vector (model − data)/σ (points x, y interleaved, shot by shot; then priors)."""
        return self._evaluate(x)[0]

    def jacobian(self, x: np.ndarray) -> np.ndarray:
        """∂residual/∂x, shape (n_entries, n_free)."""
        return self._evaluate(x)[1]

    def positions(self, x: np.ndarray) -> np.ndarray:
        """Model positions (n, k, 2) of the shots at their (padded) times, m."""
        rows = rows_from_vector(self.spec, self.full(x), self.n)
        return model_positions(self.spec, rows, self.stack.t_rel_s)


# ---------------------------------------------------------------------------------------------- set-up


def _bounds(spec: ModelSpec, shots: Sequence[ShotData]) -> tuple[np.ndarray, np.ndarray]:
    lo, hi = [], []
    cl_lo, cl_hi = BOUNDS["lift_coefficient"]
    if math.isfinite(spec.cl_limit):
        cl_lo, cl_hi = max(cl_lo, -0.98 * spec.cl_limit), min(cl_hi, 0.98 * spec.cl_limit)
    for s in shots:
        pad = 0.1 + 100.0 * float(s.sigma_m[0])
        lo += [s.x_m[0] - pad, s.y_m[0] - pad, BOUNDS["speed_mps"][0], BOUNDS["elevation_rad"][0], cl_lo]
        hi += [s.x_m[0] + pad, s.y_m[0] + pad, BOUNDS["speed_mps"][1], BOUNDS["elevation_rad"][1], cl_hi]
    for name in (drag_param_name(spec), decay_param_name(spec)):
        lo.append(BOUNDS[name][0])
        hi.append(BOUNDS[name][1])
    return np.array(lo), np.array(hi)


def _start(spec: ModelSpec, shots: Sequence[ShotData], lower, upper) -> np.ndarray:
    guesses = [guess_shot(s, spec) for s in shots]
    values: list[float] = []
    for g in guesses:
        values += [g.x0_m, g.y0_m, g.speed_mps, g.elevation_rad, g.lift_coefficient]
    values += [guess_drag_param(guesses, spec), guess_decay_param(spec)]
    theta = np.array(values)
    span = upper - lower
    return np.clip(theta, lower + 1e-3 * span, upper - 1e-3 * span)


def _lmfit_run(problem: FitProblem, x0: np.ndarray, *, loss: str, f_scale: float, max_nfev: int):
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
        xtol=1e-10,
        ftol=1e-10,
        gtol=1e-10,
    )
    return vec(out.params), bool(out.success), str(getattr(out, "message", "") or ""), int(out.nfev)


def _solve(problem: FitProblem, *, loss: str, f_scale: float, max_nfev: int, x0: np.ndarray | None = None):
    """Least squares first; with a robust ``loss``, refit with it when a residual exceeds the trigger.

    The trigger is :data:`ROBUST_TRIGGER_SIGMA` (or the level a clean Gaussian residual vector of this
    length exceeds with probability 1 %, if higher) times the robust scatter of the residuals
    (1.4826·median |r|, at least 1), so that σ stated too small by the tracker do not pass for outliers;
    the robust loss's scale is ``f_scale`` times the same scatter. For clean Gaussian data the plain fit
    stands: it is the efficient one, and it converges in far fewer steps.

    Returns (x, success, message, nfev, loss_used, f_scale_used).
    """
    start = problem.x0 if x0 is None else x0
    x, ok, msg, nfev = _lmfit_run(problem, start, loss="linear", f_scale=1.0, max_nfev=max_nfev)
    r = problem.residual(x)
    pts = r[: problem.n_point_entries]
    scatter = max(1.0, 1.4826 * float(np.median(np.abs(pts)))) if pts.size else 1.0
    trigger = scatter * max(ROBUST_TRIGGER_SIGMA, float(scipy.stats.norm.isf(0.005 / r.size)))
    if loss == "linear" or np.max(np.abs(r)) <= trigger:
        return x, ok, msg, nfev, "linear", f_scale
    scale = f_scale * scatter
    x, ok, msg, nfev2 = _lmfit_run(problem, x, loss=loss, f_scale=scale, max_nfev=max_nfev)
    return x, ok, msg, nfev + nfev2, loss, scale


# ---------------------------------------------------------------------------------------------- covariance


@dataclass(frozen=True, eq=False)
class _Stats:
    r: np.ndarray
    jac: np.ndarray
    inlier_entry: np.ndarray
    point_outlier: np.ndarray  # (n, k) over the padded grid
    cov_noise: np.ndarray
    cov_cal: np.ndarray
    stats: FitStatistics
    singular: bool


def _inverse(a: np.ndarray) -> tuple[np.ndarray, bool]:
    """Inverse of a symmetric positive (semi-)definite matrix via its scaled eigendecomposition.

    Returns the (pseudo-)inverse and whether the matrix is numerically singular (condition > 1e13 after
    scaling to unit diagonal).
    """
    d = np.sqrt(np.clip(np.diag(a), 1e-300, None))
    scaled = a / np.outer(d, d)
    w, v = np.linalg.eigh(0.5 * (scaled + scaled.T))
    top = float(w[-1]) if w.size else 1.0
    singular = not (w.size and w[0] > top * 1e-13)
    keep = w > top * 1e-13
    inv = (v[:, keep] / w[keep]) @ v[:, keep].T
    return inv / np.outer(d, d), singular


def _cal_groups(shots: Sequence[ShotData]) -> list[list[int]]:
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


def _statistics(problem: FitProblem, x: np.ndarray, loss: str = "linear", f_scale: float = 1.0) -> _Stats:
    r, jac = problem._evaluate(x)
    stack = problem.stack
    n_pts_entries = problem.n_point_entries
    pts = r[:n_pts_entries].reshape(-1, 2)
    # outliers relative to the robust scatter (1.4826·median |r| estimates σ for Gaussian residuals), so
    # that σ stated too small by the tracker widens the error bars instead of discarding good points
    scatter = max(1.0, 1.4826 * float(np.median(np.abs(pts)))) if pts.size else 1.0
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
    inv, singular = _inverse(ji.T @ ji)
    cov_noise = inv * scale**2
    cov_cal = np.zeros_like(inv)
    shots = problem.shots
    for members in _cal_groups(shots):
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
    )
    return _Stats(r, jac, inlier, point_outlier, cov_noise, cov_cal, stats, singular)


def _estimate(value: float | None, var_noise: float, var_cal: float) -> Estimate:
    if value is None or not math.isfinite(value):
        return Estimate(None, None)
    vn, vc = max(var_noise, 0.0), max(var_cal, 0.0)
    if not (math.isfinite(vn) and math.isfinite(vc)):
        return Estimate(float(value), None)
    return Estimate(float(value), math.sqrt(vn + vc), math.sqrt(vn), math.sqrt(vc))


def _derived(
    fun, theta: np.ndarray, free: np.ndarray, cov_n: np.ndarray, cov_c: np.ndarray, idx: Sequence[int]
) -> Estimate:
    """First-order propagation of fun(theta) through the covariance over the parameters ``idx``."""
    value = float(fun(theta))
    free_pos = np.cumsum(free) - 1
    g = np.zeros(cov_n.shape[0])
    for i in idx:
        if not free[i]:
            continue
        h = 1e-6 * max(abs(theta[i]), 1e-3)
        tp, tm = theta.copy(), theta.copy()
        tp[i] += h
        tm[i] -= h
        g[free_pos[i]] = (fun(tp) - fun(tm)) / (2 * h)
    return _estimate(value, float(g @ cov_n @ g), float(g @ cov_c @ g))


def _direct(theta, free, cov_n, cov_c, i) -> Estimate:
    if not free[i]:
        return Estimate(float(theta[i]), 0.0, 0.0, 0.0)
    k = int(np.cumsum(free)[i] - 1)
    return _estimate(float(theta[i]), float(cov_n[k, k]), float(cov_c[k, k]))


def _with_decay_fixed(problem: FitProblem, x: np.ndarray, value: float) -> FitProblem:
    theta = problem.full(x)
    theta[-1] = value
    free = problem.free.copy()
    free[-1] = False
    return FitProblem(
        problem.shots, problem.spec, theta, free, problem.lower_full, problem.upper_full, problem.chrono
    )


def _decay_stderr(problem: FitProblem, x: np.ndarray) -> float:
    """Noise-only standard error of the (free) decay parameter from the Jacobian at ``x``."""
    jac = problem.jacobian(x)
    inv, _ = _inverse(jac.T @ jac)
    v = float(inv[-1, -1])
    return math.sqrt(v) if v >= 0 and math.isfinite(v) else math.inf


# ---------------------------------------------------------------------------------------------- public


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
    if not shots:
        raise ValueError("shots: need at least one shot to fit")
    for s in shots:
        if not isinstance(s, ShotData):
            raise ValueError(f"shots: expected ShotData, got {type(s).__name__}")
    if loss not in LOSSES:
        raise ValueError(f"loss: unknown {loss!r}, choose one of {', '.join(LOSSES)}")
    if not (math.isfinite(f_scale) and f_scale > 0):
        raise ValueError(f"f_scale must be positive, got {f_scale!r}")
    spec = ModelSpec(bb, air, drag, lift, decay, lift_k, sphere_correlation, gravity_mps2)
    n = len(shots)
    n_par = 5 * n + (1 if decay_fixed is not None else 2)
    n_res = sum(2 * s.n_points for s in shots) + (n if chrono else 0)
    if n_res <= n_par:
        raise ValueError(f"shots: {n_res} coordinates for {n_par} parameters; need more tracked points")
    lower, upper = _bounds(spec, shots)
    theta = _start(spec, shots, lower, upper)
    free = np.ones(theta.size, dtype=bool)
    if decay_fixed is not None:
        name = decay_param_name(spec)
        lo, hi = BOUNDS[name]
        if not (math.isfinite(decay_fixed) and lo <= decay_fixed <= hi):
            raise ValueError(f"decay_fixed: {name} must lie in {lo:g}..{hi:g}, got {decay_fixed!r}")
        theta[-1] = decay_fixed
        free[-1] = False
    warnings: list[str] = []
    decay_name = decay_param_name(spec)
    ref = 1.0 / DEFAULT_SPIN_DECAY_TIME_S if spec.decay == "exponential" else DEFAULT_TORQUE_SLOPE
    decay_est: Estimate | None = None
    undetermined = False
    fixed_value = decay_fixed
    problem = FitProblem(shots, spec, theta, free, lower, upper, chrono)
    if decay_fixed is None:
        # Cheap look first: if at the starting point the data cannot tell the decay from no decay at 1σ,
        # fit with it fixed at the default straight away; the check is redone at the solution, where a
        # decay the data do determine (or that contradicts the default) is then fitted freely.
        err0 = _decay_stderr(problem, problem.x0)
        if not err0 <= PRECHECK_FACTOR * ref:
            fixed_value = ref
            problem = _with_decay_fixed(problem, problem.x0, ref)
    x, success, message, nfev, loss_used, f_used = _solve(
        problem, loss=loss, f_scale=f_scale, max_nfev=max_nfev
    )
    st = _statistics(problem, x, loss, f_scale)
    if decay_fixed is None:
        val = err = None
        if fixed_value is not None:
            # the decay as the data see it at the solution: one Gauss-Newton step with it free
            free_all = np.ones(theta.size, dtype=bool)
            probe = FitProblem(shots, spec, problem.full(x), free_all, lower, upper, chrono)
            st_probe = _statistics(probe, probe.x0, loss, f_scale)
            ji = st_probe.jac[st_probe.inlier_entry]
            step = -_inverse(ji.T @ ji)[0] @ (ji.T @ st_probe.r[st_probe.inlier_entry])
            val = float(np.clip(ref + step[-1], lower[-1], upper[-1]))
            decay_est = _direct(
                probe.full(probe.x0), free_all, st_probe.cov_noise, st_probe.cov_cal, theta.size - 1
            )
            err = decay_est.stderr
            decay_est = Estimate(val, err, decay_est.stderr_noise, decay_est.stderr_calibration)
            determined = err is not None and math.isfinite(err) and err <= DECAY_DETERMINED_REL * val
            contradicts = err is not None and math.isfinite(err) and abs(val - ref) > 2 * err
            if determined or contradicts:
                theta_free = problem.full(x)
                theta_free[-1] = val
                problem = FitProblem(shots, spec, theta_free, free_all, lower, upper, chrono)
                x, success, message, nfev2, loss_used, f_used = _solve(
                    problem, loss=loss, f_scale=f_scale, max_nfev=max_nfev
                )
                nfev += nfev2
                st = _statistics(problem, x, loss, f_scale)
                fixed_value = None
        if fixed_value is None:
            theta_hat = problem.full(x)
            decay_est = _direct(theta_hat, problem.free, st.cov_noise, st.cov_cal, theta.size - 1)
            val, err = decay_est.value, decay_est.stderr
        at_upper = val is not None and val >= upper[-1] - BOUND_HIT_FRACTION * (upper[-1] - lower[-1])
        undetermined = (
            fixed_value is not None
            or val is None
            or err is None
            or not (err <= DECAY_DETERMINED_REL * val)
            or at_upper
            or st.singular
        )
        if undetermined and fixed_value is None:
            if (
                val is None
                or err is None
                or not math.isfinite(err)
                or at_upper
                or val - 2 * err <= ref <= val + 2 * err
            ):
                # the data allow the default: fix it there so the other error bars are not widened by
                # a parameter the data cannot see
                fixed_value = ref
                problem = _with_decay_fixed(problem, x, ref)
                x, success, message, nfev2, loss_used, f_used = _solve(
                    problem, loss=loss, f_scale=f_scale, max_nfev=max_nfev
                )
                nfev += nfev2
                st = _statistics(problem, x, loss, f_scale)
        if undetermined:
            span = max(s.duration_s for s in shots)
            if err is not None and val is not None and math.isfinite(err):
                what = f"{decay_name} = {val:.3g} ± {err:.2g} over a {span:.3g} s track"
            else:
                what = f"{decay_name} undetermined over a {span:.3g} s track"
            if fixed_value is not None:
                tau_txt = (
                    f"τ = {DEFAULT_SPIN_DECAY_TIME_S:g} s"
                    if spec.decay == "exponential"
                    else f"torque slope {DEFAULT_TORQUE_SLOPE:g}"
                )
                warnings.append(
                    f"spin decay not determined by the data ({what}): spin_decay_time_s is null; "
                    f"the other parameters and predictions assume {tau_txt}"
                )
            else:
                bound = (
                    1.0 / (val + 2 * err)
                    if (spec.decay == "exponential" and val is not None and err is not None)
                    else None
                )
                extra = f"; τ > {bound:.3g} s at 2σ" if bound else ""
                warnings.append(
                    f"spin decay not determined by the data ({what}): spin_decay_time_s is null{extra}"
                )
    theta_hat = problem.full(x)
    free = problem.free
    cov_n, cov_c = st.cov_noise, st.cov_cal
    cov = cov_n + cov_c
    d = np.sqrt(np.clip(np.diag(cov), 0, None))
    with np.errstate(invalid="ignore", divide="ignore"):
        corr = cov / np.outer(d, d)
    corr[~np.isfinite(corr)] = 0.0

    # ---- convergence and bounds
    reasons = []
    if not success:
        reasons.append(
            f"optimiser stopped without converging ({message.strip() or 'no message'}, {nfev} evaluations)"
        )
    lo_f, hi_f = problem.lower, problem.upper
    span_f = hi_f - lo_f
    for name, v, a, b, s in zip(problem.free_names, x, lo_f, hi_f, span_f, strict=True):
        if name == decay_name and v <= a + BOUND_HIT_FRACTION * s:
            continue  # no decay is a physical answer, handled above
        if v <= a + BOUND_HIT_FRACTION * s or v >= b - BOUND_HIT_FRACTION * s:
            bound = a if v <= a + BOUND_HIT_FRACTION * s else b
            reasons.append(f"parameter {_pretty(name, shots)} ran to its bound {bound:.6g}")
    if st.singular:
        reasons.append("the normal matrix is singular: some parameters are not determined by the data")
    converged = not reasons
    if st.stats.reduced_chi2 > CHI2_WARN:
        warnings.append(
            f"residual scatter is {math.sqrt(st.stats.reduced_chi2):.2g}× the tracked σ "
            f"(reduced χ² {st.stats.reduced_chi2:.3g}): error bars scaled up to match"
        )
    if st.stats.n_outliers:
        frac = st.stats.n_outliers / st.stats.n_points
        warnings.append(
            f"{st.stats.n_outliers} of {st.stats.n_points} points are outliers (> {OUTLIER_SIGMA:g}× the "
            "residual scatter): down-weighted in the fit, left out of χ² and the error bars"
            + ("; so many that the model or the track may be wrong" if frac > OUTLIER_FRACTION_WARN else "")
        )

    # ---- per-shot results
    positions = problem.positions(x)
    stack = problem.stack
    shot_fits = []
    idx_drag = 5 * n
    for i, s in enumerate(shots):
        base = 5 * i
        m = s.n_points
        dx = s.x_m - positions[i, :m, 0]
        dy = s.y_m - positions[i, :m, 1]
        outl = st.point_outlier[i, :m]
        keep = ~outl
        rms_m = float(np.sqrt(np.mean(np.concatenate([dx[keep], dy[keep]]) ** 2))) if keep.any() else math.nan
        rs = np.concatenate([dx[keep], dy[keep]]) / np.concatenate([s.sigma_m[keep]] * 2)
        est = [_direct(theta_hat, free, cov_n, cov_c, base + j) for j in range(5)]

        def cd_at(th, i=i, base=base):
            return float(drag_coefficient_at(spec, th[idx_drag], th[base + 2])[()])

        def spin_at(th, base=base):
            return float(initial_spin_radps(spec, th[base + 4], th[base + 2])[()])

        cd_est = _derived(cd_at, theta_hat, free, cov_n, cov_c, [idx_drag, base + 2])
        spin_est = _derived(spin_at, theta_hat, free, cov_n, cov_c, [base + 2, base + 4])
        shot_fits.append(
            ShotFit(
                label=s.label,
                t0_s=float(s.t_s[0]),
                n_points=m,
                x0_m=est[0],
                y0_m=est[1],
                speed_mps=est[2],
                elevation_rad=est[3],
                lift_coefficient=est[4],
                drag_coefficient=cd_est,
                spin_radps_model=spin_est,
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
    del stack

    # ---- shared results
    mean_speed_idx = [5 * i + 2 for i in range(n)]
    if spec.drag == "constant":
        drag_cd = _direct(theta_hat, free, cov_n, cov_c, idx_drag)
        drag_scale = None
    else:
        drag_scale = _direct(theta_hat, free, cov_n, cov_c, idx_drag)

        def cd_mean(th):
            return float(drag_coefficient_at(spec, th[idx_drag], np.mean(th[mean_speed_idx]))[()])

        drag_cd = _derived(cd_mean, theta_hat, free, cov_n, cov_c, [idx_drag, *mean_speed_idx])
    idx_decay = 5 * n + 1
    if undetermined or (decay_fixed is not None):
        tau = Estimate(None, None)
        if decay_fixed is not None and not undetermined:
            warnings.append(
                f"spin decay fixed by the caller at {decay_name} = {decay_fixed:g}; not estimated"
            )
    else:
        if spec.decay == "exponential":

            def tau_fun(th):
                return 1.0 / th[idx_decay]

            tau = _derived(tau_fun, theta_hat, free, cov_n, cov_c, [idx_decay])
        else:

            def tau_fun(th):
                c = th[idx_decay]
                length = 2.0 * bb.inertia_kgm2 / (c * air.density_kgm3 * bb.area_m2 * bb.radius_m**2)
                return length / np.mean(th[mean_speed_idx])

            tau = _derived(tau_fun, theta_hat, free, cov_n, cov_c, [idx_decay, *mean_speed_idx])
    if undetermined or decay_fixed is not None:
        decay_param_est = decay_est if (undetermined and decay_est is not None) else None
    else:
        decay_param_est = _direct(theta_hat, free, cov_n, cov_c, idx_decay)
    k_cal = max((s.n_calibrations for s in shots), default=0)
    if k_cal == 0:
        warnings.append(
            "no calibration offsets in the tracks: error bars leave out the calibration's uncertainty"
        )
    elif 0 < k_cal < 10:
        warnings.append(
            f"only {k_cal} calibration perturbations: the calibration share of the error bars is rough"
        )
    return FlightFit(
        spec=spec,
        shots=tuple(shot_fits),
        drag_coefficient=drag_cd,
        drag_scale=drag_scale,
        spin_decay_time_s=tau,
        spin_decay_parameter=decay_param_est,
        decay_fixed_value=float(theta_hat[idx_decay]) if not free[idx_decay] else None,
        parameter_names=problem.names,
        parameter_values=theta_hat,
        free=free.copy(),
        covariance=cov,
        covariance_noise=cov_n,
        covariance_calibration=cov_c,
        correlation=corr,
        statistics=st.stats,
        converged=converged,
        reason="; ".join(reasons),
        warnings=tuple(warnings),
        chrono=chrono,
        n_calibrations=k_cal,
        loss=loss_used,
        f_scale_sigma=f_used,
        loss_requested=loss,
    )


def _pretty(name: str, shots: Sequence[ShotData]) -> str:
    if name.startswith("s") and "_" in name and name[1 : name.index("_")].isdigit():
        i = int(name[1 : name.index("_")])
        return f"{name[name.index('_') + 1 :]} of shot {shots[i].label!r}"
    return name


__all__ = [
    "ChronoPrior",
    "Estimate",
    "FitProblem",
    "FitStatistics",
    "FittedModel",
    "FlightFit",
    "ShotFit",
    "fit_shots",
    "parameter_names",
    "rows_from_vector",
]
