"""Inputs and results of a fit: the chronograph prior, estimates, statistics, per-shot and joint results.

Every result is a frozen dataclass in SI units. :class:`FittedModel` is what prediction needs (the model,
the full parameter vector in the :class:`fitting.layout.ParamLayout` order and its covariance).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .bb import BBTolerance
from .layout import ParamLayout
from .observe import ModelSpec, RowParams

#: Default robust loss and its scale in units of σ.
DEFAULT_LOSS = "soft_l1"
DEFAULT_F_SCALE = 2.5

#: The robust losses of scipy.optimize.least_squares (documentation of its ``loss`` argument).
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
    #: the part due to the BB's mass and diameter tolerance (see :func:`fitting.bb.with_bb_share`), or None
    stderr_bb: float | None = None

    @property
    def calibration_share(self) -> float | None:
        """Fraction of the variance due to the calibration (0..1), or None."""
        return self._share(self.stderr_calibration)

    @property
    def bb_share(self) -> float | None:
        """Fraction of the variance due to the BB's mass and diameter tolerance (0..1), or None."""
        return self._share(self.stderr_bb)

    def _share(self, part: float | None) -> float | None:
        if self.stderr is None or part is None or not self.stderr > 0:
            return None
        return float(min(1.0, (part / self.stderr) ** 2))


@dataclass(frozen=True)
class FitStatistics:
    """Goodness of fit (χ² in units of the tracked σ).

    ``chi2``, ``dof``, the RMS and the error-bar scale use the inlier points. ``aic`` = R + 2k and
    ``bic`` = R + k·ln(n) use ``robust_chi2`` R = Σ c²ρ(r²/c²) over all n residuals with the requested
    loss ρ (= χ² for clean data or the linear loss), so laws fitted to the same data compare fairly.
    ``serial_correlation_x``/``_y``: the errors' correlation between neighbouring frames per axis.
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
    #: Correlation of the normalised position errors between neighbouring frames, per axis (ρ^k at k
    #: frames: :mod:`fitting.serial`); it widens the error bars by the sandwich covariance.
    serial_correlation_x: float = 0.0
    serial_correlation_y: float = 0.0


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
    #: spin ω₀ (rad/s) from the saturating law's published C_L(S) relation, an assumption, not a
    #: measurement; ``value`` None under the linear law (its k is a convention)
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
        return self.layout.rows(self.theta if theta is None else theta)

    @property
    def layout(self) -> ParamLayout:
        """Where each parameter lives in ``theta`` (own slots per shot, then drag, then decay)."""
        return ParamLayout.from_names(self.names)

    def sample_theta(self, n: int, rng) -> np.ndarray:
        """n parameter vectors (n, p) drawn from N(θ̂, Cov) over the free entries; decay kept ≥ 0."""
        gen = np.random.default_rng(rng)
        out = np.tile(self.theta, (n, 1))
        cov = 0.5 * (self.covariance + self.covariance.T)
        w, v = np.linalg.eigh(cov)
        z = gen.standard_normal((n, w.size)) * np.sqrt(np.clip(w, 0.0, None))
        out[:, self.free] += z @ v.T
        shared = self.layout.shared
        out[:, shared] = np.abs(out[:, shared])  # drag and decay parameters are ≥ 0 (reflect at 0)
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
    #: the BB's mass and diameter tolerance when it is in the error bars (:func:`fitting.bbshare.apply_bb_tolerance`)
    bb_tolerance: BBTolerance | None = None

    @property
    def layout(self) -> ParamLayout:
        """Where each parameter lives in ``parameter_values``."""
        return ParamLayout.from_names(self.parameter_names)

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
