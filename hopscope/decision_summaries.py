"""Screen rows for the decisions: BB tolerance share, muzzle state per shot and group, the energy verdict,
the hop verdict read off the predicted path, and the group comparison.

Presenters only (SI inside, user units here): speeds in m/s with fps beside them, energies in J, masses
in g, diameters in mm. Every function returns rows ``(label, value)`` for :func:`hopscope.console.summary`.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import TYPE_CHECKING, Any

from hopscope.console import summary
from hopscope.shared.units import kg_to_grams, m_to_mm, mps_to_fps
from hopscope.summaries import estimate_text, measured_spin_rows

if TYPE_CHECKING:  # types only
    from hopscope.decisions import FileDecisions, FitDecisions
    from hopscope.fitting.bb import BB, BBTolerance
    from hopscope.fitting.energy_limit import EnergyLimit, LimitVerdict
    from hopscope.fitting.muzzle import GroupStat, MuzzleState
    from hopscope.fitting.results import Estimate, FlightFit
    from hopscope.fitting.verdict import PathVerdict
    from hopscope.groups import CompareOutcome

Rows = list[tuple[str, str]]

#: The energy verdict in words.
LIMIT_WORDS = {
    "below": "below the limit",
    "within": "within the uncertainty of the limit",
    "above": "above the limit",
}


def pm(e: Estimate | None, fmt: str = ".4g", scale: float = 1.0) -> str:
    """``value ± stderr`` (:func:`hopscope.summaries.estimate_text` with the format first)."""
    return estimate_text(e, scale, fmt)


def bb_share_text(e: Estimate | None) -> str:
    """``(BB tolerance 40 % of variance)`` or empty."""
    share = None if e is None else e.bb_share
    return "" if share is None else f" (BB mass/diameter tolerance {100 * share:.0f} % of variance)"


def tolerance_text(tol: BBTolerance, bb: BB) -> str:
    """The BB and its tolerance in user units, with where the tolerance came from."""
    return (
        f"{kg_to_grams(bb.mass_kg):.4g} ± {kg_to_grams(tol.mass_sigma_kg):.2g} g, "
        f"{m_to_mm(bb.diameter_m):.4g} ± {m_to_mm(tol.diameter_sigma_m):.2g} mm ({tol.origin})"
    )


def tolerance_rows(fit: FlightFit) -> Rows:
    """The BB tolerance and its share of the error bars it affects (C_D, each shot's C_L0)."""
    tol = fit.bb_tolerance
    if tol is None:
        return []
    rows = [("BB (1σ tolerance)", tolerance_text(tol, fit.spec.bb))]
    rows.append(("  C_D", f"{pm(fit.drag_coefficient)}{bb_share_text(fit.drag_coefficient)}"))
    for s in fit.shots:
        rows.append((f"  C_L0 {s.label}", f"{pm(s.lift_coefficient)}{bb_share_text(s.lift_coefficient)}"))
    return rows


#: What a group of one shot shows instead of its SD and extreme spread (they need two shots).
ONE_SHOT_TEXT = "one shot: no SD or extreme spread"


def _stat_text(g: GroupStat, unit: str, fmt: str) -> str:
    if g.n < 2 or g.sd is None:
        return f"mean {pm(g.mean, fmt)} {unit} ({ONE_SHOT_TEXT})"
    return f"mean {pm(g.mean, fmt)} {unit}, SD {g.sd:{fmt}}, extreme spread {g.extreme_spread:{fmt}} {unit}"


def muzzle_rows(m: MuzzleState) -> Rows:
    """Speed and energy per shot and of the group (mean, SD, extreme spread), where they were taken."""
    where = "at each shot's first tracked point" if m.x_m is None else f"at the muzzle, x = {m.x_m:g} m"
    rows: Rows = [("muzzle state", f"{where}; {len(m.shots)} shot{'s' if len(m.shots) != 1 else ''}")]
    for s in m.shots:
        v = s.speed_mps
        fps = "" if v.value is None else f" ({mps_to_fps(v.value):.0f} fps)"
        rows.append(
            (f"  {s.label}", f"{pm(v, '.4g')} m/s{fps}, {pm(s.energy_j, '.3f')} J{bb_share_text(s.energy_j)}")
        )
    rows.append(("  group speed", _stat_text(m.speed_mps, "m/s", ".4g")))
    rows.append(("  group energy", _stat_text(m.energy_j, "J", ".3f") + bb_share_text(m.energy_j.mean)))
    return rows


def _limit_text(v: LimitVerdict) -> str:
    z = "" if v.margin_sigma is None else f" = {v.margin_sigma:+.1f} σ"
    return (
        f"{LIMIT_WORDS[v.verdict]}: {pm(v.energy_j, '.3f')} J, margin {pm(v.margin_j, '+.3f')} J{z}"
        f"{bb_share_text(v.margin_j)}"
    )


def limit_rows(e: EnergyLimit) -> Rows:
    """The energy verdict on the highest-energy shot and on the mean, with the caution beside it."""
    return [
        ("energy limit", f"{e.limit_j:g} J (verdict at {e.coverage_factor:g}σ)"),
        (f"  highest-energy shot {e.highest.label}", _limit_text(e.highest)),
        ("  group mean", _limit_text(e.mean)),
        ("  caution", e.caution),
    ]


def verdict_text(v: PathVerdict) -> str:
    """The hop verdict in one line, with which way to turn the adjuster."""
    where = "" if v.exit_m is None else f", leaves the band at {v.exit_m:.1f} m"
    p = max(v.probabilities.values()) if v.probabilities else 0.0
    head = v.category if v.category != "undetermined" else "undetermined"
    return f"{head}{where} (probability {p:.0%}); {v.adjuster}"


def verdict_rows(group: PathVerdict, shots: tuple[PathVerdict, ...]) -> Rows:
    """Group and per-shot hop verdicts, with the convention they were judged by."""
    rows = [
        (
            "hop verdict",
            f"path flown level from {group.muzzle_height_m:g} m, within ±{group.band_m:g} m of the line of "
            f"sight to {group.engagement_m:g} m",
        ),
        ("  group (mean shot)", verdict_text(group)),
    ]
    rows += [(f"  {v.label}", verdict_text(v)) for v in shots]
    return rows


def decisions_table(d: FitDecisions, title: str = "hopscope decisions") -> str:
    """The fit's decisions on one screen: BB tolerance share, muzzle state, energy verdict."""
    rows = tolerance_rows(d.fit)
    if d.muzzle is not None:
        rows += muzzle_rows(d.muzzle)
    if d.energy_limit is not None:
        rows += limit_rows(d.energy_limit)
    return summary(title, rows)


def spin_and_hop_table(
    doc: Mapping[str, Any], decided: FileDecisions | None, title: str = "hopscope spin and hop verdict"
) -> str | None:
    """After a fit (``hopscope fit``, ``run``): one row per shot with a measured spin and the shared decay
    (:func:`hopscope.summaries.measured_spin_rows` of the written ``fit.json``), then the hop verdict read
    off the predicted paths for the group and each shot, with which way to turn the adjuster
    (:func:`hopscope.decisions.decide_file`; None for a fit that did not converge). None when there is
    nothing to show."""
    rows = measured_spin_rows(doc)
    if decided is not None:
        rows += verdict_rows(decided.group_verdict, decided.shot_verdicts)
    return summary(title, rows) if rows else None


def _quantity_value(q: str, v: float | None, unit: str) -> str:
    if v is None:
        return "?"
    fmt = {"speed_mps": ".3g", "energy_j": ".3f", "lift_coefficient": ".3g", "flat_distance_m": ".3g"}.get(
        q, ".3g"
    )
    return f"{v:{fmt}}{' ' + unit if unit else ''}"


def compare_rows(o: CompareOutcome) -> Rows:
    """``hopscope compare``'s summary: each group, each difference with its test, flatter / more
    consistent, the tuning advice."""
    from hopscope.groups import NAMES, UNITS, group_stats

    rows: Rows = []
    for r in o.groups:
        s = r.summary
        setting = "" if s.setting is None else f" (setting {s.setting:g})"
        rows.append((f"group {s.name}{setting}", f"{s.n_shots} shot{'s' if s.n_shots != 1 else ''}"))
        for q in ("speed_mps", "energy_j", "lift_coefficient", "flat_distance_m"):
            st = group_stats(r).get(q)
            if st is not None:
                mean = f"mean {pm(st.mean, '.4g')}{' ' + UNITS[q] if UNITS[q] else ''}"
                if st.n < 2 or st.sd is None:
                    rows.append((f"  {NAMES[q]}", f"{mean} ({ONE_SHOT_TEXT})"))
                    continue
                sd = _quantity_value(q, st.sd, UNITS[q])
                spread = _quantity_value(q, st.extreme_spread, UNITS[q])
                rows.append((f"  {NAMES[q]}", f"{mean}, SD {sd}, extreme spread {spread}"))
        rows.append(("  C_D", pm(s.drag_coefficient)))
        sp = r.spread
        if sp is None:
            rows.append(("  effective range", "needs two or more shots"))
        elif sp.effective_range_m is None:
            rows.append(("  effective range", f"not determined: {sp.reason}"))
        else:
            err = "?" if sp.effective_range_stderr_m is None else f"{sp.effective_range_stderr_m:.2g}"
            rows.append(("  effective range", f"{sp.effective_range_m:.1f} ± {err} m"))
        rows.append(("  hop verdict", verdict_text(r.verdict)))
        lim = r.decisions.energy_limit
        if lim is not None:
            rows.append(
                ("  energy limit", f"{lim.limit_j:g} J: {_limit_text(lim.highest)} (highest-energy shot)")
            )
    for cmp in o.comparisons:
        rows.append((f"{cmp.b} − {cmp.a}", f"each difference b − a, significant when p < {cmp.alpha:g}"))
        for d in cmp.differences:
            se = "?" if d.stderr is None else f"{d.stderr:.2g}"
            p = "p ?" if d.p_value is None else f"p = {d.p_value:.2g}"
            verdict = {True: "significant", False: "not significant", None: "untested"}[d.significant]
            unit = UNITS.get(d.quantity, "")
            rows.append(
                (f"  {NAMES.get(d.quantity, d.quantity)}", f"{d.value:+.4g} ± {se}{' ' + unit if unit else ''} "
                 f"({d.test}, {p}): {verdict}")
            )  # fmt: skip
        rows.append(("  flatter", cmp.flatter or "neither (no significant difference in flat distance)"))
        rows.append(
            (
                "  more consistent",
                cmp.more_consistent or "neither (speed spreads do not differ significantly)",
            )
        )
    if o.tuning is not None:
        t = o.tuning
        if t.setting is None:
            rows.append(("tuning", t.reason))
        else:
            rows.append(
                ("tuning", f"recommended setting {pm(t.setting, '.3g')} (flattest path over {t.engagement_m:g} m, "
                 f"C_L0 {t.target_lift_coefficient:.3g})")
            )  # fmt: skip
    elif o.tuning_note:
        rows.append(("tuning", o.tuning_note))
    return rows


__all__ = [
    "compare_rows",
    "decisions_table",
    "LIMIT_WORDS",
    "bb_share_text",
    "limit_rows",
    "muzzle_rows",
    "pm",
    "tolerance_rows",
    "tolerance_text",
    "verdict_rows",
    "verdict_text",
]
