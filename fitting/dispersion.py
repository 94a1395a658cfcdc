"""Effective range from shot-to-shot spread, by Monte Carlo over the fitted shots.

Definition
----------
The **effective range** is the largest downrange distance X (m, world x) such that, at every distance up
to X, at least ``hit_fraction`` (default 90 %) of simulated shots pass within a target circle of diameter
``target_diameter_m`` (default 0.3 m) centred on the group's mean point of impact at that distance. The
shooter is taken to aim (or set the hop) for the group centre, so only the spread counts, not the drop.

Tracks are planar (x, y): lateral spread is not measured, so the circle reduces to the vertical band
|y − ȳ| ≤ D/2; the effective range is therefore an upper bound for a real (2-D) group.

Monte Carlo
-----------
Each simulated shot draws its exit speed, elevation and lift coefficient from a normal distribution with
the mean and the covariance of the fitted shots (their between-shot covariance minus the mean measurement
covariance of each shot, so the fit's own noise is not counted as spread; clipped to be positive
semi-definite). With ``include_parameter_uncertainty`` the shots are split into batches, each with its own
draw of the shared C_D and spin-decay parameter from the fit's covariance (one "possible truth" per batch);
the hit fraction is averaged over batches, and the spread of the per-batch effective ranges gives its
standard error (it includes the batches' own sampling noise, so it is conservative). All shots are flown
in one vectorised :func:`fitting.flight.fly` call.

Notes
-----
World frame: x downrange, y up, metres.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .fitfile import FitFile
from .flight import fly
from .flyto import time_to_range
from .observe import RowParams, flight_for
from .predict import MAX_TIME_S, fitted_model_of, heights_at
from .results import FittedModel, FlightFit

#: Target circle diameter, m: a torso-sized target.  # common practice, no published source
DEFAULT_TARGET_DIAMETER_M = 0.3
#: Fraction of shots that must stay inside the target.  # common practice, no published source
DEFAULT_HIT_FRACTION = 0.9
DEFAULT_SHOTS = 2000
DEFAULT_MAX_RANGE_M = 80.0
DEFAULT_STEP_M = 0.5
DEFAULT_BATCHES = 20

_STATE_SLOTS = ("speed_mps", "elevation_rad", "lift_coefficient")


@dataclass(frozen=True, eq=False)
class DispersionResult:
    """Effective range and the hit-fraction curve behind it (SI).

    Attributes
    ----------
    effective_range_m : the effective range (see the module docstring), m; None when it could not be
        computed or exceeds ``max_range_m`` (``reason`` says which).
    effective_range_stderr_m : its standard error from the parameter uncertainty, m (None without).
    reason : empty, or why ``effective_range_m`` is None / a caveat.
    target_diameter_m, hit_fraction : the definition's parameters.
    x_m : (k,) downrange distances, m.
    fraction_inside : (k,) fraction of shots inside the target circle at each distance.
    spread_sd_m : (k,) standard deviation of the height about the group centre, m.
    n_shots : simulated shots. n_fitted_shots : fitted shots the spread came from.
    state_mean : (3,) mean (speed m/s, elevation rad, C_L0); state_cov : (3, 3) its shot-to-shot covariance.
    notes : caveats (planar tracks, measurement noise removed, ...).
    """

    effective_range_m: float | None
    effective_range_stderr_m: float | None
    reason: str
    target_diameter_m: float
    hit_fraction: float
    x_m: np.ndarray
    fraction_inside: np.ndarray
    spread_sd_m: np.ndarray
    n_shots: int
    n_fitted_shots: int
    state_mean: np.ndarray
    state_cov: np.ndarray
    notes: tuple[str, ...]


def shot_spread(fm: FittedModel) -> tuple[np.ndarray, np.ndarray]:
    """Mean and shot-to-shot covariance of (speed, elevation, C_L0) over the fitted shots.

    The covariance is the sample covariance across shots minus the mean per-shot measurement covariance
    (from the fit, without the calibration's part: shots mapped with one rig share their calibration
    error, so it does not widen their spread), projected onto the positive semi-definite matrices.
    """
    n = fm.n_shots
    lay = fm.layout
    idx = np.array([[lay.index(i, s) for s in _STATE_SLOTS] for i in range(n)])
    states = fm.theta[idx]  # (n, 3)
    mean = states.mean(axis=0)
    if n < 2:
        return mean, np.zeros((3, 3))
    between = np.cov(states, rowvar=False, ddof=1)
    free_pos = np.cumsum(fm.free) - 1
    meas = np.zeros((3, 3))
    for i in range(n):
        cols = idx[i]
        if np.all(fm.free[cols]):
            pos = free_pos[cols]
            meas += fm.noise_covariance[np.ix_(pos, pos)]
    meas /= n
    cov = between - meas
    w, v = np.linalg.eigh(0.5 * (cov + cov.T))
    return mean, (v * np.clip(w, 0.0, None)) @ v.T


def _first_below(x: np.ndarray, frac: np.ndarray, level: float) -> float | None:
    below = np.nonzero(frac < level)[0]
    if below.size == 0:
        return None
    j = int(below[0])
    if j == 0:
        return float(x[0])
    f0, f1 = frac[j - 1], frac[j]
    return float(x[j - 1] + (f0 - level) / (f0 - f1) * (x[j] - x[j - 1]))


def effective_range(
    fit: FlightFit | FitFile | FittedModel,
    *,
    target_diameter_m: float = DEFAULT_TARGET_DIAMETER_M,
    hit_fraction: float = DEFAULT_HIT_FRACTION,
    n_shots: int = DEFAULT_SHOTS,
    max_range_m: float = DEFAULT_MAX_RANGE_M,
    step_m: float = DEFAULT_STEP_M,
    include_parameter_uncertainty: bool = True,
    n_batches: int = DEFAULT_BATCHES,
    rng: int | np.random.Generator | None = None,
) -> DispersionResult:
    """Effective range from the shot-to-shot spread of a joint fit (see the module docstring).

    Parameters
    ----------
    fit : a joint fit of two or more shots (result, file or FittedModel).
    target_diameter_m : target circle diameter, m.
    hit_fraction : required fraction of shots inside it (0..1).
    n_shots : simulated shots.
    max_range_m : farthest distance examined, m (world x).
    step_m : spacing of the examined distances, m.
    include_parameter_uncertainty : draw the shared C_D and decay per batch from the fit's covariance.
    n_batches : batches for the parameter uncertainty.
    rng : seed or Generator.
    """
    for name, v in (
        ("target_diameter_m", target_diameter_m),
        ("max_range_m", max_range_m),
        ("step_m", step_m),
    ):
        if not (math.isfinite(v) and v > 0):
            raise ValueError(f"{name} must be positive, got {v!r}")
    if not 0 < hit_fraction < 1:
        raise ValueError(f"hit_fraction must lie strictly between 0 and 1, got {hit_fraction!r}")
    if n_shots < 100:
        raise ValueError(f"n_shots must be at least 100, got {n_shots!r}")
    if n_batches < 2 and include_parameter_uncertainty:
        raise ValueError(f"n_batches must be at least 2, got {n_batches!r}")
    fm = fitted_model_of(fit)
    gen = np.random.default_rng(rng)
    mean, cov = shot_spread(fm)
    notes = [
        "tracks are planar: lateral spread is not measured, so this is an upper bound for a real group",
        "shot-to-shot spread = covariance of the fitted shots minus their measurement covariance",
    ]
    lay = fm.layout
    start_x = float(np.mean(fm.theta[lay.slot("x0_m")]))
    x_grid = np.arange(start_x + step_m, max_range_m + 1e-9, step_m)
    empty = np.zeros(0)
    if fm.n_shots < 2:
        return DispersionResult(
            None, None, "needs at least two fitted shots to measure the shot-to-shot spread",
            target_diameter_m, hit_fraction, empty, empty, empty, 0, fm.n_shots, mean, cov, tuple(notes),
        )  # fmt: skip
    if x_grid.size < 2:
        raise ValueError(f"max_range_m {max_range_m:g} m lies before the shots' start ({start_x:.3g} m)")
    n_b = n_batches if include_parameter_uncertainty else 1
    per = int(math.ceil(n_shots / n_b))
    total = per * n_b
    states = gen.multivariate_normal(mean, cov, size=total, method="eigh")
    if include_parameter_uncertainty:
        shared = fm.sample_theta(n_b, gen)[:, lay.shared]
    else:
        shared = fm.theta[None, lay.shared]
    shared_rows = np.repeat(shared, per, axis=0)
    y0 = float(np.mean(fm.theta[lay.slot("y0_m")]))
    rows = RowParams(
        np.full(total, start_x),
        np.full(total, y0),
        np.clip(states[:, 0], 1.0, None),
        states[:, 1],
        states[:, 2],
        shared_rows[:, 0],
        np.abs(shared_rows[:, 1]),
    )
    model, launch = flight_for(fm.spec, rows)
    traj = fly(model, launch, min(MAX_TIME_S, time_to_range(model, launch, max_range_m)))
    ys, _ = heights_at(traj, x_grid)  # (total, k)
    ys = ys.reshape(n_b, per, x_grid.size)
    reached = np.isfinite(ys)
    filled = np.where(reached, ys, 0.0)
    count = reached.sum(axis=1, keepdims=True)
    centre = filled.sum(axis=1, keepdims=True) / np.maximum(count, 1)
    dev = np.where(reached, ys - centre, 0.0)
    inside = reached & (np.abs(dev) <= 0.5 * target_diameter_m)
    frac_b = inside.mean(axis=1)  # (n_b, k): shots that never get there count as misses
    frac = frac_b.mean(axis=0)
    n_reach = reached.sum(axis=(0, 1))
    spread = np.where(n_reach > 0, np.sqrt((dev**2).sum(axis=(0, 1)) / np.maximum(n_reach, 1)), np.nan)
    rng_main = _first_below(x_grid, frac, hit_fraction)
    stderr = None
    if include_parameter_uncertainty:
        per_batch = [_first_below(x_grid, f, hit_fraction) for f in frac_b]
        if rng_main is not None and all(r is not None for r in per_batch):
            stderr = float(np.std(np.array(per_batch, dtype=float), ddof=1))
    reason = "" if rng_main is not None else f"the group stays inside the target beyond {max_range_m:g} m"
    return DispersionResult(
        rng_main, stderr, reason, target_diameter_m, hit_fraction, x_grid, frac, spread, total,
        fm.n_shots, mean, cov, tuple(notes),
    )  # fmt: skip
