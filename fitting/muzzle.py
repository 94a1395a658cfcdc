"""Muzzle state: speed and energy flown back from the fitted first point to the muzzle, per shot and group.

The fitted model starts at each shot's first tracked point, often a metre or more past the muzzle, where
the BB has already lost speed to drag. :func:`muzzle_state` integrates each shot's fitted state backwards
in time (:func:`fitting.flyto.fly_back`) to the muzzle's downrange position, and propagates the fit's
covariance to the speed there to first order (a finite-difference gradient over the shot's own parameters
and the shared drag and decay, all perturbations flown in one call). The energy ½mv² adds the BB's mass
tolerance as its own share (:class:`fitting.bb.BBTolerance`).

Group statistics (mean, sample SD, extreme spread = max − min) are over the shots' values. The mean's
standard error combines the sampling error of the mean (SD/√n, which also holds the shots' measurement
noise) with the parts the shots share and a mean cannot average away: the calibration (through the
gradients' mean) and, for energy, the BB's mass.

Notes
-----
World frame: x downrange, y up, metres; speeds along the flight, m/s; energies J.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from .bb import BBTolerance
from .fitfile import FitFile
from .flyto import fly_back
from .observe import flight_for
from .predict import fitted_model_of
from .results import Estimate, FittedModel, FlightFit
from .uncertainty import DERIVED_REL_STEP, DERIVED_STEP_FLOOR

#: A muzzle closer than this to a shot's first point (m) is taken to be at it (nothing to fly back).
AT_FIRST_POINT_M = 1e-6


@dataclass(frozen=True)
class ShotMuzzle:
    """One shot at the muzzle (SI): ``x_m`` downrange position, speed m/s, energy J."""

    label: str
    x_m: float
    speed_mps: Estimate
    energy_j: Estimate


@dataclass(frozen=True)
class GroupStat:
    """A quantity over a group of shots: mean (with standard error), sample SD, extreme spread, count.

    ``sd`` is None for fewer than two shots; ``extreme_spread`` is max − min.
    """

    mean: Estimate
    sd: float | None
    extreme_spread: float
    minimum: float
    maximum: float
    n: int


@dataclass(frozen=True)
class MuzzleState:
    """Muzzle speed and energy of every shot of a fit, and of the group (SI).

    Attributes
    ----------
    x_m : the muzzle's downrange position, m (None: each shot's first tracked point).
    shots : per shot.
    speed_mps, energy_j : group statistics.
    tolerance : the BB tolerance in the energies.
    notes : how the numbers were made (one line each).
    """

    x_m: float | None
    shots: tuple[ShotMuzzle, ...]
    speed_mps: GroupStat
    energy_j: GroupStat
    tolerance: BBTolerance
    notes: tuple[str, ...]


def muzzle_state(
    fit: FlightFit | FitFile | FittedModel,
    *,
    muzzle_x_m: float | None = None,
    tolerance: BBTolerance | None = None,
) -> MuzzleState:
    """Speed and energy at the muzzle for each shot of ``fit`` and for the group.

    Parameters
    ----------
    fit : the fit (result, file or FittedModel).
    muzzle_x_m : the muzzle's (or chronograph's) downrange position, world x, m; it must not lie downrange
        of any shot's first tracked point. None: the values at each shot's first tracked point.
    tolerance : the BB's mass/diameter tolerance (default: :meth:`BBTolerance.default_for`, or the fit's).

    Raises
    ------
    ValueError
        ``muzzle_x_m`` not finite or downrange of a shot's first tracked point.
    """
    fm = fitted_model_of(fit)
    bb = fm.spec.bb
    if tolerance is None:
        tolerance = getattr(fit, "bb_tolerance", None) or BBTolerance.default_for(bb)
    if muzzle_x_m is not None and not math.isfinite(muzzle_x_m):
        raise ValueError(f"muzzle_x_m must be finite, got {muzzle_x_m!r}")
    lay = fm.layout
    n_free = int(np.count_nonzero(fm.free))
    cov_c = np.zeros((n_free, n_free)) if fm.covariance_calibration is None else fm.covariance_calibration
    cov_n = fm.covariance - cov_c
    mass_rel = tolerance.mass_rel(bb)
    shots, grads, speeds = [], [], []
    for i, label in enumerate(fm.labels):
        x0 = float(fm.theta[lay.index(i, "x0_m")])
        if muzzle_x_m is not None and muzzle_x_m > x0 + AT_FIRST_POINT_M:
            raise ValueError(
                f"muzzle_x_m: {muzzle_x_m:g} m lies downrange of the first tracked point of shot {label!r} "
                f"({x0:.4g} m)"
            )
        speed, g = _speed_and_gradient(fm, i, muzzle_x_m)
        speeds.append(speed)
        grads.append(g)
        var_n, var_c = float(g @ cov_n @ g), float(g @ cov_c @ g)
        v_est = _estimate(speed, var_n, var_c, 0.0)
        e = bb.kinetic_energy_j(speed)
        de = bb.mass_kg * speed  # dE/dv
        e_est = _estimate(e, de * de * var_n, de * de * var_c, (e * mass_rel) ** 2)
        shots.append(ShotMuzzle(label, x0 if muzzle_x_m is None else float(muzzle_x_m), v_est, e_est))
    v = np.array(speeds)
    gm = np.mean(grads, axis=0)
    speed_stat = _group(v, np.zeros_like(v), gm, cov_n, cov_c, 0.0)
    energies = 0.5 * bb.mass_kg * v**2
    de_mean = np.mean([bb.mass_kg * s * g for s, g in zip(speeds, grads, strict=True)], axis=0)
    energy_stat = _group(energies, energies, de_mean, cov_n, cov_c, mass_rel)
    notes = [
        "muzzle values flown back from each shot's fitted first point with the fitted model"
        if muzzle_x_m is not None
        else "no muzzle position given: values at each shot's first tracked point",
        f"energy error bars include the BB mass tolerance ({tolerance.origin}: σ = {tolerance.mass_sigma_kg:.3g} kg)",
    ]
    return MuzzleState(muzzle_x_m, tuple(shots), speed_stat, energy_stat, tolerance, tuple(notes))


def _speed_and_gradient(fm: FittedModel, shot: int, muzzle_x_m: float | None) -> tuple[float, np.ndarray]:
    """Speed at the muzzle (m/s) and its gradient over the free parameters (central differences)."""
    lay = fm.layout
    n_free = int(np.count_nonzero(fm.free))
    free_pos = np.cumsum(fm.free) - 1
    theta = fm.theta
    i_speed = lay.index(shot, "speed_mps")
    x0 = float(theta[lay.index(shot, "x0_m")])
    g = np.zeros(n_free)
    if muzzle_x_m is None or muzzle_x_m >= x0 - AT_FIRST_POINT_M:
        if fm.free[i_speed]:
            g[free_pos[i_speed]] = 1.0
        return float(theta[i_speed]), g
    own = range(lay.own(shot).start, lay.own(shot).stop)
    idx = [k for k in (*own, lay.drag, lay.decay) if fm.free[k]]
    steps = [DERIVED_REL_STEP * max(abs(theta[k]), DERIVED_STEP_FLOOR) for k in idx]
    thetas = np.tile(theta, (1 + 2 * len(idx), 1))
    for j, (k, h) in enumerate(zip(idx, steps, strict=True)):
        thetas[1 + 2 * j, k] += h
        thetas[2 + 2 * j, k] -= h
    # positions must stay at or downrange of the muzzle for every perturbed row
    thetas[:, lay.index(shot, "x0_m")] = np.maximum(thetas[:, lay.index(shot, "x0_m")], muzzle_x_m)
    model, launch = flight_for(fm.spec, lay.shot_rows(thetas, shot))
    state = fly_back(model, launch, muzzle_x_m)
    speed = np.linalg.norm(state[:, 3:6], axis=1)
    for j, (k, h) in enumerate(zip(idx, steps, strict=True)):
        g[free_pos[k]] = (speed[1 + 2 * j] - speed[2 + 2 * j]) / (2.0 * h)
    return float(speed[0]), g


def _estimate(value: float, var_n: float, var_c: float, var_bb: float) -> Estimate:
    vn, vc, vb = (max(v, 0.0) for v in (var_n, var_c, var_bb))
    return Estimate(float(value), math.sqrt(vn + vc + vb), math.sqrt(vn), math.sqrt(vc), math.sqrt(vb))


def _group(
    values: np.ndarray,
    bb_scale: np.ndarray,
    grad_mean: np.ndarray,
    cov_n: np.ndarray,
    cov_c: np.ndarray,
    bb_rel: float,
) -> GroupStat:
    """Group statistics; the mean's error: SD/√n (or the measurement noise for one shot), the shared
    calibration part, and ``bb_rel`` × the mean (shared by all shots)."""
    n = values.size
    mean = float(np.mean(values))
    sd = float(np.std(values, ddof=1)) if n >= 2 else None
    var_n = sd * sd / n if sd is not None else float(grad_mean @ cov_n @ grad_mean)
    var_c = float(grad_mean @ cov_c @ grad_mean)
    var_bb = (bb_rel * float(np.mean(bb_scale))) ** 2
    return GroupStat(
        _estimate(mean, var_n, var_c, var_bb),
        sd,
        float(np.max(values) - np.min(values)),
        float(np.min(values)),
        float(np.max(values)),
        n,
    )


def group_stat(values: Sequence[float]) -> GroupStat:
    """Mean (stderr SD/√n), SD, extreme spread of plain numbers (no measurement model)."""
    v = np.asarray(values, dtype=float)
    if v.ndim != 1 or v.size == 0 or not np.all(np.isfinite(v)):
        raise ValueError("values: expected a non-empty list of finite numbers")
    z = np.zeros(1)
    return _group(v, np.zeros_like(v), z, np.zeros((1, 1)), np.zeros((1, 1)), 0.0)


__all__ = ["GroupStat", "MuzzleState", "ShotMuzzle", "group_stat", "muzzle_state"]
