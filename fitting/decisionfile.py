"""The decision blocks of ``fit.json``: muzzle state per shot and per group, and the energy limit.

Added to the fit's dict (:func:`fitting.fitfile.fit_to_dict`) by :func:`add_decisions`::

    shots[i].muzzle  {"x_m" (null: at the first tracked point), "speed_mps", "energy_j"}
    group            {"n_shots", "muzzle_x_m", "speed_mps", "energy_j"}, each quantity
                     {"mean" (estimate), "sd", "extreme_spread", "min", "max"}
    energy_limit     {"limit_j", "verdict" ("below" | "within" | "above", on the highest-energy shot),
                      "margin_j" (estimate, limit − energy), "margin_sigma", "basis", "shot",
                      "energy_j" (estimate), "coverage_factor", "caution",
                      "mean": {"verdict", "margin_j", "margin_sigma", "energy_j", "basis"}}

Estimates are ``{"value", "stderr", "stderr_noise", "stderr_calibration", "calibration_share",
"stderr_bb", "bb_share"}`` (SI: m, m/s, J).

``compare.json`` (schema ``hopscope.compare/1``, :func:`comparison_to_dict`)::

    groups[]      {"name", "setting" (number or null), "n_shots", "labels",
                   "values": {quantity: [per-shot values]}, "stats": {quantity: group statistics},
                   "drag_coefficient" (estimate)}
    differences[] {"quantity", "a", "b", "value" (b − a), "stderr", "test", "p_value", "significant"}
    alpha, flatter, more_consistent, consistency_p_value, notes
    tuning        null or {"setting" (estimate or null), "slope", "intercept" (estimates),
                   "target_lift_coefficient", "engagement_m", "reason"}
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from hopscope.shared.parse import finite_or_none

from .compare import Comparison, GroupSummary, TuningAdvice
from .energy_limit import EnergyLimit, LimitVerdict
from .fitfile import estimate_to_dict
from .muzzle import GroupStat, MuzzleState


def group_stat_to_dict(g: GroupStat) -> dict[str, Any]:
    return {
        "mean": estimate_to_dict(g.mean),
        "sd": finite_or_none(g.sd),
        "extreme_spread": finite_or_none(g.extreme_spread),
        "min": finite_or_none(g.minimum),
        "max": finite_or_none(g.maximum),
        "n": g.n,
    }


def _verdict_dict(v: LimitVerdict) -> dict[str, Any]:
    return {
        "verdict": v.verdict,
        "basis": v.basis,
        "margin_j": estimate_to_dict(v.margin_j),
        "margin_sigma": finite_or_none(v.margin_sigma),
        "energy_j": estimate_to_dict(v.energy_j),
    }


def energy_limit_to_dict(e: EnergyLimit) -> dict[str, Any]:
    """The ``energy_limit`` block."""
    out = {"limit_j": e.limit_j, **_verdict_dict(e.highest), "shot": e.highest.label}
    out.update(coverage_factor=e.coverage_factor, caution=e.caution, mean=_verdict_dict(e.mean))
    return out


def add_decisions(
    doc: Mapping[str, Any], *, muzzle: MuzzleState | None = None, energy_limit: EnergyLimit | None = None
) -> dict[str, Any]:
    """A copy of a fit's dict with ``shots[i].muzzle``, ``group`` and ``energy_limit`` filled in.

    Raises
    ------
    ValueError
        The muzzle state's shots do not match the fit's (labels, in order).
    """
    out = dict(doc)
    if muzzle is not None:
        shots = [dict(s) for s in doc["shots"]]
        labels = [s["label"] for s in shots]
        if labels != [m.label for m in muzzle.shots]:
            raise ValueError("muzzle: its shots are not the fit's shots")
        for s, m in zip(shots, muzzle.shots, strict=True):
            s["muzzle"] = {
                "x_m": finite_or_none(muzzle.x_m),
                "speed_mps": estimate_to_dict(m.speed_mps),
                "energy_j": estimate_to_dict(m.energy_j),
            }
        out["shots"] = shots
        out["group"] = {
            "n_shots": len(muzzle.shots),
            "muzzle_x_m": finite_or_none(muzzle.x_m),
            "speed_mps": group_stat_to_dict(muzzle.speed_mps),
            "energy_j": group_stat_to_dict(muzzle.energy_j),
            "notes": list(muzzle.notes),
        }
    if energy_limit is not None:
        out["energy_limit"] = energy_limit_to_dict(energy_limit)
    return out


COMPARE_SCHEMA = "hopscope.compare/1"


def comparison_to_dict(
    groups: list[GroupSummary], comparisons: list[Comparison], tuning: TuningAdvice | None = None
) -> dict[str, Any]:
    """The ``compare.json`` document (see the module docstring); ``comparisons`` are pairwise."""
    alpha = comparisons[0].alpha if comparisons else None
    return {
        "schema": COMPARE_SCHEMA,
        "alpha": alpha,
        "groups": [
            {
                "name": g.name,
                "setting": finite_or_none(g.setting),
                "n_shots": g.n_shots,
                "labels": list(g.labels),
                "values": {q: [finite_or_none(v) for v in vals] for q, vals in g.values.items()},
                "stats": {q: group_stat_to_dict(st) for q, st in g.stats.items()},
                "drag_coefficient": estimate_to_dict(g.drag_coefficient),
            }
            for g in groups
        ],
        "differences": [
            {
                "quantity": d.quantity,
                "a": d.a,
                "b": d.b,
                "value": finite_or_none(d.value),
                "stderr": finite_or_none(d.stderr),
                "test": d.test,
                "p_value": finite_or_none(d.p_value),
                "significant": d.significant,
            }
            for c in comparisons
            for d in c.differences
        ],
        "comparisons": [
            {
                "a": c.a,
                "b": c.b,
                "flatter": c.flatter,
                "more_consistent": c.more_consistent,
                "consistency_p_value": finite_or_none(c.consistency_p_value),
                "notes": list(c.notes),
            }
            for c in comparisons
        ],
        "tuning": None
        if tuning is None
        else {
            "setting": estimate_to_dict(tuning.setting),
            "slope": estimate_to_dict(tuning.slope),
            "intercept": estimate_to_dict(tuning.intercept),
            "target_lift_coefficient": finite_or_none(tuning.target_lift_coefficient),
            "engagement_m": tuning.engagement_m,
            "reason": tuning.reason,
        },
    }


__all__ = [
    "COMPARE_SCHEMA",
    "add_decisions",
    "comparison_to_dict",
    "energy_limit_to_dict",
    "group_stat_to_dict",
]
