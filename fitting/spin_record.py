"""One shot's measured spin and its ``fit.json`` record (``shots[i].spin_measured``).

:func:`measure_shot_spin` does all of :mod:`fitting.spin` for one shot (whole series, windows, the decay
where seen); :func:`shot_spin_to_json`, :func:`check_spin_measured` and :func:`add_spin_measured` write,
validate and attach the record; :func:`measured_spin_ratio` is S = rω/u of a measured spin. SI inside.
Part of :mod:`fitting.spin`.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np

from hopscope.shared.parse import finite_or_none, is_finite_number

from .decay_source import with_decay_source
from .laws import spin_ratio
from .spin_aliases import MARKINGS, SpinPrior
from .spin_estimate import MIN_POINTS, SpinEstimate, SpinOptions
from .spin_periodogram import series_arrays
from .spin_windows import (
    MIN_DECAY_WINDOWS,
    SpinDecay,
    SpinSeries,
    fit_spin_decay,
    fit_spin_decay_coherent,
    spin_vs_time,
)


@dataclass(frozen=True)
class ShotSpin:
    """The measured spin of one shot, as ``fit.json`` (``shots[i].spin_measured``) and the report carry it.

    Attributes
    ----------
    rate_radps, stderr_radps : spin rate at ``at_t_s`` and its 1σ, rad/s; None when no spin is reported.
    at_t_s : the time the rate refers to, s: the shot's first tracked point when a decay fit gives the rate
        there, else the mean time of the samples (the whole series' estimate).
    candidates_radps : the candidate rates of the whole series (more than one when aliased), rad/s.
    marking, method : the marking assumed and how the rate was obtained.
    reason : why no rate is reported (None when it is).
    overall : the whole-series estimate; ``series`` the windows; ``decay`` their decay fit, or None with
        ``decay_reason``.
    """

    rate_radps: float | None
    stderr_radps: float | None
    at_t_s: float
    candidates_radps: tuple[float, ...]
    marking: str
    method: str
    reason: str | None
    overall: SpinEstimate
    series: SpinSeries
    decay: SpinDecay | None
    decay_reason: str | None


def measure_shot_spin(
    t_s,
    brightness,
    *,
    first_t_s: float | None = None,
    window_points: int = 32,
    distance_m_at=None,
    options: SpinOptions | None = None,
    prior: SpinPrior | None = None,
) -> ShotSpin:
    """Spin of one shot from its brightness series: the whole series, windows, and the decay where seen.

    The decay is fitted to the windowed rates (:func:`fit_spin_decay`) when at least
    :data:`MIN_DECAY_WINDOWS` windows have a rate, else by one coherent fit of the whole series
    (:func:`fit_spin_decay_coherent`). When the decay is resolved, the reported rate is the fit's rate at
    the first tracked point; otherwise it is the whole series' rate at its mean time (``at_t_s`` says).

    Parameters
    ----------
    t_s, brightness : the shot's detections (mid-exposure times, s; integrated brightness).
    first_t_s : time of the shot's first tracked point, s (default the first sample's): a decay fit gives
        the rate there.
    window_points : samples per (non-overlapping) window of the decay fit.
    distance_m_at : optional function of times (s, array) giving the distance flown (m), to fit the decay
        per distance instead of per time.
    Other parameters as for :func:`measure_spin`.
    """
    t, y = series_arrays(t_s, brightness)
    t_first = float(t[0]) if first_t_s is None and t.size else first_t_s
    if t_first is None or not math.isfinite(t_first):
        raise ValueError(f"first_t_s must be finite, got {first_t_s!r}")
    opt = SpinOptions() if options is None else options
    window_points = max(window_points, MIN_POINTS + opt.trend_degree)
    series = spin_vs_time(t, y, window_points=window_points, options=opt, prior=prior)
    overall = series.overall
    decay: SpinDecay | None = None
    decay_reason: str | None
    measured = [w for w in series.windows if w.measured]
    if len(measured) >= MIN_DECAY_WINDOWS:
        if distance_m_at is None:
            decay = fit_spin_decay(series.windows, reference=t_first)
        else:
            at = np.array([w.at_t_s for w in series.windows])
            dist = np.asarray(distance_m_at(at), dtype=float)
            d0 = float(np.asarray(distance_m_at(np.array([t_first])), dtype=float)[0])
            decay = fit_spin_decay(series.windows, reference=d0, distance_m=dist)
        decay_reason = decay.reason
    elif overall.rate_radps is not None:  # windows too short for a flicker of their own: one coherent fit
        if distance_m_at is None:
            decay = fit_spin_decay_coherent(t, y, overall, reference=t_first, trend_degree=opt.trend_degree)
        else:
            dist = np.asarray(distance_m_at(t), dtype=float)
            d0 = float(np.asarray(distance_m_at(np.array([t_first])), dtype=float)[0])
            decay = fit_spin_decay_coherent(
                t, y, overall, reference=d0, distance_m=dist, trend_degree=opt.trend_degree
            )
        decay_reason = decay.reason
    else:
        decay_reason = f"decay not measured: no spin rate ({overall.reason})"
    if decay is not None and decay.scale is not None:
        return ShotSpin(
            decay.rate0_radps,
            decay.rate0_stderr_radps,
            t_first,
            overall.candidates_radps,
            overall.marking,
            f"{overall.method if not measured else measured[0].method}; rate at the first tracked point "
            f"from the decay fit ({decay.method})",
            None,
            overall,
            series,
            decay,
            decay_reason,
        )
    rate, err, reason = overall.rate_radps, overall.stderr_radps, overall.reason
    return ShotSpin(
        rate,
        err,
        overall.at_t_s,
        overall.candidates_radps,
        overall.marking,
        overall.method,
        reason,
        overall,
        series,
        decay,
        decay_reason,
    )


def _estimate_json(value: float | None, stderr: float | None) -> dict[str, float | None]:
    v, e = finite_or_none(value), finite_or_none(stderr)
    return {"value": v, "stderr": e} if v is not None and e is not None else {"value": None, "stderr": None}


def shot_spin_to_json(spin: ShotSpin) -> dict[str, Any]:
    """``shots[i].spin_measured`` of ``fit.json`` (SI): ``rate_radps {value, stderr}``, ``at_t_s``,
    ``candidates_radps``, ``marking``, ``method``, plus ``reason``, ``false_alarm_probability``,
    ``flicker_hz`` and ``decay`` (``per``, ``reference``, ``rate0_radps``, ``decay_constant`` and
    ``scale`` each ``{value, stderr}``, ``reason``; null when not fitted)."""
    o = spin.overall
    decay = None
    if spin.decay is not None:
        d = spin.decay
        decay = {
            "per": d.per,
            "reference": finite_or_none(d.reference),
            "rate0_radps": _estimate_json(d.rate0_radps, d.rate0_stderr_radps),
            "decay_constant": _estimate_json(d.decay_constant, d.decay_constant_stderr),
            "scale": _estimate_json(d.scale, d.scale_stderr),
            "n_windows": d.n_windows,
            "reduced_chi2": finite_or_none(d.reduced_chi2),
            "reason": d.reason,
        }
    return {
        "rate_radps": _estimate_json(spin.rate_radps, spin.stderr_radps),
        "at_t_s": finite_or_none(spin.at_t_s),
        "candidates_radps": [float(c) for c in spin.candidates_radps],
        "marking": spin.marking,
        "method": spin.method,
        "reason": spin.reason,
        "false_alarm_probability": finite_or_none(o.false_alarm_probability),
        "flicker_hz": finite_or_none(o.flicker_hz),
        "sample_rate_hz": finite_or_none(o.sample_rate_hz),
        "decay": decay,
        "decay_reason": spin.decay_reason,
    }


def measured_spin_ratio(
    rate_radps: float, rate_stderr_radps: float, *, speed_mps: float, speed_stderr_mps: float, radius_m: float
) -> tuple[float, float]:
    """Spin ratio S = r ω / u from a measured spin and the fitted speed at the same time, with its 1σ
    (the two errors combined in quadrature, relative: σ_S/S = √((σ_ω/ω)² + (σ_u/u)²))."""
    for name, value in (("rate_radps", rate_radps), ("speed_mps", speed_mps), ("radius_m", radius_m)):
        if not (math.isfinite(value) and value > 0):
            raise ValueError(f"{name} must be positive and finite, got {value!r}")
    for name, value in (("rate_stderr_radps", rate_stderr_radps), ("speed_stderr_mps", speed_stderr_mps)):
        if not (math.isfinite(value) and value >= 0):
            raise ValueError(f"{name} must be finite and >= 0, got {value!r}")
    s = float(spin_ratio(rate_radps, speed_mps, radius_m))
    return s, s * math.hypot(rate_stderr_radps / rate_radps, speed_stderr_mps / speed_mps)


def check_spin_measured(obj: Any, where: str) -> None:
    """Validate a ``spin_measured`` record read back from ``fit.json`` (the layout of
    :func:`shot_spin_to_json`); ``ValueError`` naming ``where`` and the field for anything else.

    Numbers must be finite (or null where a value may be missing); ``marking`` must be known.
    """

    def fail(field: str, what: str) -> ValueError:
        return ValueError(f"{where}.{field}: {what}")

    def number(value: Any, field: str, *, null: bool = True) -> None:
        if value is None and null:
            return
        if not is_finite_number(value):
            raise fail(field, f"expected a finite number{' or null' if null else ''}, got {value!r}")

    if not isinstance(obj, dict):
        raise ValueError(f"{where}: expected an object, got {type(obj).__name__}")
    for key in ("rate_radps", "at_t_s", "candidates_radps", "marking", "method"):
        if key not in obj:
            raise fail(key, "missing")
    rate = obj["rate_radps"]
    if not isinstance(rate, dict) or set(rate) != {"value", "stderr"}:
        raise fail("rate_radps", f'expected {{"value", "stderr"}}, got {rate!r}')
    number(rate["value"], "rate_radps.value")
    number(rate["stderr"], "rate_radps.stderr")
    if (rate["value"] is None) != (rate["stderr"] is None):
        raise fail("rate_radps", "value and stderr must both be numbers or both null")
    number(obj["at_t_s"], "at_t_s", null=False)
    cands = obj["candidates_radps"]
    if not isinstance(cands, list):
        raise fail("candidates_radps", f"expected a list, got {cands!r}")
    for i, c in enumerate(cands):
        number(c, f"candidates_radps[{i}]", null=False)
    if obj["marking"] not in MARKINGS:
        raise fail("marking", f"unknown marking {obj['marking']!r}; known: {sorted(MARKINGS)}")
    if not isinstance(obj["method"], str):
        raise fail("method", f"expected text, got {obj['method']!r}")
    for key in ("false_alarm_probability", "flicker_hz", "sample_rate_hz"):
        number(obj.get(key), key)
    for key in ("reason", "decay_reason"):
        if obj.get(key) is not None and not isinstance(obj[key], str):
            raise fail(key, f"expected text or null, got {obj[key]!r}")
    decay = obj.get("decay")
    if decay is None:
        return
    if not isinstance(decay, dict):
        raise fail("decay", f"expected an object or null, got {decay!r}")
    if decay.get("per") not in ("time", "distance"):
        raise fail("decay.per", f"expected 'time' or 'distance', got {decay.get('per')!r}")
    number(decay.get("reference"), "decay.reference", null=False)
    for key in ("rate0_radps", "decay_constant", "scale"):
        est = decay.get(key)
        if not isinstance(est, dict) or set(est) != {"value", "stderr"}:
            raise fail(f"decay.{key}", f'expected {{"value", "stderr"}}, got {est!r}')
        number(est["value"], f"decay.{key}.value")
        number(est["stderr"], f"decay.{key}.stderr")


def add_spin_measured(doc: Mapping[str, Any], spins: Mapping[str, ShotSpin]) -> dict[str, Any]:
    """A copy of a fit's document with ``shots[i].spin_measured`` for the shots in ``spins`` (by label),
    and one warning for each of them without a rate, saying why (and listing the candidates when aliased);
    ``aero.spin_decay`` is remade with their measured decays (:func:`fitting.decay_source.with_decay_source`).

    Raises
    ------
    ValueError
        A label in ``spins`` is not one of the fit's shots.
    """
    shots = [dict(s) for s in doc["shots"]]
    labels = [s["label"] for s in shots]
    unknown = sorted(set(spins) - set(labels))
    if unknown:
        raise ValueError(f"spins: shots {unknown} are not in the fit (its shots: {labels})")
    warnings = list(doc.get("warnings", ()))
    for s in shots:
        spin = spins.get(s["label"])
        if spin is None:
            continue
        s["spin_measured"] = shot_spin_to_json(spin)
        if spin.rate_radps is None:
            listed = (
                " (candidates " + ", ".join(f"{c:.0f}" for c in spin.candidates_radps) + " rad/s)"
                if spin.candidates_radps
                else ""
            )
            warnings.append(
                f"{s['label']}: spin not measured from the marked BB's flicker: {spin.reason}{listed}"
            )
    return with_decay_source({**doc, "shots": shots, "warnings": warnings})


__all__ = [
    "ShotSpin",
    "add_spin_measured",
    "check_spin_measured",
    "measure_shot_spin",
    "measured_spin_ratio",
    "shot_spin_to_json",
]
