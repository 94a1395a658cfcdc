"""Where a fit's spin decay comes from: the trajectory, a marked BB's flicker, both, or the assumed default.

The trajectory fit (:mod:`fitting.spin_decay`) sees the decay through the lift force and, on a short
track, not at all (it is then fixed at the default). A marked BB's flicker measures the spin itself and,
along the flight, its decay (:mod:`fitting.spin_windows`). ``aero.spin_decay`` of ``fit.json`` is the
shared estimate of the decay rate λ = 1/τ (1/s) from every source that has one, by inverse-variance
weighting, with the source named:

- ``"trajectory"``: only the trajectory fit determined it;
- ``"measured"``: only the flicker of marked BBs (the trajectory could not, or disagrees by more than
  :data:`AGREE_Z` σ: the flicker measures spin directly, the trajectory only through the lift law's shape,
  which is an assumption at BB Reynolds numbers);
- ``"combined"``: both, weighted by their variances;
- ``"assumed"``: neither; the fit's default (``model.decay_fixed_value``) stands.

λ is combined rather than τ: its estimates are near Gaussian and a decay too slow to resolve has λ ≈ 0
with a finite σ, still information. τ is given only when the combined λ is :data:`DECAY_RESOLVED_Z` σ above
zero. A flicker decay fitted per distance flown is not combined with these per-time rates (its part says
so). The fit's own parameters and predicted paths keep the trajectory fit's decay (fitted or fixed); the
block's ``note`` says so when the shared estimate differs from it.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import Any

from hopscope.shared.parse import is_finite_number

from .layout import decay_param_name
from .results import FlightFit
from .spin_windows import DECAY_RESOLVED_Z

#: A flicker decay and a trajectory decay that differ by more than this many combined σ are not combined.
#: # common practice, no published source (the usual 3σ consistency check)
AGREE_Z = 3.0

SOURCES = ("trajectory", "measured", "combined", "assumed")


def _pair(value: float | None, stderr: float | None) -> dict[str, float | None]:
    return {"value": value, "stderr": stderr}


def _rate_of_time(tau: Mapping[str, Any] | None) -> tuple[float, float] | None:
    """λ ± σ (1/s) of a τ estimate {value, stderr} (s), or None when it has none."""
    if not tau or not (is_finite_number(tau.get("value")) and is_finite_number(tau.get("stderr"))):
        return None
    t, s = float(tau["value"]), float(tau["stderr"])
    return (1.0 / t, s / t**2) if t > 0 and s > 0 else None


def _measured_rate(decay: Mapping[str, Any] | None) -> tuple[tuple[float, float] | None, str]:
    """λ ± σ (1/s) of a ``spin_measured.decay`` record, or None with why not."""
    if decay is None:
        return None, "no decay fit"
    if decay.get("per") != "time":
        return None, "decay fitted per distance flown: not combined with per-time rates"
    lam = decay.get("decay_constant") or {}
    if not (is_finite_number(lam.get("value")) and is_finite_number(lam.get("stderr"))):
        return None, f"decay not measured ({decay.get('reason')})"
    if not float(lam["stderr"]) > 0:
        return None, "decay constant without a positive standard error"
    return (float(lam["value"]), float(lam["stderr"])), ""


def _weighted(parts: Sequence[tuple[float, float]]) -> tuple[float, float]:
    w = [1.0 / s**2 for _, s in parts]
    total = sum(w)
    return sum(wi * v for wi, (v, _) in zip(w, parts, strict=True)) / total, math.sqrt(1.0 / total)


def decay_source_block(
    *,
    trajectory_time_s: Mapping[str, Any] | None,
    fixed_value: float | None,
    parameter_name: str,
    measured: Sequence[tuple[str, Mapping[str, Any] | None]] = (),
) -> tuple[dict[str, Any], tuple[str, ...]]:
    """``aero.spin_decay`` of ``fit.json`` and the warnings it raises.

    Parameters
    ----------
    trajectory_time_s : the trajectory fit's τ estimate ``{"value", "stderr"}`` (s; null where undetermined).
    fixed_value : the decay parameter the fit fixed (1/τ in 1/s or a torque slope), None when fitted.
    parameter_name : the decay parameter's name (for the note).
    measured : (shot label, its ``spin_measured.decay`` record or None) for every shot with a measured spin.

    Returns
    -------
    (block, warnings) : ``{"source", "rate_per_s" {value, stderr} (1/s), "time_s" {value, stderr} (s),
        "parts": [{"source", "shot", "rate_per_s", "used", "why"}], "note"}``; one warning line each.
    """
    traj = _rate_of_time(trajectory_time_s)
    parts: list[dict[str, Any]] = []
    if traj is not None:
        parts.append(
            {"source": "trajectory", "shot": None, "rate_per_s": _pair(*traj), "used": True, "why": ""}
        )
    flicker: list[tuple[float, float]] = []
    for label, decay in measured:
        rate, why = _measured_rate(decay)
        parts.append(
            {
                "source": "measured",
                "shot": label,
                "rate_per_s": _pair(*(rate or (None, None))),
                "used": bool(rate),
                "why": why,
            }
        )
        if rate is not None:
            flicker.append(rate)
    warnings: list[str] = []
    if flicker and traj is not None:
        m, ms = _weighted(flicker)
        z = abs(m - traj[0]) / math.hypot(ms, traj[1])
        if z > AGREE_Z:
            parts[0].update(used=False, why=f"disagrees with the flicker's decay by {z:.1f} σ")
            warnings.append(
                f"spin decay: the trajectory's λ = {traj[0]:.3g} ± {traj[1]:.2g} 1/s and the marked BB's "
                f"flicker λ = {m:.3g} ± {ms:.2g} 1/s differ by {z:.1f} σ; the flicker's (a measured spin) is used"
            )
            traj = None
    if flicker and traj is not None:
        source, (lam, lam_sig) = "combined", _weighted([traj, *flicker])
    elif flicker:
        source, (lam, lam_sig) = "measured", _weighted(flicker)
    elif traj is not None:
        source, (lam, lam_sig) = "trajectory", traj
    else:
        note = (
            f"no source determines the spin decay: the fit assumes {parameter_name} = {fixed_value:g}"
            if fixed_value is not None
            else "no source determines the spin decay"
        )
        block = {
            "source": "assumed",
            "rate_per_s": _pair(None, None),
            "time_s": _pair(None, None),
            "parts": parts,
            "note": note,
        }
        return block, tuple(warnings)
    resolved = lam > DECAY_RESOLVED_Z * lam_sig
    tau = _pair(1.0 / lam, lam_sig / lam**2) if resolved else _pair(None, None)
    note = f"decay rate from {source} ({sum(p['used'] for p in parts)} of {len(parts)} parts)"
    if not resolved:
        note += f"; λ is not {DECAY_RESOLVED_Z:g} σ above zero, so no decay time is given"
    if source != "trajectory":
        kept = (
            f"{parameter_name} fixed at {fixed_value:g}"
            if fixed_value is not None
            else "its own fitted decay"
        )
        note += f"; the fitted parameters and predicted paths keep the trajectory fit's decay ({kept})"
    block = {"source": source, "rate_per_s": _pair(lam, lam_sig), "time_s": tau, "parts": parts, "note": note}
    return block, tuple(warnings)


def trajectory_decay_block(result: FlightFit) -> dict[str, Any]:
    """``aero.spin_decay`` of a fit before any flicker is measured: the trajectory's, or the assumed one."""
    tau = result.spin_decay_time_s
    block, _ = decay_source_block(
        trajectory_time_s={"value": tau.value, "stderr": tau.stderr},
        fixed_value=result.decay_fixed_value,
        parameter_name=decay_param_name(result.spec),
    )
    return block


def with_decay_source(doc: Mapping[str, Any]) -> dict[str, Any]:
    """A copy of a fit's document with ``aero.spin_decay`` from the trajectory and every shot's
    ``spin_measured.decay``, and its warnings appended."""
    aero, model = doc.get("aero", {}), doc.get("model", {})
    measured = [(s["label"], s["spin_measured"].get("decay")) for s in doc["shots"] if "spin_measured" in s]
    block, warns = decay_source_block(
        trajectory_time_s=aero.get("spin_decay_time_s"),
        fixed_value=model.get("decay_fixed_value"),
        parameter_name=str(aero.get("spin_decay_parameter_name", "decay parameter")),
        measured=measured,
    )
    return {**doc, "aero": {**aero, "spin_decay": block}, "warnings": [*doc.get("warnings", ()), *warns]}


__all__ = ["AGREE_Z", "SOURCES", "decay_source_block", "trajectory_decay_block", "with_decay_source"]
