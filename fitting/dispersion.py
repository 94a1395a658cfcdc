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
the hit fraction is averaged over batches. All shots are flown in one vectorised :func:`fitting.flight.fly`
call.

Standard error
--------------
A handful of fitted shots pins the spread down only roughly: leaving one of five out can move the range
by a third. The standard error is therefore the standard deviation of the effective range over bootstrap
resamples of the fitted shots (Efron & Tibshirani 1993, *An Introduction to the Bootstrap*, ch. 6): each
replicate draws the fitted shots with replacement, recomputes their mean and spread, draws the shared C_D
and decay from the fit's covariance, and flies its own shots; the replicates use common random numbers
(the same standard normal draws, transformed by each replicate's spread), so the Monte Carlo noise does
not masquerade as sampling error.

Ground and group checks
-----------------------
The shots are flown from the fitted shots' mean first point, taken to be ``muzzle_height_m`` above the
ground; a shot that reaches the ground before a distance misses there, and the curves end at the farthest
distance any shot reaches. Warnings: the shots may not be one group (their speeds spread by more than
:data:`NOT_ONE_GROUP_SPEED_REL` of the mean, e.g. shots fired on purpose at different powers), and two
shots whose fitted states agree within :data:`DUPLICATE_SIGMA` of their error bars (the same clip twice).

Notes
-----
World frame: x downrange, y up, metres.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass

import numpy as np

from .fitfile import FitFile
from .flight import fly
from .flyto import time_to_range
from .forecast import DEFAULT_MUZZLE_HEIGHT_M
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

DEFAULT_BOOTSTRAP = 20
#: Simulated shots per bootstrap replicate.
BOOTSTRAP_SHOTS = 100
#: Speeds spread (SD) by more than this fraction of their mean: not one group (a replica's shot-to-shot
#: speed SD is a few per cent).  # common practice, no published source
NOT_ONE_GROUP_SPEED_REL = 0.08
#: Two shots whose own fitted parameters all agree within this many standard errors are duplicates.
DUPLICATE_SIGMA = 1e-3

_STATE_SLOTS = ("speed_mps", "elevation_rad", "lift_coefficient")


@dataclass(frozen=True, eq=False)
class DispersionResult:
    """Effective range and the hit-fraction curve behind it (SI).

    Attributes
    ----------
    effective_range_m : the effective range (see the module docstring), m; None when it could not be
        computed or exceeds ``max_range_m`` (``reason`` says which).
    effective_range_stderr_m : its standard error, m: the SD over bootstrap resamples of the shots (with
        the shared parameters' uncertainty), None when no replicate gives a range.
    reason : empty, or why ``effective_range_m`` is None / a caveat.
    target_diameter_m, hit_fraction : the definition's parameters.
    x_m : (k,) downrange distances, m.
    fraction_inside : (k,) fraction of shots inside the target circle at each distance.
    spread_sd_m : (k,) standard deviation of the height about the group centre, m.
    n_shots : simulated shots. n_fitted_shots : fitted shots the spread came from.
    state_mean : (3,) mean (speed m/s, elevation rad, C_L0); state_cov : (3, 3) its shot-to-shot covariance.
    notes : caveats (planar tracks, measurement noise removed, ...).
    warnings : not one group, duplicate shots (one line each).
    bootstrap_ranges_m : (b,) the replicates' effective ranges (NaN where beyond ``max_range_m``).
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
    warnings: tuple[str, ...] = ()
    bootstrap_ranges_m: np.ndarray = dataclasses.field(default_factory=lambda: np.zeros(0))


def shot_spread(fm: FittedModel, indices: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Mean and shot-to-shot covariance of (speed, elevation, C_L0) over the fitted shots.

    The covariance is the sample covariance across shots minus the mean per-shot measurement covariance
    (from the fit, without the calibration's part: shots mapped with one rig share their calibration
    error, so it does not widen their spread), projected onto the positive semi-definite matrices.
    ``indices``: the shots to use (repeats allowed, as in a bootstrap resample); default all.
    """
    lay = fm.layout
    chosen = np.arange(fm.n_shots) if indices is None else np.asarray(indices, dtype=int)
    idx = np.array([[lay.index(int(i), s) for s in _STATE_SLOTS] for i in chosen])
    states = fm.theta[idx]  # (n, 3)
    mean = states.mean(axis=0)
    if len(set(chosen.tolist())) < 2:
        return mean, np.zeros((3, 3))
    between = np.cov(states, rowvar=False, ddof=1)
    free_pos = np.cumsum(fm.free) - 1
    meas = np.zeros((3, 3))
    for cols in idx:
        if np.all(fm.free[cols]):
            pos = free_pos[cols]
            meas += fm.noise_covariance[np.ix_(pos, pos)]
    meas /= len(chosen)
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


def _sqrt_psd(cov: np.ndarray) -> np.ndarray:
    w, v = np.linalg.eigh(0.5 * (cov + cov.T))
    return v * np.sqrt(np.clip(w, 0.0, None))


def _heights(fm: FittedModel, rows: RowParams, x_grid: np.ndarray, max_range_m: float, ground: float | None):
    """Heights (n, k) of the rows at each distance; NaN where a row never gets there or hit the ground."""
    model, launch = flight_for(fm.spec, rows)
    traj = fly(model, launch, min(MAX_TIME_S, time_to_range(model, launch, max_range_m)))
    ys, _ = heights_at(traj, x_grid)
    if ground is not None:
        t_g = traj.time_at_height(ground)
        hit = np.isfinite(t_g)
        if hit.any():
            xg = np.full(t_g.shape, np.inf)
            st = traj.sample(np.where(hit, t_g, 0.0)[:, None])[:, 0, :]
            xg[hit] = st[hit, 0]
            ys = np.where(x_grid[None, :] > xg[:, None], np.nan, ys)
    return ys


def _inside(ys: np.ndarray, target_diameter_m: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(inside (…, n, k), reached, deviation from the centre) of a block of shots (axis −2)."""
    reached = np.isfinite(ys)
    filled = np.where(reached, ys, 0.0)
    count = reached.sum(axis=-2, keepdims=True)
    centre = filled.sum(axis=-2, keepdims=True) / np.maximum(count, 1)
    dev = np.where(reached, ys - centre, 0.0)
    return reached & (np.abs(dev) <= 0.5 * target_diameter_m), reached, dev


def group_warnings(fm: FittedModel) -> tuple[str, ...]:
    """Warnings that the fitted shots are not one group, or that two of them are the same shot."""
    lay = fm.layout
    out = []
    speeds = fm.theta[lay.slot("speed_mps")]
    if speeds.size >= 2:
        rel = float(np.std(speeds, ddof=1) / np.mean(speeds))
        if rel > NOT_ONE_GROUP_SPEED_REL:
            out.append(
                f"the shots may not be one group: their speeds spread by {rel:.0%} ({np.min(speeds):.1f} to "
                f"{np.max(speeds):.1f} m/s), far beyond a replica's shot-to-shot variation; the effective "
                "range mixes them"
            )
    free_pos = np.cumsum(fm.free) - 1
    sd = np.sqrt(np.clip(np.diag(fm.noise_covariance), 0.0, None))
    for i in range(fm.n_shots):
        for j in range(i + 1, fm.n_shots):
            a, b = np.arange(*lay.own(i).indices(lay.size)), np.arange(*lay.own(j).indices(lay.size))
            sig = np.array([sd[free_pos[k]] if fm.free[k] else 0.0 for k in a])
            scale = np.maximum(sig, 1e-12 * np.maximum(np.abs(fm.theta[a]), 1.0))
            if np.all(np.abs(fm.theta[a] - fm.theta[b]) <= DUPLICATE_SIGMA * scale):
                out.append(
                    f"shots {fm.labels[i]!r} and {fm.labels[j]!r} are the same shot (their fitted states agree "
                    "far within their error bars): the same clip given twice?"
                )
    return tuple(out)


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
    muzzle_height_m: float | None = DEFAULT_MUZZLE_HEIGHT_M,
    n_bootstrap: int = DEFAULT_BOOTSTRAP,
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
    muzzle_height_m : height of the shots' mean first point above the ground, m (None: no ground).
    n_bootstrap : bootstrap replicates for the standard error (0: none).
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
    if muzzle_height_m is not None and not (math.isfinite(muzzle_height_m) and muzzle_height_m > 0):
        raise ValueError(f"muzzle_height_m must be positive, got {muzzle_height_m!r}")
    if n_bootstrap < 0 or n_bootstrap == 1:
        raise ValueError(f"n_bootstrap must be 0 or at least 2, got {n_bootstrap!r}")
    fm = fitted_model_of(fit)
    gen = np.random.default_rng(rng)
    mean, cov = shot_spread(fm)
    notes = [
        "tracks are planar: lateral spread is not measured, so this is an upper bound for a real group",
        "shot-to-shot spread = covariance of the fitted shots minus their measurement covariance",
    ]
    warnings = group_warnings(fm)
    lay = fm.layout
    start_x = float(np.mean(fm.theta[lay.slot("x0_m")]))
    y0 = float(np.mean(fm.theta[lay.slot("y0_m")]))
    ground = None if muzzle_height_m is None else y0 - muzzle_height_m
    x_grid = np.arange(start_x + step_m, max_range_m + 1e-9, step_m)
    empty = np.zeros(0)
    if fm.n_shots < 2:
        return DispersionResult(
            None, None, "needs at least two fitted shots to measure the shot-to-shot spread",
            target_diameter_m, hit_fraction, empty, empty, empty, 0, fm.n_shots, mean, cov, tuple(notes),
            warnings,
        )  # fmt: skip
    if x_grid.size < 2:
        raise ValueError(f"max_range_m {max_range_m:g} m lies before the shots' start ({start_x:.3g} m)")

    def rows_for(states: np.ndarray, shared: np.ndarray) -> RowParams:
        m = states.shape[0]
        return RowParams(
            np.full(m, start_x), np.full(m, y0), np.clip(states[:, 0], 1.0, None), states[:, 1], states[:, 2],
            shared[:, 0], np.abs(shared[:, 1]),
        )  # fmt: skip

    n_b = n_batches if include_parameter_uncertainty else 1
    per = int(math.ceil(n_shots / n_b))
    total = per * n_b
    states = gen.multivariate_normal(mean, cov, size=total, method="eigh")
    shared = (
        fm.sample_theta(n_b, gen)[:, lay.shared]
        if include_parameter_uncertainty
        else fm.theta[None, lay.shared]
    )
    ys = _heights(fm, rows_for(states, np.repeat(shared, per, axis=0)), x_grid, max_range_m, ground)
    inside, reached, dev = _inside(ys.reshape(n_b, per, x_grid.size), target_diameter_m)
    frac = inside.mean(axis=1).mean(axis=0)  # shots that never get there count as misses
    n_reach = reached.sum(axis=(0, 1))
    spread = np.where(n_reach > 0, np.sqrt((dev**2).sum(axis=(0, 1)) / np.maximum(n_reach, 1)), np.nan)
    rng_main = _first_below(x_grid, frac, hit_fraction)
    boot = _bootstrap(fm, gen, n_bootstrap, include_parameter_uncertainty, rows_for, x_grid, max_range_m, ground,
                      target_diameter_m, hit_fraction)  # fmt: skip
    stderr = (
        float(np.std(boot, ddof=1))
        if rng_main is not None and boot.size >= 2 and np.all(np.isfinite(boot))
        else None
    )
    if rng_main is not None and boot.size and not np.all(np.isfinite(boot)):
        notes.append("some bootstrap resamples stay inside the target beyond max_range_m: no standard error")
    last = np.nonzero(n_reach > 0)[0]
    k = int(last[-1]) + 1 if last.size else 0
    if k < x_grid.size:
        notes.append(
            f"the shots reach the ground by {x_grid[k - 1] if k else start_x:.1f} m: the curves end there"
        )
    reason = "" if rng_main is not None else f"the group stays inside the target beyond {max_range_m:g} m"
    return DispersionResult(
        rng_main, stderr, reason, target_diameter_m, hit_fraction, x_grid[:k], frac[:k], spread[:k], total,
        fm.n_shots, mean, cov, tuple(notes), warnings, boot,
    )  # fmt: skip


def _bootstrap(
    fm, gen, n_boot, with_params, rows_for, x_grid, max_range_m, ground, diameter, level
) -> np.ndarray:
    """Effective ranges of ``n_boot`` bootstrap resamples of the fitted shots (NaN: beyond the range)."""
    if n_boot == 0:
        return np.zeros(0)
    lay = fm.layout
    z = gen.standard_normal((BOOTSTRAP_SHOTS, 3))  # common random numbers for every replicate
    blocks, shared = [], []
    for _ in range(n_boot):
        pick = gen.integers(0, fm.n_shots, fm.n_shots)
        m, c = shot_spread(fm, pick)
        blocks.append(m + z @ _sqrt_psd(c).T)
        shared.append(fm.sample_theta(1, gen)[0, lay.shared] if with_params else fm.theta[lay.shared])
    states = np.concatenate(blocks)
    sh = np.repeat(np.array(shared), BOOTSTRAP_SHOTS, axis=0)
    ys = _heights(fm, rows_for(states, sh), x_grid, max_range_m, ground)
    inside, _, _ = _inside(ys.reshape(n_boot, BOOTSTRAP_SHOTS, x_grid.size), diameter)
    frac = inside.mean(axis=1)
    out = [_first_below(x_grid, f, level) for f in frac]
    return np.array([np.nan if r is None else r for r in out], dtype=float)
