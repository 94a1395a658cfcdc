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
once (structure of arrays: each state component is a row of n numbers), with cubic Hermite interpolation
between steps for output at any time. Air, wind and gravity are uniform, so the forces depend on velocity
and spin only; RK4 then advances positions exactly as x + h v + h²/6 (a₁ + a₂ + a₃), which is the RK4
position update written out. Accuracy is checked against scipy's DOP853, the vacuum parabola and the
closed form of quadratic drag in tests/fitting/test_flight.py; speed in tests/bench/bench_integrator.py.

References
----------
Magnus lift direction and the quadratic drag law: e.g. Nathan (2008), "The effect of spin on the flight
of a baseball", Am. J. Phys. 76:119, eqs. 1-3.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from hopscope.shared.constants import STANDARD_GRAVITY_MPS2

from .air import Air
from .bb import BB
from .laws import (
    SPHERE_CORRELATIONS_UNCHECKED,
    AerodynamicDecay,
    ConstantDrag,
    DecayLaw,
    DragLaw,
    ExponentialDecay,
    LiftLaw,
    LinearLift,
    SphereDrag,
)

#: Default integration step, s (the fitter's longest step, ``fitting.observe.MAX_FIT_STEP_S``, is the same).
#: Measured against scipy's DOP853 (rtol = atol = 1e-12) on random shots (30-150 m/s, spin, wind, tilted
#: axis, every law) over 100 m of flight: position errors ≤ 1.3e-7 m, and ≤ 1.2e-5 m with the sphere drag
#: law (its piecewise correlation jumps slightly at piece boundaries), far inside the 1 mm requirement
#: (tests/fitting/test_flight.py). Speed: tests/bench/bench_integrator.py.
DEFAULT_STEP_S = 4e-3

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
            *(
                np.atleast_1d(np.asarray(a, dtype=float))
                for a in (speed_mps, elevation_rad, azimuth_rad, spin_radps)
            )
        )
        n = speed.shape[0]
        vel = np.stack(
            [speed * np.cos(el) * np.cos(az), speed * np.sin(el), speed * np.cos(el) * np.sin(az)], axis=1
        )
        axis = np.broadcast_to(np.asarray(spin_axis, dtype=float), (n, 3)).copy()
        axis /= np.linalg.norm(axis, axis=1, keepdims=True)
        pos = np.broadcast_to(np.asarray(position_m, dtype=float), (n, 3)).copy()
        return cls(pos, vel, spin.astype(float).copy(), axis)


class _Kernel:
    """The right-hand side of the equations of motion on a structure-of-arrays state.

    The forces depend on velocity and spin only (uniform air, wind and gravity), so the kernel maps the
    dynamic part ``d`` = (vx, vy, vz, ω) of shape (4, n) to (ax, ay, az, dω/dt) (4, n); positions follow
    from velocities in :func:`fly`. Everything that does not change during a flight (air, BB, wind, spin
    axis) is folded into constants once, and results go into preallocated buffers, so one evaluation
    costs a few dozen numpy passes over n numbers. :func:`derivatives` is the same computation on the
    public (n, 7) layout.
    """

    def __init__(self, model: FlightModel, spin_axis: np.ndarray) -> None:
        bb, air = model.bb, model.air
        self.model = model
        self.re_per_speed = air.density_kgm3 * bb.diameter_m / air.viscosity_pas  # s/m
        self.radius = bb.radius_m
        self.q = bb.q_per_m(air.density_kgm3)  # 1/m
        self.decay_kwargs = {
            "density_kgm3": air.density_kgm3,
            "area_m2": bb.area_m2,
            "radius_m": bb.radius_m,
            "inertia_kgm2": bb.inertia_kgm2,
        }
        self.gravity = float(model.gravity_mps2)
        self.wind = tuple(float(w) for w in model.wind_mps)
        # Fast paths for the default laws (same formulas as the law objects, fewer numpy passes):
        # constant C_D without spin drag, and exponential decay dω/dt = ω·(−1/τ).
        drag = model.drag
        # constant C_D without spin drag; sphere C_D(Re) without the input checks (Re > 0 here by
        # construction); exponential decay dω/dt = ω·(−1/τ); aerodynamic decay dω/dt = −(cρAr²/2I)·u·ω.
        drag = model.drag
        self.constant_cd: np.ndarray | None = None
        self.sphere = None
        if isinstance(drag, ConstantDrag) and np.ndim(drag.spin_drag) == 0 and drag.spin_drag == 0:
            self.constant_cd = np.asarray(drag.cd, dtype=float)
        elif isinstance(drag, SphereDrag):
            spin_drag = None if np.ndim(drag.spin_drag) == 0 and drag.spin_drag == 0 else drag.spin_drag
            self.sphere = (SPHERE_CORRELATIONS_UNCHECKED[drag.correlation], drag.scale, spin_drag)
        decay = model.decay
        self.neg_inv_tau: np.ndarray | None = None
        self.neg_aero_k: np.ndarray | None = None
        if isinstance(decay, ExponentialDecay):
            tau = np.asarray(decay.tau_s, dtype=float)
            self.neg_inv_tau = np.where(np.isinf(tau), 0.0, -1.0 / np.where(np.isinf(tau), 1.0, tau))
        elif isinstance(decay, AerodynamicDecay):
            self.neg_aero_k = -np.asarray(decay.torque_slope, dtype=float) * (
                air.density_kgm3 * bb.area_m2 * bb.radius_m**2 / (2.0 * bb.inertia_kgm2)
            )
        axis = np.asarray(spin_axis, dtype=float)
        self.wind_col = np.array(self.wind, dtype=float)[:, None] if any(self.wind) else None
        # One axis for every shot (the usual case): n × u is the matrix product [n]ₓ u.
        if axis.shape[0] > 0 and np.all(axis == axis[0]):
            nx, ny, nz = (float(a) for a in axis[0])
            self.skew: np.ndarray | None = np.array([[0.0, -nz, ny], [nz, 0.0, -nx], [-ny, nx, 0.0]])
            self.axis_rows = None
        else:
            self.skew = None
            self.axis_rows = np.ascontiguousarray(axis.T)  # (3, n)

    def rates(self, d: np.ndarray, out: np.ndarray) -> np.ndarray:
        """Write (ax, ay, az, dω/dt) for the dynamic state ``d`` = (vx, vy, vz, ω), both (4, n), into
        ``out`` and return it (m/s², rad/s²)."""
        u_vec = d[0:3] if self.wind_col is None else d[0:3] - self.wind_col  # air-relative velocity (3, n)
        omega = d[3]
        u = np.einsum("ij,ij->j", u_vec, u_vec)
        np.sqrt(u, out=u)
        u_safe = np.maximum(u, 1e-9)
        s = omega * self.radius
        s /= u_safe
        if self.constant_cd is not None:
            cd = self.constant_cd
        elif self.sphere is not None:
            correlation, scale, spin_drag = self.sphere
            cd = correlation(u_safe * self.re_per_speed)
            cd *= scale
            if spin_drag is not None:
                cd += spin_drag * (s * s)
        else:
            cd = self.model.drag.coefficient(u_safe * self.re_per_speed, s)
        cl = self.model.lift.coefficient(s)
        qu = u
        qu *= self.q  # q·u, 1/s
        # acceleration = q u (C_L n × u_vec − C_D u_vec) − g ŷ
        acc = out[0:3]
        if self.skew is not None:
            np.matmul(self.skew, u_vec, out=acc)
        else:
            n = self.axis_rows
            assert n is not None
            np.multiply(n[1], u_vec[2], out=acc[0])
            acc[0] -= n[2] * u_vec[1]
            np.multiply(n[2], u_vec[0], out=acc[1])
            acc[1] -= n[0] * u_vec[2]
            np.multiply(n[0], u_vec[1], out=acc[2])
            acc[2] -= n[1] * u_vec[0]
        acc *= qu * cl
        acc -= u_vec * (qu * cd)
        out[1] -= self.gravity
        if self.neg_inv_tau is not None:
            np.multiply(omega, self.neg_inv_tau, out=out[3])
        elif self.neg_aero_k is not None:
            np.multiply(omega, u_safe, out=out[3])
            out[3] *= self.neg_aero_k
        else:
            out[3] = self.model.decay.rate(omega, u_safe, **self.decay_kwargs)
        return out


def derivatives(model: FlightModel, state: np.ndarray, spin_axis: np.ndarray) -> np.ndarray:
    """Time derivative of the state (n, 7) = (x, y, z, vx, vy, vz, ω), SI units.

    Parameters
    ----------
    model : the flight model.
    state : (n, 7) positions m, velocities m/s, spin rad/s.
    spin_axis : (n, 3) unit spin axes.

    Returns
    -------
    (n, 7) array: velocities m/s, accelerations m/s², spin rate of change rad/s².

    Notes
    -----
    World frame: x downrange, y up, z = x × y. Air-relative velocity u = v − wind; drag
    −½ρA C_D u **u** / m, Magnus lift ½ρA C_L u (**n** × **u**) / m, gravity −g ŷ (module docstring).
    """
    state = np.asarray(state, dtype=float)
    if state.ndim != 2 or state.shape[1] != STATE_SIZE:
        raise ValueError(f"state must have shape (n, {STATE_SIZE}), got {state.shape}")
    axis = np.broadcast_to(np.asarray(spin_axis, dtype=float), (state.shape[0], 3))
    y = np.ascontiguousarray(state.T)
    out = np.empty_like(y)
    out[0:3] = y[3:6]
    _Kernel(model, axis).rates(y[3:7], out[3:7])
    return out.T.copy()


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

        ``t_s`` is (k,) (the same times for every shot) or (n, k) (times per shot), s. Times must lie
        inside the integrated span. The interpolant uses the stored states and rates at the two nodes
        around each time, so it is C¹ in time and its error is O(h⁴) in position.
        """
        t = np.asarray(t_s, dtype=float)
        n = self.state.shape[0]
        if t.ndim == 1:
            t = np.broadcast_to(t, (n, t.shape[0]))
        if t.shape[0] != n:
            raise ValueError(f"t_s must be (k,) or ({n}, k), got {t.shape}")
        if not np.all(np.isfinite(t)):
            raise ValueError("t_s must be finite")
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
        return _hermite(
            tau,
            self.state[rows, idx],
            self.rate[rows, idx] * h,
            self.state[rows, idx + 1],
            self.rate[rows, idx + 1] * h,
        )

    def time_at_downrange(self, x_m: float) -> np.ndarray:
        """First time (s since launch) each shot reaches downrange distance ``x_m``; NaN if it never does.

        A shot that starts at or beyond ``x_m`` gets the first grid time. Between nodes the crossing is
        found on the cubic Hermite interpolant (the same curve :meth:`sample` gives), to about 1e-12 s.

        Notes
        -----
        World frame: x downrange, y up, metres.
        """
        return self._first_crossing(0, float(x_m), rising=True)

    def time_at_height(self, y_m: float) -> np.ndarray:
        """First time (s since launch) each shot is at or below height ``y_m``; NaN if it never is.

        Used for the ground: a shot that starts at or below ``y_m`` gets the first grid time.

        Notes
        -----
        World frame: x downrange, y up, metres.
        """
        return self._first_crossing(1, float(y_m), rising=False)

    def _first_crossing(self, component: int, level: float, *, rising: bool) -> np.ndarray:
        if not math.isfinite(level):
            raise ValueError(f"crossing level must be finite, got {level!r}")
        values = self.state[:, :, component]
        sign = 1.0 if rising else -1.0
        reached = sign * (values - level) >= 0.0  # (n, m)
        any_reached = reached.any(axis=1)
        j = np.argmax(reached, axis=1)  # first node at/after the level (0 where never reached)
        out = np.full(values.shape[0], np.nan)
        out[any_reached & (j == 0)] = self.t_s[0]
        todo = np.nonzero(any_reached & (j > 0))[0]
        if todo.size == 0:
            return out
        jj = j[todo]
        lo = self.t_s[jj - 1].copy()
        hi = self.t_s[jj].copy()
        h = self.t_s[1] - self.t_s[0]
        y0 = self.state[todo, jj - 1, component]
        y1 = self.state[todo, jj, component]
        f0 = self.rate[todo, jj - 1, component] * h
        f1 = self.rate[todo, jj, component] * h
        t_left = self.t_s[jj - 1]
        # Bisection on g(t) = sign · (Hermite(t) − level), g(lo) < 0 ≤ g(hi); 2^-50 of a step is < 1e-12 s.
        for _ in range(50):
            mid = 0.5 * (lo + hi)
            tau = (mid - t_left) / h
            g = sign * (_hermite(tau, y0, f0, y1, f1) - level)
            upper = g >= 0.0
            hi = np.where(upper, mid, hi)
            lo = np.where(upper, lo, mid)
        out[todo] = 0.5 * (lo + hi)
        return out


def _hermite(tau, y0, f0, y1, f1):
    """Cubic Hermite interpolant on [0, 1] with end values y0, y1 and end slopes f0, f1 (per unit tau)."""
    tau2 = tau * tau
    tau3 = tau2 * tau
    return (
        (2 * tau3 - 3 * tau2 + 1) * y0
        + (tau3 - 2 * tau2 + tau) * f0
        + (-2 * tau3 + 3 * tau2) * y1
        + (tau3 - tau2) * f1
    )


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
    step_s : RK4 step, s. Default :data:`DEFAULT_STEP_S` (4 ms), or less so that a short span gets at least
        24 steps. The step is shrunk so that a whole number of steps spans ``duration_s`` exactly.

    Returns
    -------
    Trajectory on the grid 0, h, 2h, ..., duration_s (its arrays are views of one (m, 7, n) block, so
    ``state`` and ``rate`` are not C-contiguous).

    Notes
    -----
    Classical fourth-order Runge-Kutta (Kutta 1901; e.g. Hairer, Nørsett & Wanner, *Solving Ordinary
    Differential Equations I*, 2nd ed. 1993, Table II.1.2), all shots advanced together.
    """
    if not (math.isfinite(duration_s) and duration_s > 0):
        raise ValueError(f"duration_s must be positive and finite, got {duration_s!r}")
    if step_s is None:
        step_s = min(DEFAULT_STEP_S, duration_s / 24.0)
    if not (math.isfinite(step_s) and step_s > 0):
        raise ValueError(f"step_s must be positive and finite, got {step_s!r}")
    n_steps = max(1, int(math.ceil(duration_s / step_s - 1e-9)))
    h = duration_s / n_steps
    kernel = _Kernel(model, launch.spin_axis)
    n = launch.n_shots
    # Structure of arrays: node i holds states[i] (7, n); shot j's path is states[:, :, j].
    states = np.empty((n_steps + 1, STATE_SIZE, n))
    rates = np.empty((n_steps + 1, STATE_SIZE, n))
    y = states[0]
    y[0:3] = launch.position_m.T
    y[3:6] = launch.velocity_mps.T
    y[6] = launch.spin_radps
    rates[0, 0:3] = y[3:6]
    kernel.rates(y[3:7], rates[0, 3:7])
    k2 = np.empty((4, n))
    k3 = np.empty((4, n))
    k4 = np.empty((4, n))
    tmp = np.empty((4, n))
    half, sixth, h2_6 = 0.5 * h, h / 6.0, h * h / 6.0
    for i in range(n_steps):
        # RK4 on the dynamic part d = (v, ω); the forces do not depend on position, so the RK4 position
        # update x + h/6 (v1 + 2 v2 + 2 v3 + v4) reduces exactly to x + h v + h²/6 (a1 + a2 + a3).
        d, k1 = states[i, 3:7], rates[i, 3:7]
        np.multiply(k1, half, out=tmp)
        tmp += d
        kernel.rates(tmp, k2)
        np.multiply(k2, half, out=tmp)
        tmp += d
        kernel.rates(tmp, k3)
        np.multiply(k3, h, out=tmp)
        tmp += d
        kernel.rates(tmp, k4)
        nxt = states[i + 1]
        pos = nxt[0:3]
        np.add(k1[0:3], k2[0:3], out=pos)
        pos += k3[0:3]
        pos *= h2_6
        pos += states[i, 0:3]
        tmp[0:3] = d[0:3]
        tmp[0:3] *= h
        pos += tmp[0:3]
        # d_next = d + h/6 (k1 + 2 k2 + 2 k3 + k4)
        k2 += k3
        k2 *= 2.0
        k2 += k1
        k2 += k4
        d_next = nxt[3:7]
        np.multiply(k2, sixth, out=d_next)
        d_next += d
        rates[i + 1, 0:3] = nxt[3:6]
        kernel.rates(d_next, rates[i + 1, 3:7])
    return Trajectory(np.arange(n_steps + 1) * h, states.transpose(2, 0, 1), rates.transpose(2, 0, 1))
