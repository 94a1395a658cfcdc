"""The spin estimator: one brightness series of a marked BB read as a spin rate with its standard error.

The slow trend is removed, the periodogram (:mod:`fitting.spin_periodogram`) finds the flicker and its
false-alarm probability says whether it is real, a least-squares sinusoid around the peak refines the
frequency (one refit without outliers), and the marking and the aliases (:mod:`fitting.spin_aliases`)
turn it into candidate spin rates, one of which is reported when unaliased or chosen by a prior or a
second clip. Failure to measure is a value (``rate_radps`` None with a ``reason``). SI: s, Hz, rad/s.
Part of :mod:`fitting.spin`.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy.optimize import least_squares

from hopscope.shared.constants import MAD_TO_SIGMA

from .spin_aliases import (
    DEFAULT_MARKING,
    SpinPrior,
    alias_frequencies,
    exposure_attenuation,
    marking_named,
    pick_with_prior,
)
from .spin_periodogram import (
    DEFAULT_OVERSAMPLE,
    false_alarm_probability,
    frequency_grid,
    lomb_scargle,
    series_arrays,
)

#: Fewest brightness samples a periodogram is run on: a sinusoid with a floating mean has 3 parameters and
#: the trend takes more, so below this the fit has almost no residual degrees of freedom.
MIN_POINTS = 8
#: A peak is reported as a spin only when its false-alarm probability is at most this.
#: # common practice, no published source (the 1 % level is the usual choice in periodogram work)
DEFAULT_MAX_FALSE_ALARM = 0.01
#: Plausible spin band of a BB from a hop-up, rad/s (10 to 3000 rev/s: a spin ratio S = rω/u of 0.4 at
#: 140 m/s is about 3000 rev/s for a 6 mm BB).  # common practice, no published source
DEFAULT_RATE_BAND_RADPS = (2.0 * math.pi * 10.0, 2.0 * math.pi * 3000.0)
#: Fewest flicker cycles (as sampled) a series must hold for its flicker to be searched: below two cycles
#: a sinusoid and the slow brightness trend cannot be told apart.  # common practice, no published source
MIN_CYCLES = 2.0
#: Degree of the polynomial in time removed from the brightness before the search (1: a straight line).
DEFAULT_TREND_DEGREE = 1
#: Two clips agree on a rate when their candidates differ by at most this many combined σ.
CLIP_MATCH_Z = 3.0
#: Samples further than this many robust σ from a fit are left out of one refit.
#: # common practice, no published source
OUTLIER_CLIP_SIGMA = 4.0


# ---------------------------------------------------------------------------------------------- options and result


@dataclass(frozen=True)
class SpinOptions:
    """How a brightness series is read as spin.

    Attributes
    ----------
    marking : key of :data:`MARKINGS` (default :data:`DEFAULT_MARKING`, one flicker cycle per turn).
    exposure_s : exposure time T_e, s (0: unknown or negligible); used for the modulation depth and each
        candidate's attenuation.
    rate_band_radps : (low, high) plausible spin rates, rad/s; only candidates inside are listed.
    max_false_alarm : a peak with a higher false-alarm probability is not reported as a spin.
    trend_degree : degree of the slow brightness trend removed first (polynomial in time, 0..3).
    oversample : trial frequencies per periodogram peak width (≥ 1).
    """

    marking: str = DEFAULT_MARKING
    exposure_s: float = 0.0
    rate_band_radps: tuple[float, float] = DEFAULT_RATE_BAND_RADPS
    max_false_alarm: float = DEFAULT_MAX_FALSE_ALARM
    trend_degree: int = DEFAULT_TREND_DEGREE
    oversample: int = DEFAULT_OVERSAMPLE

    def __post_init__(self) -> None:
        marking_named(self.marking)
        object.__setattr__(self, "rate_band_radps", _band(self.rate_band_radps))
        if not (math.isfinite(self.exposure_s) and self.exposure_s >= 0):
            raise ValueError(f"exposure_s must be finite and >= 0 (s), got {self.exposure_s!r}")
        if not (0 < self.max_false_alarm < 1):
            raise ValueError(f"max_false_alarm must be between 0 and 1, got {self.max_false_alarm!r}")
        if not (isinstance(self.trend_degree, int) and 0 <= self.trend_degree <= 3):
            raise ValueError(f"trend_degree must be an integer 0..3, got {self.trend_degree!r}")
        if not (isinstance(self.oversample, int) and self.oversample >= 1):
            raise ValueError(f"oversample must be an integer >= 1, got {self.oversample!r}")


@dataclass(frozen=True)
class SpinEstimate:
    """Spin rate from the brightness flicker of one series (a whole shot or one window of it).

    Attributes
    ----------
    rate_radps : spin rate, rad/s; None when no spin is reported (see ``reason``).
    stderr_radps : its 1σ standard error, rad/s (None with the rate).
    at_t_s : time the rate refers to (mean time of the samples used), s.
    span_s : (first, last) sample time, s.
    n_points : samples used; ``n_outliers`` samples left out as outliers (more than
        :data:`OUTLIER_CLIP_SIGMA` robust σ from the first fit).
    sample_rate_hz : frame rate the samples lie on (1 / median spacing), Hz.
    flicker_hz, flicker_stderr_hz : the flicker frequency as observed (folded into 0..sample_rate/2 when
        the sampling cannot tell aliases apart), Hz, and its 1σ; None when no significant peak was found.
    candidates_radps : every spin rate in the plausible band that gives the observed flicker, rad/s,
        ascending (one value when unaliased; empty without a significant peak).
    candidate_attenuation : |sinc(f·T_e)| of each candidate's true flicker frequency f (the exposure's
        smoothing, 1 = none), aligned with ``candidates_radps``.
    aliased : whether more than one candidate is in the band.
    marking : name of the :class:`Marking` assumed; ``cycles_per_turn`` its flicker cycles per turn.
    method : how the rate was obtained (periodogram, and what chose the alias).
    power : normalised periodogram power of the peak (0..1), None when not searched.
    false_alarm_probability : probability that noise alone makes a peak this high somewhere in the searched
        band (Baluev 2008); None when not searched.
    max_false_alarm : the level a peak had to beat.
    observed_modulation : flicker amplitude over the mean brightness as sampled; None without a peak.
    modulation : the same corrected for the exposure at the reported rate (observed amplitude over
        |sinc(f·T_e)|); None when no rate is reported.
    prior : the prior's source when one was used, else None.
    reason : why no rate is reported (None when it is).
    """

    rate_radps: float | None
    stderr_radps: float | None
    at_t_s: float
    span_s: tuple[float, float]
    n_points: int
    n_outliers: int
    sample_rate_hz: float
    flicker_hz: float | None
    flicker_stderr_hz: float | None
    candidates_radps: tuple[float, ...]
    candidate_attenuation: tuple[float, ...]
    aliased: bool
    marking: str
    cycles_per_turn: int
    method: str
    power: float | None
    false_alarm_probability: float | None
    max_false_alarm: float
    observed_modulation: float | None
    modulation: float | None
    prior: str | None
    reason: str | None

    @property
    def measured(self) -> bool:
        """True when a spin rate is reported."""
        return self.rate_radps is not None


def _band(rate_band_radps) -> tuple[float, float]:
    try:
        lo, hi = (float(v) for v in rate_band_radps)
    except (TypeError, ValueError):
        raise ValueError(
            f"rate_band_radps must be two numbers (low, high) in rad/s, got {rate_band_radps!r}"
        ) from None
    if not (math.isfinite(lo) and math.isfinite(hi) and 0 < lo < hi):
        raise ValueError(f"rate_band_radps must satisfy 0 < low < high (rad/s), got {rate_band_radps!r}")
    return lo, hi


# ---------------------------------------------------------------------------------------------- estimator


def no_spin(base: dict[str, Any], reason: str, **extra: Any) -> SpinEstimate:
    """A :class:`SpinEstimate` without a rate: ``base`` (its fields) and ``extra``, with ``reason``."""
    fields: dict[str, Any] = dict(
        rate_radps=None,
        stderr_radps=None,
        flicker_hz=None,
        flicker_stderr_hz=None,
        candidates_radps=(),
        candidate_attenuation=(),
        aliased=False,
        power=None,
        false_alarm_probability=None,
        observed_modulation=None,
        modulation=None,
        prior=None,
    )
    fields.update(base)
    fields.update(extra)
    fields["reason"] = reason
    return SpinEstimate(**fields)


def _sinusoid_fit(t: np.ndarray, y: np.ndarray, f0: float, degree: int, span: float):
    """Least squares y ≈ poly(t; degree) + a cos 2πft + b sin 2πft.

    Returns (f Hz, σ_f Hz, amplitude / level, residuals), or None when the fit does not settle."""
    tc = t - t.mean()
    scale = 0.5 * span if span > 0 else 1.0
    x = tc / scale
    powers = np.vander(x, degree + 1, increasing=True)

    def design(f: float) -> np.ndarray:
        arg = 2.0 * np.pi * f * tc
        return np.column_stack([powers, np.cos(arg), np.sin(arg)])

    coef0, *_ = np.linalg.lstsq(design(f0), y, rcond=None)

    def resid(p: np.ndarray) -> np.ndarray:
        return design(p[-1]) @ p[:-1] - y

    half = 1.0 / span
    p0 = np.append(coef0, f0)
    lo = np.full(p0.size, -np.inf)
    hi = np.full(p0.size, np.inf)
    lo[-1] = max(f0 - half, 1e-12)
    hi[-1] = f0 + half
    sol = least_squares(resid, p0, bounds=(lo, hi), x_scale="jac", method="trf")
    p = sol.x
    dof = t.size - p.size
    rss = float(np.sum(sol.fun**2))
    jac = sol.jac
    try:
        cov = np.linalg.inv(jac.T @ jac) * (rss / dof)
    except np.linalg.LinAlgError:
        return None
    a, b = p[degree + 1], p[degree + 2]
    amp = math.hypot(a, b)
    level = p[0]
    f = float(p[-1])
    var_f = float(cov[-1, -1])
    at_bound = min(f - lo[-1], hi[-1] - f) < 1e-9 * max(f, 1.0)
    if not (var_f > 0 and math.isfinite(var_f)) or at_bound or level == 0:
        return None
    return f, math.sqrt(var_f), float(amp / abs(level)), sol.fun


def inliers(residuals: np.ndarray) -> np.ndarray:
    """Samples whose residual is within :data:`OUTLIER_CLIP_SIGMA` robust σ (1.4826 · MAD) of the median."""
    r = np.asarray(residuals, dtype=float)
    med = float(np.median(r))
    sigma = MAD_TO_SIGMA * float(np.median(np.abs(r - med)))
    if not sigma > 0:
        return np.ones(r.shape, dtype=bool)
    return np.abs(r - med) <= OUTLIER_CLIP_SIGMA * sigma


def measure_spin(
    t_s,
    brightness,
    *,
    options: SpinOptions | None = None,
    prior: SpinPrior | None = None,
) -> SpinEstimate:
    """Spin rate from one brightness series of a marked BB.

    Parameters
    ----------
    t_s : sample times (mid-exposure), s; 1-D, strictly increasing; frames may be missing.
    brightness : the BB's integrated brightness per sample (any unit), same shape.
    options : marking, exposure, plausible band, false-alarm level, trend and grid (:class:`SpinOptions`;
        default its defaults).
    prior : chooses between aliases (see :func:`spin_prior_from_lift`); never used when unaliased.

    Returns
    -------
    SpinEstimate : with ``rate_radps`` None and a ``reason`` when the series is too short, no peak is
    significant, the marking does not flicker, or the aliases cannot be told apart.

    Notes
    -----
    The samples are taken to lie on a frame clock of rate 1/median(Δt) (missing frames and small
    rolling-shutter offsets allowed); that rate sets the aliases.
    """
    return _measure(t_s, brightness, SpinOptions() if options is None else options, prior)


def _measure(t_s, brightness, opt: SpinOptions, prior: SpinPrior | None) -> SpinEstimate:
    t, y = series_arrays(t_s, brightness)
    mk = marking_named(opt.marking)
    lo_w, hi_w = opt.rate_band_radps
    exposure_s, max_false_alarm, trend_degree = opt.exposure_s, opt.max_false_alarm, opt.trend_degree

    n = int(t.size)
    span = float(t[-1] - t[0]) if n else 0.0
    fs = float(1.0 / np.median(np.diff(t))) if n > 1 else math.nan
    base = dict(
        at_t_s=float(t.mean()) if n else math.nan,
        span_s=(float(t[0]), float(t[-1])) if n else (math.nan, math.nan),
        n_points=n,
        n_outliers=0,
        sample_rate_hz=fs,
        marking=mk.name,
        cycles_per_turn=mk.cycles_per_turn,
        method="lomb-scargle",
        max_false_alarm=max_false_alarm,
    )
    if mk.cycles_per_turn == 0:
        return no_spin(base, f"unmarked BB (marking {mk.name!r}): its brightness does not follow the spin")
    if n < MIN_POINTS + trend_degree:
        return no_spin(
            base,
            f"too few points for a periodogram: {n} samples, at least {MIN_POINTS + trend_degree} needed",
        )
    c = mk.cycles_per_turn
    f_lo = c * lo_w / (2.0 * math.pi)
    f_hi = c * hi_w / (2.0 * math.pi)
    nyquist = 0.5 * fs
    search_lo = max(f_lo, MIN_CYCLES / span) if f_hi < nyquist else MIN_CYCLES / span
    search_hi = min(f_hi, nyquist)
    if not search_lo < search_hi:
        return no_spin(
            base,
            f"series too short: {span * 1e3:.3g} ms holds fewer than {MIN_CYCLES:g} flicker cycles of the "
            "plausible band",
        )

    # slow trend out, then the search
    tc = t - t.mean()
    x = tc / (0.5 * span)
    trend = np.polynomial.polynomial.polyval(x, np.polynomial.polynomial.polyfit(x, y, trend_degree))
    resid = y - trend
    if not np.any(np.abs(resid) > 1e-12 * max(1.0, float(np.max(np.abs(y))))):
        return no_spin(base, "brightness has no variation left after its slow trend: no flicker")
    grid = frequency_grid(t, search_lo, search_hi, oversample=opt.oversample)
    power = lomb_scargle(t, resid, grid)
    i = int(np.argmax(power))
    peak = float(power[i])
    fap = false_alarm_probability(peak, t_s=t, f_max_hz=search_hi, n_null_params=trend_degree + 1)
    base.update(power=peak, false_alarm_probability=fap)
    if fap > max_false_alarm:
        return no_spin(
            base,
            f"no significant flicker between {search_lo:.4g} and {search_hi:.4g} Hz: highest peak at "
            f"{grid[i]:.4g} Hz has false-alarm probability {fap:.2g} > {max_false_alarm:g}"
            + (
                f" (a slower flicker needs a longer series: {MIN_CYCLES:g} cycles)"
                if search_lo > f_lo
                else ""
            ),
        )
    fit = _sinusoid_fit(t, y, float(grid[i]), trend_degree, span)
    if fit is not None:  # one refit without outliers (a BB cut by the image edge, a glint)
        keep = inliers(fit[3])
        if not np.all(keep) and keep.sum() >= MIN_POINTS + trend_degree:
            fit = _sinusoid_fit(t[keep], y[keep], fit[0], trend_degree, span)
            base.update(n_points=int(keep.sum()), n_outliers=int((~keep).sum()), at_t_s=float(t[keep].mean()))
    if fit is None:
        return no_spin(base, f"the sinusoid fit at the peak ({grid[i]:.4g} Hz) did not settle")
    f_obs, sf, mod_obs, _ = fit
    base.update(flicker_hz=f_obs, flicker_stderr_hz=sf, observed_modulation=mod_obs)

    if f_hi < nyquist:
        cands = np.array([f_obs]) if f_lo <= f_obs <= f_hi else np.array([])
    else:
        cands = alias_frequencies(f_obs, fs, f_lo, f_hi)
    att = exposure_attenuation(cands, exposure_s)
    rates = tuple(float(2.0 * math.pi * f / c) for f in cands)
    base.update(candidates_radps=rates, candidate_attenuation=tuple(float(a) for a in att))
    base["aliased"] = len(rates) > 1
    if not rates:
        return no_spin(
            base,
            f"flicker at {f_obs:.4g} Hz maps to no spin rate in the plausible band "
            f"{lo_w:.4g}..{hi_w:.4g} rad/s",
        )

    est = no_spin(base, "")
    if len(rates) == 1:
        how = "lomb-scargle" if f_hi < nyquist else "lomb-scargle, the only alias in the plausible band"
        return with_choice(est, 0, how, None)
    if prior is None:
        return no_spin(
            base,
            f"aliased: flicker at {f_obs:.4g} Hz sampled at {fs:.6g} Hz fits {len(rates)} spin rates in the "
            "plausible band; give a prior (fitted lift) or a second clip at another frame rate",
        )
    k, why = pick_with_prior(np.array(rates), candidate_sigma_radps(est), prior)
    if k is None:
        return no_spin(base, f"aliased: {why}", prior=prior.source)
    return with_choice(est, k, f"lomb-scargle, alias chosen by prior ({prior.source})", prior.source)


def with_choice(est: SpinEstimate, k: int, method: str, prior_source: str | None) -> SpinEstimate:
    """``est`` (with candidates) reporting its candidate ``k`` as the rate."""
    att = est.candidate_attenuation[k]
    obs = est.observed_modulation
    return dataclasses.replace(
        est,
        rate_radps=est.candidates_radps[k],
        stderr_radps=candidate_sigma_radps(est),
        method=method,
        modulation=obs / att if obs is not None and att > 0 else None,
        prior=prior_source,
        reason=None,
    )


def fields_of(est: SpinEstimate) -> dict[str, Any]:
    return {f.name: getattr(est, f.name) for f in dataclasses.fields(est)}


def candidate_sigma_radps(est: SpinEstimate) -> float:
    """1σ of each candidate rate, rad/s (the flicker's σ through the marking; same for every alias)."""
    if est.flicker_stderr_hz is None:
        raise ValueError("estimate has no flicker frequency")
    return 2.0 * math.pi * est.flicker_stderr_hz / est.cycles_per_turn


def resolve_with_second_clip(first: SpinEstimate, second: SpinEstimate) -> SpinEstimate:
    """Choose the alias from two clips of the same spin at different frame rates.

    Each clip lists the spin rates its flicker allows; a rate that both allow (within
    :data:`CLIP_MATCH_Z` combined σ) and that is the only such rate is the answer, reported on the first
    clip's samples with the first clip's standard error. Both clips must see the same spin (two cameras on
    one shot, over the same stretch of flight).

    Parameters
    ----------
    first, second : :func:`measure_spin` results of the two clips (same marking, other frame rates).
    """
    if first.marking != second.marking:
        raise ValueError(
            f"second: marking {second.marking!r} differs from the first clip's {first.marking!r}"
        )
    base = fields_of(first)
    if not first.candidates_radps or not second.candidates_radps:
        missing = "first" if not first.candidates_radps else "second"
        return no_spin(base, f"the {missing} clip has no candidate spin rate")
    if math.isclose(first.sample_rate_hz, second.sample_rate_hz, rel_tol=1e-6):
        raise ValueError("second: a second clip must be at another frame rate to tell aliases apart")
    a = np.array(first.candidates_radps)
    b = np.array(second.candidates_radps)
    sa = candidate_sigma_radps(first)
    sb = candidate_sigma_radps(second)
    tol = CLIP_MATCH_Z * math.hypot(sa, sb)
    matches = [(i, j) for i in range(a.size) for j in range(b.size) if abs(a[i] - b[j]) <= tol]
    if len(matches) != 1:
        what = "no candidate" if not matches else f"{len(matches)} candidates"
        return no_spin(
            {
                **base,
                "candidates_radps": tuple(float(a[i]) for i, _ in matches) or first.candidates_radps,
                "candidate_attenuation": tuple(first.candidate_attenuation[i] for i, _ in matches)
                or first.candidate_attenuation,
            },
            f"aliased: {what} agree between the clips at {first.sample_rate_hz:.6g} and "
            f"{second.sample_rate_hz:.6g} Hz",
        )
    i, _ = matches[0]
    how = f"second clip at {second.sample_rate_hz:.6g} Hz"
    return with_choice(first, i, f"lomb-scargle, alias chosen by a {how}", how)


# ---------------------------------------------------------------------------------------------- along the flight


__all__ = [
    "CLIP_MATCH_Z",
    "DEFAULT_MAX_FALSE_ALARM",
    "DEFAULT_RATE_BAND_RADPS",
    "DEFAULT_TREND_DEGREE",
    "MIN_CYCLES",
    "MIN_POINTS",
    "OUTLIER_CLIP_SIGMA",
    "SpinEstimate",
    "SpinOptions",
    "candidate_sigma_radps",
    "fields_of",
    "inliers",
    "measure_spin",
    "no_spin",
    "resolve_with_second_clip",
    "with_choice",
]
