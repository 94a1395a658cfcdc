"""Comparing groups of shots (A/B: two hop settings, two BB weights) and the tuning assistant.

A group is the joint fit of its tracks (:func:`fitting.estimate.fit_shots`), named, with an optional
numeric setting (clicks or turns of the hop-up adjuster). :func:`summarize_group` reads per-shot values off
it: muzzle speed and energy (:mod:`fitting.muzzle`), the lift coefficient C_L0, and the flat distance of
the shot flown level from a muzzle height (:mod:`fitting.forecast`).

:func:`compare_groups` gives, per quantity, the difference of the means (b − a) with its standard error
√(s_a²/n_a + s_b²/n_b) and Welch's unequal-variance t test (p value, two-sided), flagged significant at
the stated level; which group is flatter (longer mean flat distance) and which more consistent (smaller
SD of muzzle speed, with the Brown-Forsythe test of equal spread).

:func:`tune` regresses C_L0 on the setting over three or more groups (ordinary least squares over all
shots) and recommends the setting whose C_L0 gives the flattest path over the engagement range, with the
delta-method uncertainty of the inverted line; it says when the data cannot tell (no significant slope,
or the answer far outside the settings tried).

References
----------
Welch (1947), "The generalization of 'Student's' problem when several different population variances are
involved", Biometrika 34:28 — as implemented in scipy.stats.ttest_ind(equal_var=False).
Brown & Forsythe (1974), "Robust tests for the equality of variances", JASA 69:364 — scipy.stats.levene
with center="median".
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import scipy.stats

from .flight import fly
from .flyto import time_to_range
from .forecast import DEFAULT_BAND_M, DEFAULT_MUZZLE_HEIGHT_M, forecast_shot, launch_rows
from .muzzle import GroupStat, group_stat, muzzle_state
from .observe import flight_for
from .results import Estimate, FlightFit
from .verdict import DEFAULT_ENGAGEMENT_M

#: Default significance level of the tests.  # common practice, no published source
DEFAULT_ALPHA = 0.05
#: Per-shot quantities compared.
QUANTITIES = ("speed_mps", "energy_j", "lift_coefficient", "flat_distance_m")
#: The slope of C_L0 on the setting must exceed this many standard errors for a recommendation.
SLOPE_MIN_SIGMAS = 2.0
#: A recommended setting farther outside the tried range than this fraction of its span is not given.
EXTRAPOLATION_FRACTION = 0.5
#: C_L0 values scanned for the flattest path, as multiples of the lift that balances the weight.
CL_SCAN_FACTORS = np.linspace(0.5, 3.0, 126)
#: Time between path samples when scanning, s.
SCAN_SAMPLE_S = 1e-3


@dataclass(frozen=True, eq=False)
class GroupSummary:
    """One group's per-shot values and statistics (SI).

    Attributes
    ----------
    name, setting : the group's name and numeric setting (None if not given).
    labels : the shots. values : per quantity of :data:`QUANTITIES`, (n,) per-shot values.
    stats : per quantity, the group statistics. fit : the group's joint fit.
    drag_coefficient : the group's shared C_D (estimate).
    """

    name: str
    setting: float | None
    labels: tuple[str, ...]
    values: dict[str, np.ndarray]
    stats: dict[str, GroupStat]
    drag_coefficient: Estimate
    fit: FlightFit

    @property
    def n_shots(self) -> int:
        return len(self.labels)


@dataclass(frozen=True)
class Difference:
    """b − a for one quantity: the value, its standard error, the test, its p value and the verdict."""

    quantity: str
    a: str
    b: str
    value: float
    stderr: float | None
    test: str
    p_value: float | None
    significant: bool | None


@dataclass(frozen=True)
class Comparison:
    """Two groups compared: the differences and the statements about flatness and consistency."""

    a: str
    b: str
    alpha: float
    differences: tuple[Difference, ...]
    flatter: str | None
    more_consistent: str | None
    consistency_p_value: float | None
    notes: tuple[str, ...]


@dataclass(frozen=True)
class TuningAdvice:
    """The tuning assistant's answer.

    Attributes
    ----------
    setting : recommended setting (estimate), or None when the data cannot tell (``reason`` says why).
    slope, intercept : C_L0 = intercept + slope·setting (estimates). target_lift_coefficient : the C_L0
        whose path is flattest over ``engagement_m`` within ±``band_m``.
    """

    setting: Estimate | None
    slope: Estimate
    intercept: Estimate
    target_lift_coefficient: float
    engagement_m: float
    reason: str


def summarize_group(
    name: str,
    fit: FlightFit,
    *,
    setting: float | None = None,
    muzzle_x_m: float | None = None,
    muzzle_height_m: float = DEFAULT_MUZZLE_HEIGHT_M,
    band_m: float = DEFAULT_BAND_M,
) -> GroupSummary:
    """Per-shot values and statistics of one group's joint fit (see the module docstring)."""
    if not name:
        raise ValueError("group name: must not be empty")
    if setting is not None and not math.isfinite(setting):
        raise ValueError(f"group {name!r}: setting must be a finite number, got {setting!r}")
    mz = muzzle_state(fit, muzzle_x_m=muzzle_x_m)
    flat = [
        forecast_shot(fit, shot=i, muzzle_height_m=muzzle_height_m, band_m=band_m, n_samples=0).flat_distance_m.value
        for i in range(len(fit.shots))
    ]  # fmt: skip
    values = {
        "speed_mps": np.array([s.speed_mps.value for s in mz.shots], dtype=float),
        "energy_j": np.array([s.energy_j.value for s in mz.shots], dtype=float),
        "lift_coefficient": np.array([s.lift_coefficient.value for s in fit.shots], dtype=float),
        "flat_distance_m": np.array([math.nan if f is None else f for f in flat], dtype=float),
    }
    stats = {q: group_stat(v[np.isfinite(v)]) for q, v in values.items() if np.isfinite(v).any()}
    labels = tuple(s.label for s in fit.shots)
    return GroupSummary(name, setting, labels, values, stats, fit.drag_coefficient, fit)


def welch(a: np.ndarray, b: np.ndarray) -> tuple[float, float | None, float | None]:
    """(mean b − mean a, its standard error, Welch's two-sided p value); None where n < 2 in a group."""
    a, b = np.asarray(a, dtype=float), np.asarray(b, dtype=float)
    diff = float(np.mean(b) - np.mean(a))
    if a.size < 2 or b.size < 2:
        return diff, None, None
    se = math.sqrt(np.var(a, ddof=1) / a.size + np.var(b, ddof=1) / b.size)
    if se == 0:
        return diff, 0.0, None
    p = float(scipy.stats.ttest_ind(b, a, equal_var=False).pvalue)
    return diff, se, p


def compare_groups(a: GroupSummary, b: GroupSummary, *, alpha: float = DEFAULT_ALPHA) -> Comparison:
    """Differences b − a of every per-shot quantity (Welch's t) and of the shared C_D (z test)."""
    if not 0 < alpha < 1:
        raise ValueError(f"alpha must lie strictly between 0 and 1, got {alpha!r}")
    diffs = []
    for q in QUANTITIES:
        va, vb = a.values[q], b.values[q]
        va, vb = va[np.isfinite(va)], vb[np.isfinite(vb)]
        if not (va.size and vb.size):
            continue
        value, se, p = welch(va, vb)
        diffs.append(Difference(q, a.name, b.name, value, se, "Welch t", p, None if p is None else p < alpha))
    ca, cb = a.drag_coefficient, b.drag_coefficient
    if ca.value is not None and cb.value is not None and ca.stderr and cb.stderr:
        se = math.hypot(ca.stderr, cb.stderr)
        value = cb.value - ca.value
        p = float(2 * scipy.stats.norm.sf(abs(value) / se))
        diffs.append(
            Difference("drag_coefficient", a.name, b.name, value, se, "z (fit standard errors)", p, p < alpha)
        )
    notes = []
    flatter = None
    flat = next((d for d in diffs if d.quantity == "flat_distance_m"), None)
    if flat is not None and flat.significant:
        flatter = b.name if flat.value > 0 else a.name
    elif flat is not None:
        notes.append(f"neither group is significantly flatter at the {alpha:g} level")
    more_consistent, p_cons = None, None
    sa, sb = a.values["speed_mps"], b.values["speed_mps"]
    if sa.size >= 2 and sb.size >= 2:
        p_cons = float(scipy.stats.levene(sa, sb, center="median").pvalue)
        if p_cons < alpha:
            more_consistent = a.name if np.std(sa, ddof=1) < np.std(sb, ddof=1) else b.name
        else:
            notes.append(f"the speed spreads do not differ significantly (Brown-Forsythe p = {p_cons:.2g})")
    return Comparison(a.name, b.name, alpha, tuple(diffs), flatter, more_consistent, p_cons, tuple(notes))


def flattest_lift_coefficient(
    fit: FlightFit,
    *,
    speed_mps: float,
    engagement_m: float = DEFAULT_ENGAGEMENT_M,
    muzzle_height_m: float = DEFAULT_MUZZLE_HEIGHT_M,
) -> float:
    """The C_L0 whose level path (fit's C_D and decay, given speed) deviates least from the line of sight
    over ``engagement_m`` (smallest maximum |deviation|)."""
    fm = fit.fitted_model()
    lay = fm.layout
    q = fm.spec.q_per_m
    balance = fm.spec.gravity_mps2 / (q * speed_mps**2)
    cls = CL_SCAN_FACTORS * balance
    thetas = np.tile(fm.theta, (cls.size, 1))
    thetas[:, lay.index(0, "lift_coefficient")] = cls
    thetas[:, lay.index(0, "speed_mps")] = speed_mps
    rows = launch_rows(fm, thetas, 0, muzzle_height_m=muzzle_height_m, elevation_rad=0.0)
    model, launch = flight_for(fm.spec, rows)
    traj = fly(model, launch, time_to_range(model, launch, engagement_m))
    t = np.arange(0.0, traj.t_s[-1], SCAN_SAMPLE_S)
    st = traj.sample(t)
    inside = st[:, :, 0] <= engagement_m
    worst = np.where(inside, np.abs(st[:, :, 1] - muzzle_height_m), 0.0).max(axis=1)
    return float(cls[int(np.argmin(worst))])


def tune(
    groups: Sequence[GroupSummary],
    *,
    engagement_m: float = DEFAULT_ENGAGEMENT_M,
    muzzle_height_m: float = DEFAULT_MUZZLE_HEIGHT_M,
) -> TuningAdvice:
    """Recommend a setting from three or more groups with numeric settings (see the module docstring)."""
    with_setting = [g for g in groups if g.setting is not None]
    if len(with_setting) < 3 or len({g.setting for g in with_setting}) < 3:
        raise ValueError("groups: tuning needs three or more groups with different numeric settings")
    s = np.concatenate([np.full(g.n_shots, float(g.setting)) for g in with_setting])  # type: ignore[arg-type]
    cl = np.concatenate([g.values["lift_coefficient"] for g in with_setting])
    res = scipy.stats.linregress(s, cl)
    b, a = float(res.slope), float(res.intercept)
    sb, sa = float(res.stderr), float(res.intercept_stderr)
    # cov(a, b) of ordinary least squares: −mean(s)·var(b)
    cov_ab = -float(np.mean(s)) * sb * sb
    speed = float(np.mean(np.concatenate([g.values["speed_mps"] for g in with_setting])))
    ref = min(with_setting, key=lambda g: abs(float(g.setting) - float(np.mean(s))))  # type: ignore[arg-type]
    target = flattest_lift_coefficient(
        ref.fit, speed_mps=speed, engagement_m=engagement_m, muzzle_height_m=muzzle_height_m
    )
    slope, intercept = Estimate(b, sb, sb, None), Estimate(a, sa, sa, None)
    if not (sb > 0 and abs(b) > SLOPE_MIN_SIGMAS * sb):
        why = f"the lift does not change significantly with the setting (slope {b:.3g} ± {sb:.2g} per unit)"
        return TuningAdvice(None, slope, intercept, target, engagement_m, f"the data cannot tell: {why}")
    best = (target - a) / b
    var = (sa * sa + best * best * sb * sb + 2 * best * cov_ab) / (b * b)
    lo, hi = float(np.min(s)), float(np.max(s))
    span = hi - lo
    if best < lo - EXTRAPOLATION_FRACTION * span or best > hi + EXTRAPOLATION_FRACTION * span:
        why = f"the flattest setting ({best:.3g}) lies far outside the settings tried ({lo:g} to {hi:g})"
        return TuningAdvice(None, slope, intercept, target, engagement_m, f"the data cannot tell: {why}")
    sd = math.sqrt(max(var, 0.0))
    return TuningAdvice(Estimate(best, sd, sd, None), slope, intercept, target, engagement_m, "")


__all__ = [
    "DEFAULT_ALPHA",
    "QUANTITIES",
    "Comparison",
    "Difference",
    "GroupSummary",
    "TuningAdvice",
    "compare_groups",
    "flattest_lift_coefficient",
    "summarize_group",
    "tune",
    "welch",
]
