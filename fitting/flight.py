"""The flight model: 3-D equations of motion of a spinning BB and a fast, vectorised integrator.

Coordinates (world frame, metres): x downrange, y up, z = x × y (toward the camera for a camera looking
at the flight plane from the front). Gravity acts along −y unless the model says otherwise. Backspin for a
BB flying +x is a positive spin about +z, which lifts it (+y).

Forces on a BB of mass m, area A, diameter d in air of density ρ, viscosity μ, wind **w**:

- air-relative velocity **u** = **v** − **w**, u = |**u**|, Re = ρ u d / μ, S = (d/2) ω / u;
- drag **F_D** = −½ ρ A C_D(Re, S) u **u**;
- Magnus lift **F_L** = ½ ρ A C_L(S) u² (**n** × **û**) = ½ ρ A C_L u (**n** × **u**);
- gravity m **g**;
- spin dω/dt from the decay law; the spin axis **n** stays fixed (no precession).

The integrator is the classical fourth-order Runge-Kutta method on a uniform step, run on all shots at
once (arrays of shape (n_shots, 7)), with cubic Hermite interpolation between steps for output at any
time. Its accuracy is checked against scipy's DOP853 in the tests.

References
----------
Magnus lift direction and the quadratic drag law: e.g. Nathan (2008), "The effect of spin on the flight
of a baseball", Am. J. Phys. 76:119, eqs. 1-3.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from .air import Air
from .bb import BB
from .constants import STANDARD_GRAVITY_MPS2
from .laws import ConstantDrag, DecayLaw, DragLaw, ExponentialDecay, LiftLaw, LinearLift

#: Default integration step, s. Accuracy ≤ 1 mm over 100 m (see tests/fitting/test_flight.py).
DEFAULT_STEP_S = 1e-3

STATE_SIZE = 7  # x, y, z, vx, vy, vz, omega


@dataclass(frozen=True)
class FlightModel:
    """Everything but the launch state: BB, air, laws, gravity and wind (all SI).

    ``wind_mps`` is the air velocity in the world frame, m/s (x downrange, y up, z toward the camera).
    """

    bb: BB
    air: Air
    drag: DragLaw = field(default_factory=lambda: ConstantDrag(0.45))
    lift: LiftLaw = field(default_factory=lambda: LinearLift(1.0))
    decay: DecayLaw = field(default_factory=ExponentialDecay)
    gravity_mps2: float = STANDARD_GRAVITY_MPS2
    wind_mps: tuple[float, float, float] = (0.0, 0.0, 0.0)

    def __post_init__(self) -> None:
        if not (math.isfinite(self.gravity_mps2) and 0 <= self.gravity_mps2 < 30):
            raise ValueError(f"gravity_mps2 must lie in 0..30 m/s², got {self.gravity_mps2!r}")
        if len(self.wind_mps) != 3 or not all(math.isfinite(w) for w in self.wind_mps):
            raise ValueError(f"wind_mps must be three finite numbers, got {self.wind_mps!r}")


@dataclass(frozen=True)
class LaunchState:
    """Initial state of n shots (SI): positions (n,3) m, velocities (n,3) m/s, spins (n,) rad/s, axes (n,3).

    Build it with :meth:`from_speed` rather than by hand.
    """

    position_m: np.ndarray
    velocity_mps: np.ndarray
    spin_radps: np.ndarray
    spin_axis: np.ndarray

    def __post_init__(self) -> None:
        n = self.position_m.shape[0]
        for name, arr, shape in (
            ("position_m", self.position_m, (n, 3)),
            ("velocity_mps", self.velocity_mps, (n, 3)),
            ("spin_radps", self.spin_radps, (n,)),
            ("spin_axis", self.spin_axis, (n, 3)),
        ):
            if arr.shape != shape:
                raise ValueError(f"{name} must have shape {shape}, got {arr.shape}")
            if not np.all(np.isfinite(arr)):
                raise ValueError(f"{name} must be finite")
        norms = np.linalg.norm(self.spin_axis, axis=1)
        if np.any(np.abs(norms - 1.0) > 1e-9):
            raise ValueError("spin_axis rows must be unit vectors")

    @property
    def n_shots(self) -> int:
        return int(self.position_m.shape[0])

    @classmethod
    def from_speed(
        cls,
        speed_mps,
        elevation_rad,
        *,
        azimuth_rad=0.0,
        spin_radps=0.0,
        spin_axis=(0.0, 0.0, 1.0),
        position_m=(0.0, 0.0, 0.0),
    ) -> LaunchState:
        """Launch states from speed (m/s), elevation above horizontal (rad) and azimuth (rad, toward +z).

        Every argument broadcasts to n shots. The spin axis is normalised.
        """
        speed, el, az, spin = np.broadcast_arrays(
            *(np.atleast_1d(np.asarray(a, dtype=float)) for a in (speed_mps, elevation_rad, azimuth_rad, spin_radps))
        )
        n = speed.shape[0]
        vel = np.stack(
            [speed * np.cos(el) * np.cos(az), speed * np.sin(el), speed * np.cos(el) * np.sin(az)], axis=1
        )
        axis = np.broadcast_to(np.asarray(spin_axis, dtype=float), (n, 3)).copy()
        axis /= np.linalg.norm(axis, axis=1, keepdims=True)
        pos = np.broadcast_to(np.asarray(position_m, dtype=float), (n, 3)).copy()
        return cls(pos, vel, spin.astype(float).copy(), axis)


def derivatives(model: FlightModel, state: np.ndarray, spin_axis: np.ndarray) -> np.ndarray:
    """Time derivative of the state (n, 7) = (x, y, z, vx, vy, vz, ω), SI units.

    Notes
    -----
    World frame: x downrange, y up, z = x × y.
    """
    bb, air = model.bb, model.air
    vel = state[:, 3:6]
    omega = state[:, 6]
    wind = np.asarray(model.wind_mps, dtype=float)
    u_vec = vel - wind
    u = np.sqrt(np.einsum("ij,ij->i", u_vec, u_vec))
    u_safe = np.maximum(u, 1e-9)
    re = air.density_kgm3 * u_safe * bb.diameter_m / air.viscosity_pas
    s = bb.radius_m * omega / u_safe
    cd = model.drag.coefficient(re, s)
    cl = model.lift.coefficient(s)
    q = 0.5 * air.density_kgm3 * bb.area_m2 / bb.mass_kg  # 1/m
    n_cross_u = np.cross(spin_axis, u_vec)
    acc = (q * u)[:, None] * (-cd[:, None] * u_vec + cl[:, None] * n_cross_u)
    acc[:, 1] -= model.gravity_mps2
    domega = model.decay.rate(
        omega,
        u_safe,
        density_kgm3=air.density_kgm3,
        area_m2=bb.area_m2,
        radius_m=bb.radius_m,
        inertia_kgm2=bb.inertia_kgm2,
    )
    out = np.empty_like(state)
    out[:, 0:3] = vel
    out[:, 3:6] = acc
    out[:, 6] = np.broadcast_to(domega, omega.shape)
    return out


@dataclass(frozen=True)
class Trajectory:
    """Integrated flight of n shots on a uniform time grid, with interpolation between nodes.

    Attributes
    ----------
    t_s : (m,) times since launch, s.
    state : (n, m, 7) states (x, y, z m; vx, vy, vz m/s; ω rad/s).
    rate : (n, m, 7) time derivatives of the states.
    """

    t_s: np.ndarray
    state: np.ndarray
    rate: np.ndarray

    @property
    def position_m(self) -> np.ndarray:
        return self.state[:, :, 0:3]

    @property
    def velocity_mps(self) -> np.ndarray:
        return self.state[:, :, 3:6]

    @property
    def spin_radps(self) -> np.ndarray:
        return self.state[:, :, 6]

    @property
    def speed_mps(self) -> np.ndarray:
        return np.linalg.norm(self.velocity_mps, axis=2)

    def sample(self, t_s) -> np.ndarray:
        """States at times ``t_s`` since launch, by cubic Hermite interpolation, shape (n, k, 7).

        ``t_s`` is (k,) (the same times for every shot) or (n, k) (times per shot). Times must lie inside
        the integrated span.
        """
        t = np.asarray(t_s, dtype=float)
        n = self.state.shape[0]
        if t.ndim == 1:
            t = np.broadcast_to(t, (n, t.shape[0]))
        if t.shape[0] != n:
            raise ValueError(f"t_s must be (k,) or ({n}, k), got {t.shape}")
        grid = self.t_s
        if t.size and (np.min(t) < grid[0] - 1e-12 or np.max(t) > grid[-1] + 1e-12):
            raise ValueError(
                f"requested times {np.min(t):.6g}..{np.max(t):.6g} s lie outside the integrated span "
                f"{grid[0]:.6g}..{grid[-1]:.6g} s"
            )
        h = grid[1] - grid[0]
        idx = np.clip(((t - grid[0]) / h).astype(int), 0, grid.size - 2)
        tau = ((t - grid[idx]) / h)[..., None]
        rows = np.arange(n)[:, None]
        y0 = self.state[rows, idx]
        y1 = self.state[rows, idx + 1]
        f0 = self.rate[rows, idx] * h
        f1 = self.rate[rows, idx + 1] * h
        tau2 = tau * tau
        tau3 = tau2 * tau
        h00 = 2 * tau3 - 3 * tau2 + 1
        h10 = tau3 - 2 * tau2 + tau
        h01 = -2 * tau3 + 3 * tau2
        h11 = tau3 - tau2
        return h00 * y0 + h10 * f0 + h01 * y1 + h11 * f1

    def time_at_downrange(self, x_m: float) -> np.ndarray:
        """First time (s since launch) each shot reaches downrange distance ``x_m``; NaN if it never does."""
        x = self.state[:, :, 0]
        out = np.full(x.shape[0], np.nan)
        for i in range(x.shape[0]):
            above = np.nonzero(x[i] >= x_m)[0]
            if above.size == 0 or above[0] == 0:
                if above.size and above[0] == 0:
                    out[i] = self.t_s[0]
                continue
            j = above[0]
            out[i] = _refine_crossing(self, i, j, 0, x_m)
        return out


def _refine_crossing(traj: Trajectory, shot: int, j: int, component: int, level: float) -> float:
    """Bisection on the Hermite interpolant between nodes j-1 and j for state[component] == level."""
    lo, hi = traj.t_s[j - 1], traj.t_s[j]
    sub = Trajectory(traj.t_s, traj.state[shot : shot + 1], traj.rate[shot : shot + 1])
    f_lo = sub.sample(np.array([lo]))[0, 0, component] - level
    for _ in range(60):
        mid = 0.5 * (lo + hi)
        f_mid = sub.sample(np.array([mid]))[0, 0, component] - level
        if (f_mid >= 0) == (f_lo >= 0):
            lo, f_lo = mid, f_mid
        else:
            hi = mid
        if hi - lo < 1e-12:
            break
    return 0.5 * (lo + hi)


def fly(
    model: FlightModel,
    launch: LaunchState,
    duration_s: float,
    *,
    step_s: float | None = None,
) -> Trajectory:
    """Integrate n shots from their launch states over ``duration_s`` seconds (RK4, uniform step).

    Parameters
    ----------
    model : the flight model (BB, air, laws).
    launch : launch states of n shots.
    duration_s : length of flight to integrate, s (> 0).
    step_s : RK4 step, s. Default: 1 ms, or less so that a short span gets at least 24 steps.

    Returns
    -------
    Trajectory on the grid 0, h, 2h, ... ≥ duration_s.
    """
    if not (math.isfinite(duration_s) and duration_s > 0):
        raise ValueError(f"duration_s must be positive and finite, got {duration_s!r}")
    if step_s is None:
        step_s = min(DEFAULT_STEP_S, duration_s / 24.0)
    if not (math.isfinite(step_s) and step_s > 0):
        raise ValueError(f"step_s must be positive and finite, got {step_s!r}")
    n_steps = max(1, int(math.ceil(duration_s / step_s - 1e-9)))
    h = duration_s / n_steps
    axis = launch.spin_axis
    y = np.concatenate([launch.position_m, launch.velocity_mps, launch.spin_radps[:, None]], axis=1)
    n = y.shape[0]
    states = np.empty((n, n_steps + 1, STATE_SIZE))
    rates = np.empty((n, n_steps + 1, STATE_SIZE))
    k1 = derivatives(model, y, axis)
    for i in range(n_steps):
        states[:, i] = y
        rates[:, i] = k1
        k2 = derivatives(model, y + 0.5 * h * k1, axis)
        k3 = derivatives(model, y + 0.5 * h * k2, axis)
        k4 = derivatives(model, y + h * k3, axis)
        y = y + (h / 6.0) * (k1 + 2.0 * k2 + 2.0 * k3 + k4)
        k1 = derivatives(model, y, axis)
    states[:, n_steps] = y
    rates[:, n_steps] = k1
    return Trajectory(np.arange(n_steps + 1) * h, states, rates)
