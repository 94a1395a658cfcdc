"""The comparison page (``hopscope compare --report``): groups, differences with their tests, tuning.

Rendered from an autoescaping Jinja2 template (``compare.html``) in the report's style (``report.css``),
one self-contained file. All numbers come from :mod:`hopscope.groups` (which takes them from
:mod:`fitting.compare`, :mod:`fitting.verdict` and :mod:`fitting.dispersion`); units are converted here for
display only.
"""

from __future__ import annotations

import os
from typing import Any

from hopscope.shared.fileio import write_text_atomic
from hopscope.shared.units import mps_to_fps

from ..decision_summaries import LIMIT_WORDS, pm, verdict_text
from ..groups import NAMES, TESTS, UNITS, CompareOutcome, group_stats
from .build import render_page


def _fmt(q: str, v: float | None) -> str:
    if v is None:
        return "?"
    return f"{v:.3f}" if q == "energy_j" else f"{v:.4g}"


def _group_rows(o: CompareOutcome) -> list[dict[str, Any]]:
    out = []
    for r in o.groups:
        s = r.summary
        stats = []
        for q in ("speed_mps", "energy_j", "lift_coefficient", "flat_distance_m"):
            st = group_stats(r).get(q)
            if st is None:
                continue
            extra = ""
            if q == "speed_mps" and st.mean.value is not None:
                extra = f" ({mps_to_fps(st.mean.value):.0f} fps)"
            stats.append(
                {
                    "name": NAMES[q],
                    "mean": pm(st.mean, ".4g") + extra,
                    "sd": _fmt(q, st.sd),
                    "es": _fmt(q, st.extreme_spread),
                    "unit": UNITS[q],
                }
            )
        sp = r.spread
        if sp is None:
            er = "needs two or more shots"
        elif sp.effective_range_m is None:
            er = f"not determined: {sp.reason}"
        else:
            err = "?" if sp.effective_range_stderr_m is None else f"{sp.effective_range_stderr_m:.2g}"
            er = f"{sp.effective_range_m:.1f} ± {err} m"
        lim = r.decisions.energy_limit
        out.append(
            {
                "name": s.name,
                "setting": "" if s.setting is None else f"{s.setting:g}",
                "n_shots": s.n_shots,
                "stats": stats,
                "drag": pm(s.drag_coefficient),
                "range": er,
                "verdict": r.verdict.headline,
                "verdict_detail": verdict_text(r.verdict),
                "shot_verdicts": [(v.label, verdict_text(v)) for v in r.shot_verdicts],
                "limit": None
                if lim is None
                else f"{LIMIT_WORDS[lim.verdict]} ({lim.limit_j:g} J; highest-energy shot {pm(lim.highest.energy_j, '.3f')} J, "
                f"margin {pm(lim.margin_j, '+.3f')} J)",
                "converged": r.decisions.fit.converged,
            }
        )
    return out


def _difference_rows(o: CompareOutcome) -> list[dict[str, str]]:
    rows = []
    for cmp in o.comparisons:
        for d in cmp.differences:
            unit = UNITS.get(d.quantity, "")
            rows.append(
                {
                    "pair": f"{d.b} − {d.a}",
                    "quantity": NAMES.get(d.quantity, d.quantity),
                    "value": f"{d.value:+.4g}",
                    "stderr": "?" if d.stderr is None else f"{d.stderr:.2g}",
                    "unit": unit,
                    "test": d.test,
                    "p": "?" if d.p_value is None else f"{d.p_value:.2g}",
                    "significant": {True: "yes", False: "no", None: "untested"}[d.significant],
                }
            )
    return rows


def _comparison_rows(o: CompareOutcome) -> list[tuple[str, str]]:
    rows = []
    for cmp in o.comparisons:
        flat = cmp.flatter or "neither (no significant difference in flat distance)"
        cons = cmp.more_consistent or "neither (the speed spreads do not differ significantly)"
        rows.append((f"{cmp.b} against {cmp.a}: flatter", flat))
        rows.append((f"{cmp.b} against {cmp.a}: more consistent", cons))
    return rows


def _tuning(o: CompareOutcome) -> str | None:
    t = o.tuning
    if t is None:
        return o.tuning_note or None
    line = f"C_L0 = {pm(t.intercept, '.3g')} + {pm(t.slope, '.3g')} × setting"
    if t.setting is None:
        return f"{t.reason} ({line})"
    return (
        f"Recommended setting {pm(t.setting, '.3g')}: the flattest path over {t.engagement_m:g} m needs "
        f"C_L0 ≈ {t.target_lift_coefficient:.3g} ({line})."
    )


def render_compare_page(o: CompareOutcome, *, title: str | None = None) -> str:
    """The comparison page as one HTML string."""
    c = o.convention
    convention = (
        f"paths flown level from {c.muzzle_height_m:g} m above level ground, judged within ±{c.band_m:g} m "
        f"of the line of sight to {c.engagement_m:g} m (our convention, README)"
    )
    return render_page(
        "compare.html",
        title=title or " vs ".join(r.spec.name for r in o.groups),
        groups=_group_rows(o),
        differences=_difference_rows(o),
        comparisons=_comparison_rows(o),
        tuning=_tuning(o),
        alpha=f"{o.alpha:g}",
        tests=list(TESTS.values()),
        reference=o.groups[0].spec.name,
        convention=convention,
        warnings=list(o.warnings),
    )


def write_compare_page(out: str | os.PathLike[str], o: CompareOutcome, *, title: str | None = None) -> None:
    """Render and write the comparison page atomically."""
    write_text_atomic(out, render_compare_page(o, title=title))


__all__ = ["render_compare_page", "write_compare_page"]
