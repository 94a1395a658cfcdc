"""Fly shots out to a range, to the ground or for a time: the one fly-to-range of the project.

:func:`fly_to` integrates n shots together (:func:`fitting.flight.fly`) long enough for the first (the
nominal) shot to reach whichever comes first of a downrange distance, the ground or a time, and samples
that shot's path on a regular clock ending exactly there. The other rows (e.g. parameter samples for a
band) come back as the whole :class:`fitting.flight.Trajectory`. :func:`fly_back` integrates backwards in
time from the launch states to an earlier downrange position (the muzzle).

Notes
-----
World frame: x downrange, y up, z = x × y, metres; times since the launch state, s.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .flight import FlightModel, LaunchState, Trajectory, derivatives, fly
from .observe import ModelSpec, RowParams, flight_for

DEFAULT_SAMPLE_S = 1e-3
#: Longest flight flown, s (a BB reaches the ground or its range long before).
MAX_FLIGHT_S = 30.0
#: The first flight time tried is this factor times the drag-only estimate, plus a margin; it is doubled
#: until the nominal shot gets there.
TIME_GUESS_FACTOR = 1.3
TIME_GUESS_MARGIN_S = 0.05
#: Floor on the drag factor k = q·C_D used by the estimate, 1/m (keeps it finite without drag).
MIN_DRAG_FACTOR_PER_M = 1e-5
#: Floor on the horizontal fraction of the speed used by the estimate (steep shots).
MIN_HORIZONTAL_FRACTION = 0.2
#: Samples closer than this to the end time are dropped so the end is not duplicated, s.
END_TIME_TOL_S = 1e-9
#: RK4 step of :func:`fly_back`, s.
BACK_STEP_S = 2.5e-4


@dataclass(frozen=True, eq=False)
class FlownPath:
    """The nominal (first) shot's path, sampled, and the whole integration (SI).

    Attributes
    ----------
    t_s : (m,) times since launch, s, ending exactly where the path stopped.
    state : (m, 7) states of the first row (x, y, z m; vx, vy, vz m/s; ω rad/s).
    reached : "range", "ground" or "time" (what ended the path).
    trajectory : every row, integrated at least to the end time.
    """

    t_s: np.ndarray
    state: np.ndarray
    reached: str
    trajectory: Trajectory

    @property
    def x_m(self) -> np.ndarray:
        return self.state[:, 0]

    @property
    def y_m(self) -> np.ndarray:
        return self.state[:, 1]

    @property
    def speed_mps(self) -> np.ndarray:
        return np.linalg.norm(self.state[:, 3:6], axis=1)


def time_to_range(model: FlightModel, launch: LaunchState, range_m: float) -> float:
    """Estimated time for the slowest row to cover ``range_m`` downrange (drag-only closed form), s.

    With k = q·C_D read off the launch deceleration (gravity's part removed), the distance s flown in time
    t at speed v₀ is ln(1 + k v₀ t)/k, so t = (e^{k s} − 1)/(k v₀).
    """
    state0 = np.concatenate([launch.position_m, launch.velocity_mps, launch.spin_radps[:, None]], axis=1)
    acc = derivatives(model, state0, launch.spin_axis)[:, 3:6]
    v = launch.velocity_mps
    speed = np.maximum(np.linalg.norm(v, axis=1), 1e-9)
    vhat = v / speed[:, None]
    decel = -np.sum(acc * vhat, axis=1) - model.gravity_mps2 * vhat[:, 1]
    k = np.maximum(decel / speed**2, MIN_DRAG_FACTOR_PER_M)
    horiz = np.maximum(np.abs(vhat[:, 0]), MIN_HORIZONTAL_FRACTION)
    dist = np.maximum(range_m - launch.position_m[:, 0], 0.0) / horiz
    with np.errstate(over="ignore"):
        t = np.expm1(np.minimum(k * dist, 50.0)) / (k * speed)
    return float(TIME_GUESS_FACTOR * np.max(t) + TIME_GUESS_MARGIN_S)


def fly_to(
    model: FlightModel,
    launch: LaunchState,
    *,
    range_m: float | None = None,
    ground_y_m: float | None = None,
    duration_s: float | None = None,
    sample_s: float = DEFAULT_SAMPLE_S,
    max_time_s: float = MAX_FLIGHT_S,
) -> FlownPath:
    """Fly ``launch`` (n rows) until the first row reaches ``range_m``, the ground or ``duration_s``.

    Parameters
    ----------
    model, launch : the flight model and the launch states (row 0 is the one whose path is sampled).
    range_m : stop at this downrange distance (world x), m; None: no range.
    ground_y_m : stop where the path comes down to this height (world y), m; None: no ground.
    duration_s : stop after this long, s; None: at most ``max_time_s``.
    sample_s : time between samples, s.
    max_time_s : longest flight, s; a path that gets nowhere by then ends with ``reached == "time"``.

    Returns
    -------
    FlownPath, ending exactly at the crossing (x = range_m or y = ground_y_m) or at the time.
    """
    for name, v in (("range_m", range_m), ("duration_s", duration_s)):
        if v is not None and not (math.isfinite(v) and v > 0):
            raise ValueError(f"{name} must be positive, got {v!r}")
    if ground_y_m is not None and not math.isfinite(ground_y_m):
        raise ValueError(f"ground_y_m must be finite, got {ground_y_m!r}")
    if not (math.isfinite(sample_s) and sample_s > 0):
        raise ValueError(f"sample_s must be positive, got {sample_s!r}")
    if range_m is None and ground_y_m is None and duration_s is None:
        raise ValueError("fly_to: give a range, a ground or a duration")
    limit = max_time_s if duration_s is None else min(duration_s, max_time_s)
    if range_m is not None:
        guess = time_to_range(model, launch, range_m)
    else:
        guess = 2.0 * math.sqrt(2.0 * max(float(launch.position_m[0, 1]) - (ground_y_m or 0.0), 0.01) / max(model.gravity_mps2, 1.0))  # fmt: skip
    t_end = min(limit, guess)
    while True:
        traj = fly(model, launch, t_end)
        t_range = float(traj.time_at_downrange(range_m)[0]) if range_m is not None else math.nan
        t_ground = float(traj.time_at_height(ground_y_m)[0]) if ground_y_m is not None else math.nan
        if math.isfinite(t_range) or math.isfinite(t_ground) or t_end >= limit:
            break
        t_end = min(limit, 2.0 * t_end)
    t_stop, reached = t_end, "time"
    if math.isfinite(t_range):
        t_stop, reached = t_range, "range"
    if math.isfinite(t_ground) and t_ground < t_stop:
        t_stop, reached = t_ground, "ground"
    t = np.arange(0.0, t_stop, sample_s)
    t = np.append(t[t < t_stop - END_TIME_TOL_S], t_stop)
    state = traj.sample(t)[0]
    if reached == "range":
        state[-1, 0] = range_m  # exact at the crossing (the bisection leaves ~1e-12 s)
    elif reached == "ground":
        state[-1, 1] = ground_y_m
    return FlownPath(t, state, reached, traj)


def fly_shots_to(spec: ModelSpec, rows: RowParams, **options) -> FlownPath:
    """:func:`fly_to` for rows of fit parameters (state at each row's start, law parameters).

    ``options`` are those of :func:`fly_to` (``range_m``, ``ground_y_m``, ``duration_s``, ``sample_s``,
    ``max_time_s``); row 0's path is sampled.
    """
    model, launch = flight_for(spec, rows)
    return fly_to(model, launch, **options)


def fly_back(
    model: FlightModel, launch: LaunchState, x_m: float, *, step_s: float = BACK_STEP_S
) -> np.ndarray:
    """States (n, 7) of every row where it was at downrange ``x_m``, integrating backwards in time.

    The rows must start downrange of ``x_m`` and fly toward +x. RK4 with a fixed negative step; within the
    step that crosses ``x_m`` the state is interpolated linearly in x (with the 0.25 ms default step the
    interpolation moves the speed by ~1e-5 m/s, far inside any measured error bar).

    Notes
    -----
    Classical fourth-order Runge-Kutta (Hairer, Nørsett & Wanner 1993, *Solving Ordinary Differential
    Equations I*, Table II.1.2) run with h < 0. World frame: x downrange, metres.
    """
    if not math.isfinite(x_m):
        raise ValueError(f"x_m must be finite, got {x_m!r}")
    if np.any(launch.velocity_mps[:, 0] <= 0):
        raise ValueError("fly_back: every row must fly downrange (+x)")
    if np.any(launch.position_m[:, 0] < x_m):
        raise ValueError(f"fly_back: a row starts before x = {x_m:g} m")
    axis = launch.spin_axis
    y = np.concatenate([launch.position_m, launch.velocity_mps, launch.spin_radps[:, None]], axis=1)
    out = y.copy()
    done = y[:, 0] <= x_m
    h = -abs(step_s)

    def f(s):
        return derivatives(model, s, axis)

    for _ in range(int(MAX_FLIGHT_S / abs(h))):
        if done.all():
            break
        k1 = f(y)
        k2 = f(y + 0.5 * h * k1)
        k3 = f(y + 0.5 * h * k2)
        k4 = f(y + h * k3)
        nxt = y + h / 6.0 * (k1 + 2 * k2 + 2 * k3 + k4)
        cross = ~done & (nxt[:, 0] <= x_m)
        if cross.any():
            w = (y[cross, 0] - x_m) / (y[cross, 0] - nxt[cross, 0])
            out[cross] = y[cross] + w[:, None] * (nxt[cross] - y[cross])
            done |= cross
        y = nxt
    if not done.all():
        raise ValueError(f"fly_back: a row did not reach x = {x_m:g} m within {MAX_FLIGHT_S:g} s")
    return out


__all__ = [
    "DEFAULT_SAMPLE_S",
    "MAX_FLIGHT_S",
    "FlownPath",
    "fly_back",
    "fly_shots_to",
    "fly_to",
    "time_to_range",
]
