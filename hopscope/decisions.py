"""The decisions a technician acts on, glued to a fit: BB tolerance, muzzle state, energy limit, warnings.

Glue only: every number comes from :mod:`fitting` (:func:`fitting.bbshare.apply_bb_tolerance`,
:func:`fitting.muzzle.muzzle_state`, :func:`fitting.energy_limit.judge_energy_limit`,
:func:`fitting.plausibility.plausibility_warnings`, :func:`fitting.verdict.judge_group_hop_path`,
:func:`fitting.forecast.forecast_shot`); this module decides which of them to call with the user's options,
rephrases their errors in the options' names, and writes them into ``fit.json``
(:func:`fitting.decisionfile.add_decisions`).

World frame: x downrange, y up, metres (the rig's); SI throughout.
"""

from __future__ import annotations

import dataclasses
import json
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

from hopscope.fitting.bb import BBTolerance
from hopscope.fitting.bbshare import apply_bb_tolerance
from hopscope.fitting.decisionfile import add_decisions
from hopscope.fitting.energy_limit import EnergyLimit, judge_energy_limit
from hopscope.fitting.fitfile import FitFile
from hopscope.fitting.forecast import DEFAULT_BAND_M, DEFAULT_MUZZLE_HEIGHT_M, ShotForecast, forecast_shot
from hopscope.fitting.muzzle import MuzzleState, muzzle_state
from hopscope.fitting.plausibility import plausibility_warnings
from hopscope.fitting.results import FlightFit
from hopscope.fitting.verdict import DEFAULT_ENGAGEMENT_M, PathVerdict, judge_group_hop_path
from hopscope.shared.parse import is_finite_number

#: Samples of the fit's covariance behind the hop verdict's probabilities (fixed seed: reproducible).
VERDICT_SAMPLES = 100
#: Samples behind the prediction's error bars.
FORECAST_SAMPLES = 200
DECISION_SEED = 20261202

NO_MUZZLE_FOR_LIMIT = (
    "--limit-j: no --muzzle-x-m given, so the energies are those at each shot's first tracked point, "
    "below the muzzle's (drag has already slowed the BB): the verdict may read low"
)


@dataclass(frozen=True)
class Convention:
    """How a predicted path is judged (SI): muzzle height above level ground, half-height of the band
    about the line of sight, engagement range (the hop verdict's distance, and where speed and energy are
    given). Defaults: :mod:`fitting.forecast` and :mod:`fitting.verdict` (our convention, README)."""

    muzzle_height_m: float = DEFAULT_MUZZLE_HEIGHT_M
    band_m: float = DEFAULT_BAND_M
    engagement_m: float = DEFAULT_ENGAGEMENT_M


def convention_from_args(args) -> Convention:
    """The convention from ``--muzzle-height-m``, ``--band-m``, ``--engagement-m`` (validated by argparse)."""
    return Convention(float(args.muzzle_height_m), float(args.band_m), float(args.engagement_m))


@dataclass(frozen=True, eq=False)
class FitDecisions:
    """A fit with the decisions made on it.

    Attributes
    ----------
    fit : the fit with the BB tolerance in its error bars and the new warnings appended.
    muzzle : speed and energy at the muzzle, per shot and group (None when the fit did not converge).
    energy_limit : the verdict against ``--limit-j`` (None without it).
    warnings : the warnings added here (plausibility, limit caveats), also in ``fit.warnings``.
    """

    fit: FlightFit
    muzzle: MuzzleState | None
    energy_limit: EnergyLimit | None
    warnings: tuple[str, ...]


def check_muzzle_position(muzzle_x_m: float | None, first_x_m: Sequence[tuple[str, float]]) -> None:
    """``--muzzle-x-m`` must lie at or upstream of every shot's first tracked point (label, x m)."""
    if muzzle_x_m is None:
        return
    for label, x0 in first_x_m:
        if muzzle_x_m > x0 + 1e-6:
            raise ValueError(
                f"--muzzle-x-m: {muzzle_x_m:g} m lies downrange of the first tracked point of shot {label!r} "
                f"({x0:.4g} m); give the muzzle's position, upstream of the tracks"
            )


def decide(
    result: FlightFit,
    *,
    tolerance: BBTolerance | None = None,
    muzzle_x_m: float | None = None,
    limit_j: float | None = None,
) -> FitDecisions:
    """The BB tolerance in the error bars, the muzzle state, the energy verdict and plausibility warnings.

    Raises
    ------
    ValueError
        ``--muzzle-x-m`` downrange of a shot's first tracked point.
    """
    if result.bb_tolerance is None:
        result = apply_bb_tolerance(result, tolerance)
    added: list[str] = []
    muzzle = None
    limit = None
    if result.converged:
        first = [(s.label, float(s.x0_m.value)) for s in result.shots if s.x0_m.value is not None]
        check_muzzle_position(muzzle_x_m, first)
        muzzle = muzzle_state(result, muzzle_x_m=muzzle_x_m, tolerance=result.bb_tolerance)
        if limit_j is not None:
            limit = judge_energy_limit(muzzle, limit_j)
            if muzzle_x_m is None:
                added.append(NO_MUZZLE_FOR_LIMIT)
        added.extend(plausibility_warnings(result))
    elif limit_j is not None:
        added.append("--limit-j: the fit did not converge, so no energy verdict is given")
    if added:
        result = dataclasses.replace(result, warnings=(*result.warnings, *added))
    return FitDecisions(result, muzzle, limit, tuple(added))


def with_decisions(fit_text: str, decisions: FitDecisions) -> str:
    """``fit.json`` text (as :func:`fitting.fitfile.fit_to_json` writes it, possibly with other blocks
    added) with the muzzle state, group and energy-limit blocks of :func:`fitting.decisionfile.add_decisions`."""
    doc = add_decisions(json.loads(fit_text), muzzle=decisions.muzzle, energy_limit=decisions.energy_limit)
    return json.dumps(doc, indent=2, ensure_ascii=False, allow_nan=False) + "\n"


# ---------------------------------------------------------------------------------------------- from a file


def tolerance_of_file(fit: FitFile) -> BBTolerance | None:
    """The BB tolerance recorded in a fit file's ``bb`` block (None when the fit was made without one).

    Raises
    ------
    ValueError
        A tolerance field that is not a finite number >= 0 (names the file and the field).
    """
    bb = fit.data["bb"]
    if "mass_sigma_kg" not in bb and "diameter_sigma_m" not in bb:
        return None
    vals = []
    for key in ("mass_sigma_kg", "diameter_sigma_m"):
        v = bb.get(key)
        if not (is_finite_number(v) and v >= 0):
            raise ValueError(f"{fit.source}: bb.{key}: expected a finite number >= 0, got {v!r}")
        vals.append(float(v))
    return BBTolerance(vals[0], vals[1], str(bb.get("tolerance_origin", "given")))


def muzzle_x_of_file(fit: FitFile) -> float | None:
    """The muzzle position a fit file was made with (its ``group`` block, else its chronograph's), m."""
    group = fit.data.get("group")
    if isinstance(group, Mapping) and "muzzle_x_m" in group:
        v = group["muzzle_x_m"]
        if v is not None and not is_finite_number(v):
            raise ValueError(f"{fit.source}: group.muzzle_x_m: expected a number or null, got {v!r}")
        return None if v is None else float(v)
    chrono = fit.chrono
    return None if chrono is None else chrono.muzzle_x_m


def limit_of_file(fit: FitFile) -> float | None:
    """The energy limit a fit file was judged against (``energy_limit.limit_j``), J, or None."""
    block = fit.data.get("energy_limit")
    if block is None:
        return None
    v = block.get("limit_j") if isinstance(block, Mapping) else None
    if not is_finite_number(v) or not float(v) > 0:  # type: ignore[arg-type]
        raise ValueError(f"{fit.source}: energy_limit.limit_j: expected a positive number, got {v!r}")
    return float(v)  # type: ignore[arg-type]


@dataclass(frozen=True, eq=False)
class FileDecisions:
    """The decisions on a fit file, for the report (SI).

    Attributes
    ----------
    muzzle : per shot and group. energy_limit : against the limit (``--limit-j``, else the file's).
    group_verdict, shot_verdicts : the hop verdict read off the predicted paths.
    forecasts : each shot's predicted path from the muzzle height, with its figures' error bars.
    convention : how the paths were judged. notes : what the report should say beside them.
    """

    muzzle: MuzzleState
    energy_limit: EnergyLimit | None
    group_verdict: PathVerdict
    shot_verdicts: tuple[PathVerdict, ...]
    forecasts: tuple[ShotForecast, ...]
    convention: Convention
    notes: tuple[str, ...]


def decide_file(
    fit: FitFile, *, limit_j: float | None = None, convention: Convention | None = None
) -> FileDecisions | None:
    """Muzzle state, energy verdict, hop verdicts and predictions of a fit file (None: not converged)."""
    if not fit.converged:
        return None
    tolerance = tolerance_of_file(fit)
    muzzle_x = muzzle_x_of_file(fit)
    limit = limit_j if limit_j is not None else limit_of_file(fit)
    muzzle = muzzle_state(fit, muzzle_x_m=muzzle_x, tolerance=tolerance)
    energy = judge_energy_limit(muzzle, limit) if limit is not None else None
    notes = list(muzzle.notes)
    if energy is not None and muzzle_x is None:
        notes.append(NO_MUZZLE_FOR_LIMIT)
    c = Convention() if convention is None else convention
    group, shots = judge_group_hop_path(
        fit, engagement_m=c.engagement_m, band_m=c.band_m, muzzle_height_m=c.muzzle_height_m,
        n_samples=VERDICT_SAMPLES, rng=DECISION_SEED,
    )  # fmt: skip
    forecasts = tuple(
        forecast_shot(
            fit, shot=i, muzzle_height_m=c.muzzle_height_m, band_m=c.band_m, distance_m=c.engagement_m,
            n_samples=FORECAST_SAMPLES, rng=DECISION_SEED + i,
        )
        for i in range(fit.n_shots)
    )  # fmt: skip
    return FileDecisions(muzzle, energy, group, shots, forecasts, c, tuple(notes))


def finite(v: float | None) -> bool:
    """A number that can be shown (not None, not NaN)."""
    return v is not None and math.isfinite(v)


__all__ = [
    "Convention",
    "FileDecisions",
    "FitDecisions",
    "check_muzzle_position",
    "convention_from_args",
    "decide",
    "decide_file",
    "limit_of_file",
    "muzzle_x_of_file",
    "tolerance_of_file",
    "with_decisions",
]
