"""Initial guesses for a shot's exit state and coefficients, from the tracked points alone.

A low-order polynomial fitted to x(t) and y(t) near the first tracked point gives position, velocity and
acceleration there (finite differences in effect). The acceleration split along and across the flight
direction, with gravity removed, gives C_D and C_L from the force laws

    a·û = −q·C_D·u² − g·û_y,     a·n̂ = q·C_L·u² − g·û_x,     q = ρA/(2m),

where n̂ = ẑ × û is the lift direction for backspin (see :mod:`fitting.flight`). Every guess is clipped
into the physical bounds of :data:`BOUNDS`, so a noisy short track still gives a usable start.

Notes
-----
World frame: x downrange, y up, metres.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from hopscope.shared.constants import MAX_PLAUSIBLE_SPEED_MPS

from .observe import ModelSpec, ShotData, drag_coefficient_at

#: Physical bounds of the fitted quantities (SI). Speeds: a BB is neither at rest nor supersonic here.
#: C_D of a sphere at BB Reynolds numbers lies near 0.4-0.5 (Morsi & Alexander 1972, JFM 55:193,
#: tables of Lapple and Schlichting); the bounds leave wide room. |C_L| ≤ 1 covers every published
#: spinning-sphere lift up to S = 1. Spin decay faster than 1/(20 ms) is not a flying BB.
BOUNDS: dict[str, tuple[float, float]] = {
    "speed_mps": (1.0, MAX_PLAUSIBLE_SPEED_MPS),
    "elevation_rad": (-math.radians(80.0), math.radians(80.0)),
    "lift_coefficient": (-1.0, 1.0),
    "drag_coefficient": (0.05, 2.0),
    "drag_scale": (0.1, 4.0),
    "spin_decay_rate_per_s": (0.0, 50.0),
    "spin_torque_slope": (0.0, 1.0),
}

#: Default spin-decay time used to start the fit and, where the data cannot determine it, assumed, s.
#: Computed (references.md) from a torque coefficient C_M ≈ 0.02·S (Smits & Smith 1994, golf balls,
#: read via Nathan) for a 0.25 g BB at 100 m/s: L_ω ≈ 300 m, τ ≈ 3 s.
DEFAULT_SPIN_DECAY_TIME_S = 3.0

#: Default torque slope c of the aerodynamic decay law (Smits & Smith 1994, golf balls, via Nathan).
DEFAULT_TORQUE_SLOPE = 0.02

#: Points used for the local polynomial (at most); longer tracks use their first part.
GUESS_WINDOW_POINTS = 40


@dataclass(frozen=True)
class ShotGuess:
    """Starting values for one shot (SI): position at the first point, speed, elevation, C_D, C_L."""

    x0_m: float
    y0_m: float
    speed_mps: float
    elevation_rad: float
    drag_coefficient: float
    lift_coefficient: float


def _clip(name: str, value: float, margin: float = 1e-3) -> float:
    lo, hi = BOUNDS[name]
    span = hi - lo
    if not math.isfinite(value):
        value = 0.5 * (lo + hi)
    return float(min(max(value, lo + margin * span), hi - margin * span))


def guess_shot(shot: ShotData, spec: ModelSpec) -> ShotGuess:
    """Starting values for a shot from its points (polynomial fit near the first point).

    Parameters
    ----------
    shot : the tracked points.
    spec : the model (BB, air, gravity) used to turn accelerations into coefficients.

    Returns
    -------
    ShotGuess with every value inside :data:`BOUNDS` (drag_coefficient is a C_D, whatever the drag law).
    """
    n = min(shot.n_points, GUESS_WINDOW_POINTS)
    t = shot.t_s[:n] - shot.t_s[0]
    span = t[-1]
    tau = t / span
    deg = 3 if n >= 12 else 2
    w = 1.0 / shot.sigma_m[:n]
    px = np.polynomial.polynomial.polyfit(tau, shot.x_m[:n], deg, w=w)
    py = np.polynomial.polynomial.polyfit(tau, shot.y_m[:n], deg, w=w)
    x0, y0 = px[0], py[0]
    vx, vy = px[1] / span, py[1] / span
    ax, ay = 2 * px[2] / span**2, 2 * py[2] / span**2
    speed = math.hypot(vx, vy)
    if speed <= 0:
        raise ValueError(f"shot {shot.label!r}: the points do not move, cannot guess a speed")
    ux, uy = vx / speed, vy / speed
    g = spec.gravity_mps2
    q = spec.q_per_m
    along = ax * ux + ay * uy
    across = -ax * uy + ay * ux
    cd = -(along + g * uy) / (q * speed**2)
    cl = (across + g * ux) / (q * speed**2)
    cl_lim = min(spec.cl_limit * 0.9, BOUNDS["lift_coefficient"][1])
    cl = float(np.clip(cl, -cl_lim, cl_lim)) if math.isfinite(cl) else 0.0
    return ShotGuess(
        x0_m=float(x0),
        y0_m=float(y0),
        speed_mps=_clip("speed_mps", speed),
        elevation_rad=_clip("elevation_rad", math.atan2(vy, vx)),
        drag_coefficient=_clip("drag_coefficient", cd),
        lift_coefficient=_clip("lift_coefficient", cl),
    )


def guess_drag_param(guesses: list[ShotGuess], spec: ModelSpec) -> float:
    """Shared drag parameter from per-shot guesses: median C_D, or for the sphere law the median scale."""
    cds = np.array([g.drag_coefficient for g in guesses])
    if spec.drag == "constant":
        return _clip("drag_coefficient", float(np.median(cds)))
    ref = np.array([float(drag_coefficient_at(spec, 1.0, g.speed_mps)[()]) for g in guesses])
    return _clip("drag_scale", float(np.median(cds / ref)))


def guess_decay_param(spec: ModelSpec) -> float:
    """Starting decay parameter: 1/τ for the default τ, or the default torque slope."""
    if spec.decay == "exponential":
        return 1.0 / DEFAULT_SPIN_DECAY_TIME_S
    return DEFAULT_TORQUE_SLOPE
