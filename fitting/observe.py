"""Observation model: tracked points of a shot, and the model path they are compared with.

A shot's data (:class:`ShotData`) are times and positions on the flight plane with per-point uncertainty
and, optionally, the same points mapped under K perturbed calibrations (their offsets from the nominal
mapping carry the calibration's systematic uncertainty into the fit).

The model path (:func:`model_positions`) integrates the flight ODE of :mod:`fitting.flight` from the first
tracked point of each shot: the state there (position, speed, elevation, lift coefficient) is what the
fit estimates, so the barrel and the bucking enter only through it. Several shots (or several perturbed
copies of one shot, for a finite-difference Jacobian) are integrated in one vectorised call, each row with
its own law parameters.

Notes
-----
World frame: x downrange, y up, metres, flight plane z = 0; times in seconds as the tracker wrote them
(container timestamps plus rolling-shutter row offset, mid-exposure when known).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from hopscope.shared.constants import STANDARD_GRAVITY_MPS2

from .air import Air
from .bb import BB
from .flight import FlightModel, LaunchState, fly
from .laws import (
    DECAY_LAWS,
    DRAG_LAWS,
    LIFT_LAWS,
    SPHERE_CORRELATIONS,
    AerodynamicDecay,
    ConstantDrag,
    DecayLaw,
    DragLaw,
    ExponentialDecay,
    LiftLaw,
    LinearLift,
    SaturatingLift,
    SphereDrag,
)

#: Fewest tracked points a shot may have: five own parameters need at least 2·4 = 8 coordinates.
MIN_POINTS = 4

#: Longest integration step used when fitting, s. The RK4 + Hermite path error at 4 ms is ~1e-8 m over
#: 0.5 s of flight for a 0.25 g BB at 100 m/s (checked in tests/fitting/test_observe.py against a 0.1 ms
#: reference integration), far below any tracking σ.
MAX_FIT_STEP_S = 4e-3

#: Fewest integration steps over a shot's span (keeps short close-up spans accurate).
MIN_FIT_STEPS = 32


@dataclass(frozen=True, eq=False)
class ShotData:
    """Tracked points of one shot, in the world frame (SI).

    Attributes
    ----------
    t_s : (N,) times, s, strictly increasing.
    x_m, y_m : (N,) positions on the flight plane, m (x downrange, y up).
    sigma_m : (N,) per-point position standard uncertainty, m (isotropic, per axis), > 0.
    cal_offsets_m : (K, N, 2) or None. The points mapped under K perturbed calibrations minus the nominal
        mapping, m: systematic, correlated across points (and across shots of the same rig).
    label : name of the shot in messages and output (e.g. ``"track.csv#0"``).
    rig_digest : digest of the rig the points were mapped with, or None. Shots with the same digest share
        the k-th calibration perturbation (their calibration errors are correlated); shots without one are
        treated as independently calibrated.

    Notes
    -----
    World frame: x downrange, y up, metres.
    """

    t_s: np.ndarray
    x_m: np.ndarray
    y_m: np.ndarray
    sigma_m: np.ndarray
    cal_offsets_m: np.ndarray | None = None
    label: str = "shot"
    rig_digest: str | None = None

    def __post_init__(self) -> None:
        where = f"shot {self.label!r}"
        arrays = {}
        for name in ("t_s", "x_m", "y_m", "sigma_m"):
            a = np.asarray(getattr(self, name), dtype=float)
            if a.ndim != 1:
                raise ValueError(f"{where}: {name} must be a 1-D array, got shape {a.shape}")
            arrays[name] = a
        n = arrays["t_s"].size
        for name, a in arrays.items():
            if a.size != n:
                raise ValueError(f"{where}: {name} has {a.size} values, t_s has {n}")
            if not np.all(np.isfinite(a)):
                raise ValueError(f"{where}: {name} has a non-finite value")
        if n < MIN_POINTS:
            raise ValueError(f"{where}: t_s has {n} points, need at least {MIN_POINTS}")
        if np.any(np.diff(arrays["t_s"]) <= 0):
            raise ValueError(f"{where}: t_s is not strictly increasing")
        if np.any(arrays["sigma_m"] <= 0):
            raise ValueError(f"{where}: sigma_m must be > 0")
        for name, a in arrays.items():
            a = a.copy()
            a.setflags(write=False)
            object.__setattr__(self, name, a)
        if self.cal_offsets_m is not None:
            c = np.array(self.cal_offsets_m, dtype=float)
            if c.ndim != 3 or c.shape[1:] != (n, 2):
                raise ValueError(f"{where}: cal_offsets_m must have shape (K, {n}, 2), got {c.shape}")
            if not np.all(np.isfinite(c)):
                raise ValueError(f"{where}: cal_offsets_m has a non-finite value")
            c.setflags(write=False)
            object.__setattr__(self, "cal_offsets_m", None if c.shape[0] == 0 else c)

    @property
    def n_points(self) -> int:
        return int(self.t_s.size)

    @property
    def n_calibrations(self) -> int:
        """K, the number of perturbed calibrations (0 without offsets)."""
        return 0 if self.cal_offsets_m is None else int(self.cal_offsets_m.shape[0])

    @property
    def duration_s(self) -> float:
        return float(self.t_s[-1] - self.t_s[0])


@dataclass(frozen=True)
class ModelSpec:
    """The fixed part of the observation model: BB, air, gravity, wind and the named laws.

    Attributes
    ----------
    bb, air : the BB and the air (SI).
    drag : ``"constant"`` (fitted C_D) or ``"sphere"`` (fitted scale × a smooth-sphere C_D(Re)).
    lift : ``"linear"`` (C_L = k·S with the nominal ``lift_k``) or ``"saturating"`` (C_L = c·S/(s½ + |S|)
        with the law's published shape constants).
    decay : ``"exponential"`` (fitted rate 1/τ, 1/s) or ``"aerodynamic"`` (fitted torque slope c).
    lift_k : nominal k of the linear law (only k·ω₀ is identifiable; k = 1 by convention).
    sphere_correlation : one of :data:`fitting.laws.SPHERE_CORRELATIONS`.
    gravity_mps2 : m/s², along −y.
    wind_mps : air velocity in the world frame, m/s.
    """

    bb: BB
    air: Air
    drag: str = "constant"
    lift: str = "linear"
    decay: str = "exponential"
    lift_k: float = 1.0
    sphere_correlation: str = "clift-grace-weber"
    gravity_mps2: float = STANDARD_GRAVITY_MPS2
    wind_mps: tuple[float, float, float] = field(default=(0.0, 0.0, 0.0))

    def __post_init__(self) -> None:
        if self.drag not in DRAG_LAWS:
            raise ValueError(f"drag law: unknown {self.drag!r}, choose one of {', '.join(DRAG_LAWS)}")
        if self.lift not in LIFT_LAWS:
            raise ValueError(f"lift law: unknown {self.lift!r}, choose one of {', '.join(LIFT_LAWS)}")
        if self.decay not in DECAY_LAWS:
            raise ValueError(f"decay law: unknown {self.decay!r}, choose one of {', '.join(DECAY_LAWS)}")
        if not (math.isfinite(self.lift_k) and self.lift_k > 0):
            raise ValueError(f"lift_k must be positive, got {self.lift_k!r}")
        if self.sphere_correlation not in SPHERE_CORRELATIONS:
            raise ValueError(f"sphere_correlation: unknown {self.sphere_correlation!r}")

    @property
    def q_per_m(self) -> float:
        """q = ½ ρ A / m of this BB in this air, 1/m (see :meth:`fitting.bb.BB.q_per_m`)."""
        return self.bb.q_per_m(self.air.density_kgm3)

    @property
    def cl_limit(self) -> float:
        """Largest |C_L| the lift law can produce (inf for the linear law)."""
        return float(SaturatingLift().cl_max) if self.lift == "saturating" else math.inf


@dataclass(frozen=True)
class RowParams:
    """Per-row launch and law parameters (arrays of shape (n,)), SI.

    x0_m, y0_m : position at the row's first time, m. speed_mps : speed, m/s. elevation_rad : rad above
    horizontal. lift_coefficient : C_L at the first time. drag_param : C_D (constant law) or scale (sphere
    law). decay_param : 1/τ in 1/s (exponential law) or torque slope c (aerodynamic law).
    """

    x0_m: np.ndarray
    y0_m: np.ndarray
    speed_mps: np.ndarray
    elevation_rad: np.ndarray
    lift_coefficient: np.ndarray
    drag_param: np.ndarray
    decay_param: np.ndarray


def initial_spin_radps(spec: ModelSpec, lift_coefficient, air_speed_mps) -> np.ndarray:
    """Spin ω₀ (rad/s) that gives lift coefficient C_L0 at air speed u₀ (m/s) under the spec's lift law.

    Linear law: ω₀ = C_L0·u₀/(k·r). Saturating law C_L = c·S/(s½ + |S|): S₀ = s½·C_L0/(c − |C_L0|).
    Under the linear law only k·ω₀ is identifiable, so ω₀ is model-based (it scales as 1/k).
    """
    cl = np.asarray(lift_coefficient, dtype=float)
    u = np.asarray(air_speed_mps, dtype=float)
    r = spec.bb.radius_m
    if spec.lift == "linear":
        return cl * u / (spec.lift_k * r)
    law = SaturatingLift()
    s = law.s_half * cl / (law.cl_max - np.abs(cl))
    return s * u / r


def drag_coefficient_at(spec: ModelSpec, drag_param, speed_mps) -> np.ndarray:
    """C_D at air speed u (m/s) for the spec's drag law and its fitted parameter (no spin-drag term)."""
    p = np.asarray(drag_param, dtype=float)
    if spec.drag == "constant":
        return p * np.ones_like(np.asarray(speed_mps, dtype=float))
    re = (
        spec.air.density_kgm3
        * np.asarray(speed_mps, dtype=float)
        * spec.bb.diameter_m
        / spec.air.viscosity_pas
    )
    return p * SPHERE_CORRELATIONS[spec.sphere_correlation](re)


def decay_time_from_rate(rate_per_s) -> np.ndarray:
    """τ = 1/rate (s) with rate 0 → inf (no decay), without division warnings."""
    rate = np.atleast_1d(np.asarray(rate_per_s, dtype=float))
    tau = np.full(rate.shape, math.inf)
    nz = rate != 0
    tau[nz] = 1.0 / rate[nz]
    return tau


def flight_for(spec: ModelSpec, rows: RowParams) -> tuple[FlightModel, LaunchState]:
    """The flight model and launch states of n rows (each row its own law parameters)."""
    drag: DragLaw
    lift: LiftLaw
    decay: DecayLaw
    if spec.drag == "constant":
        drag = ConstantDrag(np.asarray(rows.drag_param, dtype=float))
    else:
        drag = SphereDrag(np.asarray(rows.drag_param, dtype=float), spec.sphere_correlation)
    if spec.lift == "linear":
        lift = LinearLift(spec.lift_k)
    else:
        lift = SaturatingLift()
    if spec.decay == "exponential":
        decay = ExponentialDecay(decay_time_from_rate(rows.decay_param))
    else:
        decay = AerodynamicDecay(np.asarray(rows.decay_param, dtype=float))
    model = FlightModel(spec.bb, spec.air, drag, lift, decay, spec.gravity_mps2, spec.wind_mps)
    speed = np.asarray(rows.speed_mps, dtype=float)
    el = np.asarray(rows.elevation_rad, dtype=float)
    vel = np.stack([speed * np.cos(el), speed * np.sin(el), np.zeros_like(speed)], axis=1)
    air_speed = np.linalg.norm(vel - np.asarray(spec.wind_mps, dtype=float), axis=1)
    spin = initial_spin_radps(spec, rows.lift_coefficient, air_speed)
    pos = np.stack([rows.x0_m, rows.y0_m, np.zeros_like(speed)], axis=1).astype(float)
    launch = LaunchState.from_speed(speed, el, spin_radps=spin, position_m=pos)
    return model, launch


def fit_step_s(duration_s: float) -> float:
    """Integration step used when fitting a span of ``duration_s`` seconds."""
    return min(MAX_FIT_STEP_S, duration_s / MIN_FIT_STEPS)


def model_positions(spec: ModelSpec, rows: RowParams, t_rel_s: np.ndarray) -> np.ndarray:
    """Model positions (x, y) of n rows at times since each row's start, shape (n, k, 2), m.

    Parameters
    ----------
    spec : the fixed model.
    rows : per-row parameters, arrays of shape (n,).
    t_rel_s : (n, k) times since the row's first tracked point, s (≥ 0; pad short rows with any time
        inside the span).

    Notes
    -----
    World frame: x downrange, y up, metres.
    """
    t = np.asarray(t_rel_s, dtype=float)
    duration = float(np.max(t))
    if not duration > 0:
        raise ValueError("model_positions: the time span must be positive")
    model, launch = flight_for(spec, rows)
    traj = fly(model, launch, duration, step_s=fit_step_s(duration))
    return traj.sample(t)[:, :, 0:2]


@dataclass(frozen=True, eq=False)
class StackedShots:
    """Shots padded to a common length for vectorised evaluation (built once per fit).

    t_rel_s, x_m, y_m, sigma_m : (n, k) arrays (padded entries repeat the last point); mask : (n, k) bool,
    true for real points; t0_s : (n,) first time of each shot, s.
    """

    t_rel_s: np.ndarray
    x_m: np.ndarray
    y_m: np.ndarray
    sigma_m: np.ndarray
    mask: np.ndarray
    t0_s: np.ndarray

    @classmethod
    def from_shots(cls, shots) -> StackedShots:
        n = len(shots)
        k = max(s.n_points for s in shots)
        arrs = {name: np.empty((n, k)) for name in ("t_rel_s", "x_m", "y_m", "sigma_m")}
        mask = np.zeros((n, k), dtype=bool)
        for i, s in enumerate(shots):
            m = s.n_points
            mask[i, :m] = True
            for name, src in (
                ("t_rel_s", s.t_s - s.t_s[0]),
                ("x_m", s.x_m),
                ("y_m", s.y_m),
                ("sigma_m", s.sigma_m),
            ):
                arrs[name][i, :m] = src
                arrs[name][i, m:] = src[-1]
        t0 = np.array([s.t_s[0] for s in shots])
        return cls(arrs["t_rel_s"], arrs["x_m"], arrs["y_m"], arrs["sigma_m"], mask, t0)

    def residuals(self, positions: np.ndarray, rows: np.ndarray | None = None) -> np.ndarray:
        """Normalised residuals (model − data)/σ of the given rows' positions (r, k, 2) → (r, k, 2).

        ``rows`` maps each position row to its shot (default: row i is shot i).
        """
        idx = np.arange(self.x_m.shape[0]) if rows is None else rows
        out = np.empty_like(positions)
        out[:, :, 0] = (positions[:, :, 0] - self.x_m[idx]) / self.sigma_m[idx]
        out[:, :, 1] = (positions[:, :, 1] - self.y_m[idx]) / self.sigma_m[idx]
        return out


def simulate_shot(
    spec: ModelSpec,
    *,
    t_s: np.ndarray,
    speed_mps: float,
    elevation_rad: float,
    lift_coefficient: float,
    drag_param: float,
    decay_param: float,
    x0_m: float = 0.0,
    y0_m: float = 0.0,
    sigma_m: float | np.ndarray = 5e-4,
    rng: int | np.random.Generator | None = None,
    label: str = "simulated",
    step_s: float | None = None,
) -> ShotData:
    """A track simulated from the model: exact path at ``t_s`` plus Gaussian noise of σ ``sigma_m``.

    The path starts at ``(x0_m, y0_m)`` at ``t_s[0]`` with the given state and law parameters (as in
    :class:`RowParams`). ``rng`` None means no noise (the exact model path). ``step_s`` sets the
    integration step (default: the fit step for the span).

    Notes
    -----
    World frame: x downrange, y up, metres.
    """
    t = np.asarray(t_s, dtype=float)
    rows = RowParams(
        *(
            np.array([v], dtype=float)
            for v in (x0_m, y0_m, speed_mps, elevation_rad, lift_coefficient, drag_param, decay_param)
        )
    )
    model, launch = flight_for(spec, rows)
    span = float(t[-1] - t[0])
    traj = fly(model, launch, span, step_s=step_s if step_s is not None else fit_step_s(span))
    xy = traj.sample(t - t[0])[0, :, 0:2]
    sigma = np.broadcast_to(np.asarray(sigma_m, dtype=float), t.shape).copy()
    if rng is not None:
        gen = np.random.default_rng(rng)
        xy = xy + gen.normal(size=xy.shape) * sigma[:, None]
    return ShotData(t, xy[:, 0], xy[:, 1], sigma, None, label)
