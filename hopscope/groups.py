"""Groups of tracks compared (``hopscope compare``): each group fitted, summarised and judged, the groups'
differences tested, and the tuning assistant asked when the groups carry numeric settings.

Glue only: the fits are :func:`fitting.estimate.fit_shots`, the per-group statistics
:func:`fitting.compare.summarize_group`, the differences :func:`fitting.compare.compare_groups` (Welch's t
on per-shot values, a z test on the shared C_D, Brown-Forsythe on the speed spread), the tuning
:func:`fitting.compare.tune`, the hop verdict :func:`fitting.verdict.judge_group_hop_path` and the
effective range :func:`fitting.dispersion.effective_range`. This module parses the groups, runs those, and
writes ``compare.json``.

``compare.json`` (schema ``hopscope.compare/1``, SI)::

    schema, alpha, tests {"per_shot", "drag_coefficient", "spread"}, reference (the first group's name)
    convention {"muzzle_height_m", "band_m", "engagement_m", "muzzle_x_m"}
    bb {"mass_kg", "diameter_m", "mass_sigma_kg", "diameter_sigma_m", "tolerance_origin"}; air; model
    groups[]      {"name", "setting", "tracks", "n_shots", "labels", "converged",
                   "drag_coefficient" (estimate), "stats": {quantity: {"mean", "sd", "extreme_spread",
                   "min", "max", "n"}}, "values": {quantity: [per-shot values]},
                   "effective_range_m" (estimate or null), "effective_range_reason",
                   "hop_verdict": {"category", "exit_m", "probabilities", "adjuster", "detail"},
                   "energy_limit" (null without --limit-j), "warnings"}
    differences[] {"quantity", "unit", "a", "b", "value" (b − a), "stderr", "test", "p_value",
                   "significant"}
    comparisons[] {"a", "b", "flatter", "more_consistent", "consistency_p_value", "notes"}
    tuning        null, or {"setting" (estimate or null), "reason", "slope", "intercept",
                   "target_lift_coefficient", "engagement_m"}
    warnings, caution

Estimates are ``{"value", "stderr", ...}`` as in ``fit.json``.
"""

from __future__ import annotations

import json
import math
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from hopscope.fitting.compare import (
    DEFAULT_ALPHA,
    Comparison,
    GroupSummary,
    TuningAdvice,
    compare_groups,
    summarize_group,
    tune,
)
from hopscope.fitting.decisionfile import (
    COMPARE_SCHEMA,
    comparison_to_dict,
    energy_limit_to_dict,
    group_stat_to_dict,
)
from hopscope.fitting.dispersion import DEFAULT_BOOTSTRAP, DEFAULT_SHOTS, DispersionResult, effective_range
from hopscope.fitting.energy_limit import CAUTION
from hopscope.fitting.estimate import fit_shots
from hopscope.fitting.muzzle import GroupStat
from hopscope.fitting.verdict import PathVerdict, judge_group_hop_path
from hopscope.shared.parse import finite_or_none

from .decisions import DECISION_SEED, VERDICT_SAMPLES, Convention, FitDecisions, decide
from .inputs import shots_from_tracks
from .pipeline import FitSettings

SCHEMA = COMPARE_SCHEMA

#: The unit of each compared quantity (SI), for the file and the page.
UNITS = {
    "speed_mps": "m/s",
    "energy_j": "J",
    "lift_coefficient": "",
    "flat_distance_m": "m",
    "drag_coefficient": "",
}
#: What each quantity is called on the screen and the page.
NAMES = {
    "speed_mps": "muzzle speed",
    "energy_j": "muzzle energy",
    "lift_coefficient": "lift coefficient C_L0",
    "flat_distance_m": "flat distance",
    "drag_coefficient": "drag coefficient C_D",
}
TESTS = {
    "per_shot": "Welch's unequal-variance t test on the per-shot values, two-sided (Welch 1947)",
    "drag_coefficient": "z test on the groups' fitted C_D and their standard errors",
    "spread": "Brown-Forsythe test of equal spread of muzzle speed (Brown & Forsythe 1974)",
}


@dataclass(frozen=True)
class GroupSpec:
    """One ``--group NAME[=SETTING] TRACK.csv ...``: its name, numeric setting (or None) and tracks."""

    name: str
    setting: float | None
    tracks: tuple[Path, ...]


def parse_group(values: Sequence[str]) -> GroupSpec:
    """``[NAME[=SETTING], TRACK, ...]`` as argparse collects one ``--group``.

    Raises
    ------
    ValueError
        No track, an empty name, or a SETTING that is not a finite number (the message names the group).
    """
    head, *tracks = list(values)
    name, sep, setting_text = head.partition("=")
    name = name.strip()
    if not name:
        raise ValueError(f"--group {head}: the group needs a name (NAME or NAME=SETTING)")
    if not tracks:
        raise ValueError(f"--group {head}: give at least one track file after the name")
    setting = None
    if sep:
        try:
            setting = float(setting_text)
        except ValueError:
            setting = math.nan
        if not math.isfinite(setting):
            raise ValueError(
                f"--group {head}: SETTING must be a number (clicks or turns of the adjuster), got {setting_text!r}"
            )
    return GroupSpec(name, setting, tuple(Path(t) for t in tracks))


def check_groups(specs: Sequence[GroupSpec]) -> None:
    """At least two groups, unique names, no track in two groups (one-line errors naming them)."""
    if len(specs) < 2:
        raise ValueError(f"--group: compare needs at least two groups, got {len(specs)}")
    names: set[str] = set()
    owner: dict[Path, str] = {}
    for g in specs:
        if g.name in names:
            raise ValueError(f"--group {g.name}: two groups have this name")
        names.add(g.name)
        for t in g.tracks:
            if not t.is_file():  # before the first group's fit, so bad input costs nothing
                raise FileNotFoundError(f"{t}: no such track file (group {g.name!r})")
            key = t.resolve()
            if key in owner:
                raise ValueError(f"{t}: given in group {owner[key]!r} and in group {g.name!r}")
            owner[key] = g.name


@dataclass(frozen=True, eq=False)
class GroupResult:
    """One group fitted and judged.

    Attributes
    ----------
    spec : the group as given. decisions : its joint fit with the BB tolerance, muzzle state and energy
    verdict. summary : per-shot values and statistics. verdict, shot_verdicts : the hop verdict from the
    predicted path (group and per shot). spread : effective range (None for one shot). warnings : the
    fit's and the range's.
    """

    spec: GroupSpec
    decisions: FitDecisions
    summary: GroupSummary
    verdict: PathVerdict
    shot_verdicts: tuple[PathVerdict, ...]
    spread: DispersionResult | None
    warnings: tuple[str, ...]


def group_stats(r: GroupResult) -> dict[str, GroupStat]:
    """The group's statistics per quantity; muzzle speed and energy from its muzzle state, whose mean
    carries the shared errors too (calibration, and the BB mass for the energy). The differences use the
    per-shot values only: one BB and one rig are common to every group and cancel."""
    stats = dict(r.summary.stats)
    m = r.decisions.muzzle
    if m is not None:
        stats["speed_mps"], stats["energy_j"] = m.speed_mps, m.energy_j
    return stats


@dataclass(frozen=True, eq=False)
class CompareOutcome:
    """Every group, each group against the first (the reference), and the tuning advice."""

    groups: tuple[GroupResult, ...]
    comparisons: tuple[Comparison, ...]
    tuning: TuningAdvice | None
    tuning_note: str
    convention: Convention
    alpha: float
    settings: FitSettings
    warnings: tuple[str, ...]

    @property
    def converged(self) -> bool:
        return all(g.decisions.fit.converged for g in self.groups)


def compare_tracks(
    specs: Sequence[GroupSpec],
    settings: FitSettings,
    *,
    convention: Convention | None = None,
    alpha: float = DEFAULT_ALPHA,
    range_shots: int = DEFAULT_SHOTS,
    range_bootstrap: int = DEFAULT_BOOTSTRAP,
    rng: int = DECISION_SEED,
) -> CompareOutcome:
    """Fit each group of tracks jointly, summarise and judge it, and compare every group with the first.

    Raises
    ------
    OSError, ValueError
        A missing or malformed track (named), bad options, too few points to fit.
    """
    check_groups(specs)
    if not 0 < alpha < 1:
        raise ValueError(f"--alpha: expected a level strictly between 0 and 1, got {alpha:g}")
    f, c = settings, (Convention() if convention is None else convention)
    results = []
    for i, g in enumerate(specs):
        tracks = shots_from_tracks(g.tracks)
        fit = fit_shots(
            list(tracks.shots), bb=f.bb, air=f.air, drag=f.drag, lift=f.lift, decay=f.decay, chrono=f.chrono,
            loss=f.loss,
        )  # fmt: skip
        d = decide(fit, tolerance=f.tolerance, muzzle_x_m=f.muzzle_x_m, limit_j=f.limit_j)
        summ = summarize_group(
            g.name, d.fit, setting=g.setting, muzzle_x_m=f.muzzle_x_m, muzzle_height_m=c.muzzle_height_m,
            band_m=c.band_m,
        )  # fmt: skip
        verdict, per_shot = judge_group_hop_path(
            d.fit, engagement_m=c.engagement_m, band_m=c.band_m, muzzle_height_m=c.muzzle_height_m,
            n_samples=VERDICT_SAMPLES, rng=rng + i,
        )  # fmt: skip
        spread = None
        if len(d.fit.shots) >= 2:
            spread = effective_range(
                d.fit, n_shots=range_shots, n_bootstrap=range_bootstrap, muzzle_height_m=c.muzzle_height_m,
                rng=rng + i,
            )  # fmt: skip
        warns = [*tracks.warnings, *d.fit.warnings, *(() if spread is None else spread.warnings)]
        if not d.fit.converged:
            warns.insert(0, f"the fit did not converge: {d.fit.reason}; this group's numbers are unreliable")
        warns = [f"group {g.name!r}: {w}" for w in dict.fromkeys(warns)]
        results.append(GroupResult(g, d, summ, verdict, per_shot, spread, tuple(warns)))
    ref = results[0]
    comparisons = tuple(compare_groups(ref.summary, r.summary, alpha=alpha) for r in results[1:])
    tuning, note = None, ""
    with_setting = [r for r in results if r.spec.setting is not None]
    if len({r.spec.setting for r in with_setting}) >= 3:
        tuning = tune(
            [r.summary for r in with_setting], engagement_m=c.engagement_m, muzzle_height_m=c.muzzle_height_m
        )
    elif with_setting:
        note = (
            "the tuning assistant needs three or more groups with different numeric settings (NAME=SETTING)"
        )
    warnings = tuple(w for r in results for w in r.warnings)
    return CompareOutcome(tuple(results), comparisons, tuning, note, c, alpha, settings, warnings)


# ---------------------------------------------------------------------------------------------- file


def _verdict_dict(v: PathVerdict) -> dict[str, Any]:
    return {
        "category": v.category,
        "exit_m": finite_or_none(v.exit_m),
        "probabilities": dict(v.probabilities),
        "adjuster": v.adjuster,
        "detail": v.detail,
    }


def _group_extra(r: GroupResult) -> dict[str, Any]:
    """What a group adds to :func:`fitting.decisionfile.comparison_to_dict`'s entry."""
    sp = r.spread
    er = None
    if sp is not None and sp.effective_range_m is not None:
        er = {"value": sp.effective_range_m, "stderr": finite_or_none(sp.effective_range_stderr_m)}
    lim = r.decisions.energy_limit
    return {
        "tracks": [str(t) for t in r.spec.tracks],
        "converged": r.decisions.fit.converged,
        "stats": {q: group_stat_to_dict(st) for q, st in group_stats(r).items()},
        "effective_range_m": er,
        "effective_range_reason": "" if sp is None else sp.reason,
        "hop_verdict": _verdict_dict(r.verdict),
        "shot_verdicts": [{"label": v.label, **_verdict_dict(v)} for v in r.shot_verdicts],
        "energy_limit": None if lim is None else energy_limit_to_dict(lim),
        "warnings": list(r.warnings),
    }


def compare_to_dict(o: CompareOutcome) -> dict[str, Any]:
    """The ``compare.json`` object: :func:`fitting.decisionfile.comparison_to_dict` plus the app's
    blocks (see the module docstring)."""
    doc = comparison_to_dict([r.summary for r in o.groups], list(o.comparisons), o.tuning)
    doc["alpha"] = o.alpha
    for entry, r in zip(doc["groups"], o.groups, strict=True):
        entry.update(_group_extra(r))
    for d in doc["differences"]:
        d["unit"] = UNITS.get(d["quantity"], "")
    bb, air = o.settings.bb, o.settings.air
    tol = o.groups[0].decisions.fit.bb_tolerance
    c = o.convention
    doc.update(
        tests=dict(TESTS),
        reference=o.groups[0].spec.name,
        convention={
            "muzzle_height_m": c.muzzle_height_m,
            "band_m": c.band_m,
            "engagement_m": c.engagement_m,
            "muzzle_x_m": o.settings.muzzle_x_m,
        },
        bb={
            "mass_kg": bb.mass_kg,
            "diameter_m": bb.diameter_m,
            "mass_sigma_kg": None if tol is None else tol.mass_sigma_kg,
            "diameter_sigma_m": None if tol is None else tol.diameter_sigma_m,
            "tolerance_origin": None if tol is None else tol.origin,
        },
        air={
            "density_kgm3": air.density_kgm3,
            "temperature_k": air.temperature_k,
            "pressure_pa": air.pressure_pa,
        },
        model={"drag": o.settings.drag, "lift": o.settings.lift, "decay": o.settings.decay},
        tuning_note=o.tuning_note,
        warnings=list(o.warnings),
        caution=CAUTION,
    )
    return doc


def compare_to_json(o: CompareOutcome) -> str:
    """``compare.json`` text (non-finite numbers are null)."""
    return json.dumps(compare_to_dict(o), indent=2, ensure_ascii=False, allow_nan=False) + "\n"


__all__ = [
    "NAMES",
    "SCHEMA",
    "TESTS",
    "UNITS",
    "CompareOutcome",
    "GroupResult",
    "GroupSpec",
    "check_groups",
    "group_stats",
    "compare_to_dict",
    "compare_to_json",
    "compare_tracks",
    "parse_group",
]
