"""The report's decision sections: the group's cards, the energy verdict, the hop verdict from the
predicted path, the prediction table and the BB tolerance's share.

Numbers come from :func:`hopscope.decisions.decide_file` (which takes them from :mod:`fitting.muzzle`,
:mod:`fitting.energy_limit`, :mod:`fitting.verdict`, :mod:`fitting.forecast`) and
:func:`fitting.plausibility.plausibility_warnings`; units are converted here for display only. The
template partial is ``decisions.html``.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

from hopscope.fitting.muzzle import GroupStat, group_stat
from hopscope.fitting.plausibility import plausibility_warnings
from hopscope.fitting.results import Estimate
from hopscope.shared.units import kg_to_grams, m_to_mm, mps_to_fps

from ..decision_summaries import LIMIT_WORDS, pm, verdict_text
from ..decisions import FileDecisions, decide_file, finite, tolerance_of_file

if TYPE_CHECKING:
    from hopscope.fitting.fitfile import FitFile

    from .build import ReportInputs

#: Cards of the general report that show the first shot only; the group's cards replace them.
FIRST_SHOT_CARDS = ("speed at first point", "energy at first point", "lift coefficient C_L0", "hop verdict")


@dataclass(frozen=True, eq=False)
class DecisionSection:
    """What the report shows of the decisions.

    Attributes
    ----------
    decisions : the decisions on the fit file (None when the fit did not converge).
    cards : the group's key-figure cards (they replace :data:`FIRST_SHOT_CARDS`).
    context : the ``decisions.html`` partial's variables (``decisions``).
    warnings : plausibility warnings not already in the fit file.
    """

    decisions: FileDecisions | None
    cards: list[dict[str, str]]
    context: dict[str, Any] | None
    warnings: tuple[str, ...] = field(default=())

    def merge_cards(self, general: list[dict[str, str]]) -> list[dict[str, str]]:
        """The group's cards first, then the general cards that do not show the first shot only."""
        if not self.cards:
            return general
        return self.cards + [c for c in general if c["label"] not in FIRST_SHOT_CARDS]


def _stat_detail(g: GroupStat, unit: str, fmt: str) -> str:
    se = "± ?" if g.mean.stderr is None else f"± {g.mean.stderr:{fmt}}"
    if g.n < 2 or g.sd is None:
        return f"{se} {unit} · one shot"
    return f"{se} {unit} · SD {g.sd:{fmt}} · extreme spread {g.extreme_spread:{fmt}} {unit}"


def _values(est: list[Estimate]) -> list[float]:
    return [float(e.value) for e in est if e.value is not None and finite(e.value)]


def _cards(fit: FitFile, d: FileDecisions) -> list[dict[str, str]]:
    m = d.muzzle
    n = len(m.shots)
    who = f"group of {n} shot{'s' if n != 1 else ''}"
    where = "at the muzzle" if m.x_m is not None else "at first tracked point"
    v, e = m.speed_mps, m.energy_j
    cards = []
    if v.mean.value is not None:
        cards.append(
            {
                "label": f"speed {where} ({who}, mean)",
                "value": f"{v.mean.value:.1f} m/s",
                "detail": f"{_stat_detail(v, 'm/s', '.2g')} · {mps_to_fps(v.mean.value):.0f} fps",
            }
        )
    if e.mean.value is not None:
        cards.append(
            {
                "label": f"energy {where} ({who}, mean)",
                "value": f"{e.mean.value:.2f} J",
                "detail": f"{_stat_detail(e, 'J', '.2g')} · {kg_to_grams(fit.bb.mass_kg):.2f} g BB",
            }
        )
    cls = [fit.shot(i)["lift_coefficient"] for i in range(fit.n_shots)]
    cl_values = [float(c["value"]) for c in cls if c is not None and finite(c.get("value"))]
    if cl_values:
        g = group_stat(cl_values)
        cards.append(
            {
                "label": f"lift coefficient C_L0 ({who}, mean)",
                "value": f"{g.mean.value:.4f}",
                "detail": "one shot" if g.sd is None else f"SD {g.sd:.2g} · at each shot's first point",
            }
        )
    flats = _values([f.flat_distance_m for f in d.forecasts])
    if flats:
        g = group_stat(flats)
        cards.append(
            {
                "label": f"flat distance ({who}, mean)",
                "value": f"{g.mean.value:.1f} m",
                "detail": f"within ±{100 * d.convention.band_m:.0f} cm of the line of sight"
                + ("" if g.sd is None else f" · SD {g.sd:.2g} m"),
            }
        )
    cards.append(
        {
            "label": "hop verdict (group)",
            "value": d.group_verdict.headline.split(":")[0],
            "detail": d.group_verdict.adjuster,
        }
    )
    if d.energy_limit is not None:
        lim = d.energy_limit
        z = "" if lim.highest.margin_sigma is None else f" = {lim.highest.margin_sigma:+.1f} σ"
        cards.append(
            {
                "label": f"energy vs {lim.limit_j:g} J limit",
                "value": LIMIT_WORDS[lim.verdict],
                "detail": f"highest-energy shot: margin {pm(lim.margin_j, '+.3f')} J{z} · the field's chronograph rules",
            }
        )
    return cards


def _forecast_rows(d: FileDecisions) -> list[dict[str, str]]:
    rows = []
    for f in d.forecasts:
        rows.append(
            {
                "shot": f.label,
                "ground": pm(f.ground_range_m, ".3g"),
                "time": pm(f.time_of_flight_s, ".3g"),
                "flat": pm(f.flat_distance_m, ".3g"),
                "rise": pm(f.max_rise_m, ".3g"),
                "speed": pm(f.speed_at_mps, ".3g"),
                "energy": pm(f.energy_at_j, ".3f"),
            }
        )
    return rows


def _muzzle_rows(d: FileDecisions) -> list[dict[str, str]]:
    out = []
    for s in d.muzzle.shots:
        fps = "" if s.speed_mps.value is None else f"{mps_to_fps(s.speed_mps.value):.0f}"
        out.append(
            {"shot": s.label, "speed": pm(s.speed_mps, ".4g"), "fps": fps, "energy": pm(s.energy_j, ".3f")}
        )
    return out


def _bb_rows(fit: FitFile, d: FileDecisions) -> list[tuple[str, str]]:
    tol = d.muzzle.tolerance
    bb = fit.bb
    rows = [
        (
            "BB (1σ tolerance)",
            f"{kg_to_grams(bb.mass_kg):.4g} ± {kg_to_grams(tol.mass_sigma_kg):.2g} g, "
            f"{m_to_mm(bb.diameter_m):.4g} ± {m_to_mm(tol.diameter_sigma_m):.2g} mm ({tol.origin})",
        )
    ]
    cd = fit.data["aero"]["drag_coefficient"]
    share = None if cd is None else cd.get("bb_share")
    if share is not None:
        rows.append(("C_D: share of its variance from the BB tolerance", f"{100 * share:.0f} %"))
    e = d.muzzle.energy_j.mean
    if e.bb_share is not None:
        rows.append(("mean energy: share of its variance from the BB mass", f"{100 * e.bb_share:.0f} %"))
    return rows


def decision_section(inputs: ReportInputs) -> DecisionSection:
    """The decision sections of a report (empty when the fit did not converge)."""
    fit = inputs.fit
    tolerance_of_file(fit)  # a malformed tolerance is named before anything is drawn
    extra = tuple(w for w in plausibility_warnings(fit) if w not in fit.warnings)
    d = decide_file(fit, limit_j=inputs.limit_j, convention=inputs.convention)
    if d is None:
        return DecisionSection(None, [], None, extra)
    c = d.convention
    lim = d.energy_limit
    energy = None
    if lim is not None:
        energy = {
            "limit": f"{lim.limit_j:g} J",
            "verdict": LIMIT_WORDS[lim.verdict],
            "rows": [
                (f"highest-energy shot ({lim.highest.label})", _limit_line(lim.highest)),
                ("group mean", _limit_line(lim.mean)),
            ],
            "rule": f"below or above when the margin exceeds {lim.coverage_factor:g}σ (expanded uncertainty), "
            "else within the uncertainty of the limit",
            "caution": lim.caution,
        }
    where = (
        "at the muzzle, x = " + f"{d.muzzle.x_m:g} m"
        if d.muzzle.x_m is not None
        else "at each shot's first tracked point (no --muzzle-x-m)"
    )
    context = {
        "group_note": f"The cards show the group of {len(d.muzzle.shots)} shot(s), not one shot: the mean with its "
        f"standard error, the SD and the extreme spread; speed and energy {where}.",
        "muzzle": _muzzle_rows(d),
        "notes": list(d.notes),
        "energy": energy,
        "hop": {
            "headline": d.group_verdict.headline,
            "detail": d.group_verdict.detail,
            "shots": [(v.label, verdict_text(v)) for v in d.shot_verdicts],
        },
        "convention": f"flown level from {c.muzzle_height_m:g} m above level ground; flat distance and verdict "
        f"within ±{c.band_m:g} m of the line of sight; speed and energy at {c.engagement_m:g} m; error bars "
        "are the SD over samples of the fit's covariance",
        "forecast": _forecast_rows(d),
        "engagement": f"{c.engagement_m:g}",
        "bb": _bb_rows(fit, d),
    }
    return DecisionSection(d, _cards(fit, d), context, extra)


def _limit_line(v) -> str:
    z = "" if v.margin_sigma is None else f" = {v.margin_sigma:+.1f} σ"
    return f"{LIMIT_WORDS[v.verdict]}: energy {pm(v.energy_j, '.3f')} J, margin {pm(v.margin_j, '+.3f')} J{z}"


__all__ = ["FIRST_SHOT_CARDS", "DecisionSection", "decision_section"]
