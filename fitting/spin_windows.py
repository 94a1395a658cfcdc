"""Spin along the flight: sliding windows of the brightness series and the spin decay fitted to them.

:func:`spin_vs_time` measures non-overlapping windows with one alias followed from window to window;
:func:`fit_spin_decay` fits an exponential decay (in time or distance flown) to their rates; a flight too
short for windows of their own is fitted at once by a chirped sinusoid (:func:`fit_spin_decay_coherent`).
SI: s, m, rad/s. Part of :mod:`fitting.spin`.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from scipy.optimize import least_squares

from .spin_aliases import SpinPrior, pick_with_prior
from .spin_estimate import (
    DEFAULT_TREND_DEGREE,
    MIN_POINTS,
    SpinEstimate,
    SpinOptions,
    candidate_sigma_radps,
    fields_of,
    inliers,
    measure_spin,
    no_spin,
    with_choice,
)
from .spin_periodogram import series_arrays

#: A window's alias follows the previous window's rate only when the nearest candidate is nearer than this
#: fraction of the distance to the next one.
CONTINUITY_FRACTION = 0.5
#: A decay constant is reported as resolved (τ or L given) only when it is this many σ above zero.
DECAY_RESOLVED_Z = 2.0
#: Fewest windows a decay fit is made from.
MIN_DECAY_WINDOWS = 3


# ---------------------------------------------------------------------------------------------- results


@dataclass(frozen=True)
class SpinSeries:
    """Spin along the flight: the whole series' estimate and one estimate per window.

    Attributes
    ----------
    overall : the estimate from all samples (it fixes the alias used for every window).
    windows : per-window estimates in time order (non-overlapping unless asked otherwise).
    window_points : samples per window; ``step_points`` samples between window starts.
    """

    overall: SpinEstimate
    windows: tuple[SpinEstimate, ...]
    window_points: int
    step_points: int


@dataclass(frozen=True)
class SpinDecay:
    """Exponential spin decay fitted to windowed rates: ω = ω₀ e^(−λ (x − x₀)), x time or distance.

    Attributes
    ----------
    per : "time" (x in s, λ in 1/s, scale τ = 1/λ in s) or "distance" (x in m, λ in 1/m, L = 1/λ in m).
    reference : x₀, s or m (the time, or distance flown, the rate ``rate0_radps`` refers to).
    rate0_radps, rate0_stderr_radps : ω at x₀ and its 1σ, rad/s (None when the fit did not settle).
    decay_constant, decay_constant_stderr : λ and its 1σ (1/s or 1/m; ≈ 0 when the spin hardly decays;
        None when the fit did not settle).
    scale, scale_stderr : τ (s) or L (m) and its 1σ; None when λ is not resolved above zero (see reason).
    n_windows : windows used (0 for the coherent fit of the whole series).
    reduced_chi2 : χ² per degree of freedom of the windowed fit (the standard errors are scaled up by its
        root when it exceeds 1); NaN for the coherent fit, whose noise level is its residual scatter.
    method : in words.
    reason : why no decay scale is reported (None when it is).
    """

    per: str
    reference: float
    rate0_radps: float | None
    rate0_stderr_radps: float | None
    decay_constant: float | None
    decay_constant_stderr: float | None
    scale: float | None
    scale_stderr: float | None
    n_windows: int
    reduced_chi2: float
    method: str
    reason: str | None


# ---------------------------------------------------------------------------------------------- input checks


# ---------------------------------------------------------------------------------------------- along the flight


def spin_vs_time(
    t_s,
    brightness,
    *,
    window_points: int = 32,
    step_points: int | None = None,
    options: SpinOptions | None = None,
    prior: SpinPrior | None = None,
) -> SpinSeries:
    """Spin along the flight from sliding windows of the brightness series.

    Each window is measured on its own. When the flicker may be aliased, the alias is anchored once — on
    the whole series' rate (:func:`measure_spin` with ``prior``) or, when the whole series gives none (its
    flicker changes too much along a long, decaying flight), on the first window with candidates under
    ``prior`` — and then followed from window to window (to the candidate nearest the straight-line
    extrapolation of the previous two windows' rates), so no window picks an alias of its own. A window
    whose flicker sits at a fold (near 0 or f_s/2 as seen) has no rate. Without an anchor the windows carry their candidates and no rate.

    Parameters
    ----------
    t_s, brightness : as for :func:`measure_spin`.
    window_points : samples per window (≥ :data:`MIN_POINTS` + the options' ``trend_degree``).
    step_points : samples between window starts; default ``window_points`` (non-overlapping windows, whose
        errors are independent, as :func:`fit_spin_decay` needs).
    Other parameters as for :func:`measure_spin`.
    """
    t, y = series_arrays(t_s, brightness)
    opt = SpinOptions() if options is None else options
    least = MIN_POINTS + opt.trend_degree
    if not (isinstance(window_points, int) and window_points >= least):
        raise ValueError(f"window_points must be an integer >= {least}, got {window_points!r}")
    step = window_points if step_points is None else step_points
    if not (isinstance(step, int) and step >= 1):
        raise ValueError(f"step_points must be a positive integer, got {step_points!r}")
    overall = measure_spin(t, y, options=opt, prior=prior)
    raw = [
        measure_spin(t[i : i + window_points], y[i : i + window_points], options=opt)
        for i in range(0, t.size - window_points + 1, step)
    ]
    return SpinSeries(overall, tuple(_follow_alias(raw, overall, prior)), window_points, step)


def _follow_alias(
    raw: list[SpinEstimate], overall: SpinEstimate, prior: SpinPrior | None
) -> list[SpinEstimate]:
    """Windows with their alias chosen: anchored on the whole series' rate (or the prior, on the first window
    with candidates), then followed from window to window to the candidate nearest the rate the previous two
    windows lead to (straight-line extrapolation, so a flicker passing a fold at k·f_s/2 keeps its branch)."""
    if not any(w.aliased for w in raw):
        return raw
    out: list[SpinEstimate] = []
    picks: list[tuple[float, float]] = []  # (time s, rate rad/s) of the windows with a rate so far
    source = ""

    def predicted(at_t_s: float) -> float | None:
        if not picks:
            return None
        if len(picks) == 1:
            return picks[-1][1]
        (t1, r1), (t2, r2) = picks[-2], picks[-1]
        return r2 + (r2 - r1) * (at_t_s - t2) / (t2 - t1)

    for w in raw:
        if w.rate_radps is not None:  # the only alias in the band
            picks.append((w.at_t_s, w.rate_radps))
            out.append(w)
            continue
        if not w.candidates_radps:
            out.append(w)
            continue
        cands = np.array(w.candidates_radps)
        ref = predicted(w.at_t_s)
        if ref is None:
            if overall.rate_radps is not None:
                ref, source = overall.rate_radps, "the whole series' rate"
            elif prior is not None:
                k, why = pick_with_prior(cands, candidate_sigma_radps(w), prior)
                if k is None:
                    out.append(no_spin(fields_of(w), f"aliased: {why}", prior=prior.source))
                    continue
                ref, source = float(cands[k]), f"prior ({prior.source})"
            else:
                out.append(w)  # aliased, no prior: the window's own reason says so
                continue
        dist = np.abs(cands - ref)
        order = np.argsort(dist)
        if cands.size > 1 and dist[order[0]] > CONTINUITY_FRACTION * dist[order[1]]:
            out.append(
                no_spin(
                    fields_of(w),
                    f"aliased: candidates {cands[order[0]]:.4g} and {cands[order[1]]:.4g} rad/s are about "
                    f"equally near the rate {ref:.4g} rad/s the previous windows lead to",
                )
            )
            continue
        k = int(order[0])
        picks.append((w.at_t_s, float(cands[k])))
        out.append(with_choice(w, k, f"lomb-scargle, alias followed from {source}", w.prior))
    return out


def fit_spin_decay(
    windows: Sequence[SpinEstimate],
    *,
    reference: float | None = None,
    distance_m=None,
) -> SpinDecay:
    """Exponential spin decay fitted to windowed rates, in time (τ) or in distance flown (L).

    ln ω_i = ln ω₀ − λ (x_i − x₀) by weighted least squares (weights ω_i² / σ_i², the rates' own standard
    errors), x the windows' times or, with ``distance_m``, the distance flown at each window's time. The
    standard errors come from the fit's covariance, scaled up by √(reduced χ²) when the scatter of the
    rates says their σ were too small.

    Parameters
    ----------
    windows : per-window estimates (e.g. ``spin_vs_time(...).windows``); those without a rate are skipped;
        their spans must not overlap (independent errors).
    reference : x₀, s (or m with ``distance_m``); default the first used window's start (time) or 0 m.
    distance_m : distance flown at each window's ``at_t_s``, m (aligned with ``windows``), to fit decay per
        distance; None fits per time.

    Returns
    -------
    SpinDecay : the scale (τ or L) is None, with a reason, when λ is not resolved above zero.
    """
    ws = list(windows)
    per = "time" if distance_m is None else "distance"
    if distance_m is not None:
        d = np.asarray(distance_m, dtype=float)
        if d.shape != (len(ws),):
            raise ValueError(f"distance_m must have one value per window ({len(ws)}), got shape {d.shape}")
        if not np.all(np.isfinite(d)):
            raise ValueError("distance_m has non-finite values")
    use = [i for i, w in enumerate(ws) if w.rate_radps is not None and w.stderr_radps is not None]
    spans = sorted(ws[i].span_s for i in use)
    for (_, end), (start, _) in zip(spans, spans[1:], strict=False):
        if start <= end:
            raise ValueError("windows overlap: the decay fit needs independent (non-overlapping) windows")
    if len(use) < MIN_DECAY_WINDOWS:
        raise ValueError(
            f"windows: a decay fit needs at least {MIN_DECAY_WINDOWS} windows with a measured rate, got {len(use)}"
        )
    rate = np.array([ws[i].rate_radps for i in use], dtype=float)
    sig = np.array([ws[i].stderr_radps for i in use], dtype=float)
    if distance_m is None:
        x = np.array([ws[i].at_t_s for i in use])
        x0 = float(ws[use[0]].span_s[0]) if reference is None else float(reference)
    else:
        x = np.asarray(distance_m, dtype=float)[use]
        x0 = 0.0 if reference is None else float(reference)
    if not math.isfinite(x0):
        raise ValueError(f"reference must be finite, got {reference!r}")
    ly = np.log(rate)
    ls = sig / rate
    a = np.column_stack([np.ones_like(x), -(x - x0)])
    wsq = 1.0 / ls
    coef, *_ = np.linalg.lstsq(a * wsq[:, None], ly * wsq, rcond=None)
    cov = np.linalg.inv((a * wsq[:, None]).T @ (a * wsq[:, None]))
    dof = len(use) - 2
    chi2 = float(np.sum(((ly - a @ coef) / ls) ** 2))
    red = chi2 / dof if dof > 0 else math.nan
    if dof > 0 and red > 1:
        cov = cov * red
    w0 = float(math.exp(coef[0]))
    w0_sig = w0 * math.sqrt(cov[0, 0])
    lam = float(coef[1])
    lam_sig = math.sqrt(cov[1, 1])
    unit = "s" if per == "time" else "m"
    method = f"weighted fit of ln ω to {len(use)} windowed rates, exponential in {per}"
    if lam > DECAY_RESOLVED_Z * lam_sig:
        return SpinDecay(
            per, x0, w0, w0_sig, lam, lam_sig, 1.0 / lam, lam_sig / lam**2, len(use), red, method, None
        )
    reason = (
        f"decay not resolved: λ = {lam:.3g} ± {lam_sig:.2g} 1/{unit} is not {DECAY_RESOLVED_Z:g} σ above zero "
        "(flight too short for this decay)"
    )
    return SpinDecay(per, x0, w0, w0_sig, lam, lam_sig, None, None, len(use), red, method, reason)


#: Grid of the coherent decay fit: rates at the mean time (± this many cycles over the span, this many steps)
#: and decay constants (± :data:`MAX_DECAY_OVER_SERIES` over the span, at most this many steps).
_COHERENT_RATE_CYCLES = 1.5
_COHERENT_RATE_STEPS = 31
_COHERENT_DECAY_STEPS_MAX = 200
#: Largest decay the coherent fit accepts over the series, λ·(x_last − x_first): the spin falling by more
#: than a factor e within one series is no decay a BB shows (its spin lasts seconds) but a brightness that
#: is not a clean flicker, which a free chirp follows into nonsense.  # common practice, no published source
MAX_DECAY_OVER_SERIES = 1.0
#: Largest phase change (rad) at the series' ends between neighbouring decay constants of the grid.
_COHERENT_PHASE_STEP_RAD = 0.3


def _decay_phase(t: np.ndarray, x: np.ndarray, x_m: float, lam: float, per_time: bool) -> np.ndarray:
    """∫ e^(−λ (x(t) − x_m)) dt, s, up to a constant: closed form in time (x = t, from x_m), trapezoids in
    distance (from the first sample)."""
    if per_time:
        d = x - x_m
        if abs(lam) * float(np.max(np.abs(d))) < 1e-3:  # series of (1 − e^(−λd))/λ, exact to ~1e-14
            ld = lam * d
            return d * (1.0 - ld / 2.0 + ld * ld / 6.0 - ld**3 / 24.0)
        return -np.expm1(-lam * d) / lam
    g = np.exp(-lam * (x - x_m))
    return np.concatenate([[0.0], np.cumsum(0.5 * (g[1:] + g[:-1]) * np.diff(t))])


def fit_spin_decay_coherent(
    t_s,
    brightness,
    start: SpinEstimate,
    *,
    reference: float | None = None,
    distance_m=None,
    trend_degree: int = DEFAULT_TREND_DEGREE,
) -> SpinDecay:
    """Exponential spin decay from the whole brightness series at once (one phase-coherent model).

    b(t) = poly(t) + a cos φ(t) + b sin φ(t), φ(t) = c ∫ ω dt, ω = ω_m e^(−λ (x − x_m)), with x the time
    (s) or, with ``distance_m``, the distance flown (m) at each sample, x_m its mean and c the marking's
    cycles per turn. A grid over (ω_m, λ) with the linear parameters solved at each node, then a
    least-squares refinement of all; standard errors from the Jacobian with the residual scatter as the
    noise. Where windows are too short to hold a flicker of their own (a short, fast-decaying flight) this
    still sees the decay, since the flicker's phase drifts over the whole series.

    Parameters
    ----------
    t_s, brightness : the series (as for :func:`measure_spin`).
    start : the series' :func:`measure_spin` result with a rate; its alias is kept (the fit stays within
        a cycle and a half over the span of it).
    reference : x₀ for the reported ω₀ (s, or m); default the first sample's time (or distance).
    distance_m : distance flown at each sample, m (same shape as ``t_s``); None fits per time.
    trend_degree : degree of the slow brightness trend fitted with the flicker.
    """
    t, y = series_arrays(t_s, brightness)
    if start.rate_radps is None:
        raise ValueError(f"start: needs an estimate with a rate, got none ({start.reason})")
    per_time = distance_m is None
    if per_time:
        x = t
    else:
        _, x = series_arrays(t, distance_m, v_name="distance_m")
    n = t.size
    p_lin = trend_degree + 3
    if n < MIN_POINTS + trend_degree:
        raise ValueError(
            f"t_s: a coherent decay fit needs at least {MIN_POINTS + trend_degree} samples, got {n}"
        )
    c = start.cycles_per_turn
    span = float(t[-1] - t[0])
    x_m = float(x.mean())
    tn = (t - t.mean()) / (0.5 * span)
    poly = np.vander(tn, trend_degree + 1, increasing=True)
    x_span = float(x.max() - x.min())
    w_start = float(start.rate_radps)
    dw = 2.0 * math.pi / c * _COHERENT_RATE_CYCLES / span
    rates = w_start + np.linspace(-dw, dw, _COHERENT_RATE_STEPS)
    lam_step = _COHERENT_PHASE_STEP_RAD / max(c * w_start * (0.5 * span) * (0.5 * x_span) / 2.0, 1e-300)
    lam_lo, lam_hi = -MAX_DECAY_OVER_SERIES / x_span, MAX_DECAY_OVER_SERIES / x_span
    n_lam = int(min(_COHERENT_DECAY_STEPS_MAX, max(11, math.ceil((lam_hi - lam_lo) / lam_step))))
    best = (math.inf, w_start, 0.0)
    for lam in np.linspace(lam_lo, lam_hi, n_lam):
        psi = _decay_phase(t, x, x_m, float(lam), per_time)
        for w in rates:
            ph = c * w * psi
            a = np.column_stack([poly, np.cos(ph), np.sin(ph)])
            coef, *_ = np.linalg.lstsq(a, y, rcond=None)
            rss = float(np.sum((a @ coef - y) ** 2))
            if rss < best[0]:
                best = (rss, float(w), float(lam))

    def refine(keep: np.ndarray, p0: np.ndarray | None):
        tk, xk, yk, pk = t[keep], x[keep], y[keep], poly[keep]

        def design(w: float, lam: float) -> np.ndarray:
            ph = (
                c * w * _decay_phase(tk, xk, x_m, lam, per_time)
                if per_time
                else c * w * _decay_phase(t, x, x_m, lam, per_time)[keep]
            )
            return np.column_stack([pk, np.cos(ph), np.sin(ph)])

        if p0 is None:
            coef0, *_ = np.linalg.lstsq(design(best[1], best[2]), yk, rcond=None)
            p0 = np.r_[coef0, best[1], best[2]]
        return least_squares(lambda p: design(p[-2], p[-1]) @ p[:-2] - yk, p0, x_scale="jac", method="lm")

    keep = np.ones(n, dtype=bool)
    sol = refine(keep, None)
    inl = inliers(sol.fun)
    if not np.all(inl) and inl.sum() >= MIN_POINTS + trend_degree:  # one refit without outliers
        keep = inl
        sol = refine(keep, sol.x)
    dof = int(keep.sum()) - (p_lin + 2)
    cov = np.linalg.pinv(sol.jac.T @ sol.jac) * (float(np.sum(sol.fun**2)) / dof)
    w_m, lam = float(sol.x[-2]), float(sol.x[-1])
    var_w, var_l, cov_wl = float(cov[-2, -2]), float(cov[-1, -1]), float(cov[-2, -1])
    if per_time:
        x0 = float(t[0]) if reference is None else float(reference)
    else:
        x0 = float(x[0]) if reference is None else float(reference)
    if not math.isfinite(x0):
        raise ValueError(f"reference must be finite, got {reference!r}")
    e = math.exp(-lam * (x0 - x_m))
    w_ref = w_m * e
    g = np.array([e, -w_ref * (x0 - x_m)])
    var_ref = float(g @ np.array([[var_w, cov_wl], [cov_wl, var_l]]) @ g)
    lam_sig = math.sqrt(max(var_l, 0.0))
    per = "time" if per_time else "distance"
    unit = "s" if per_time else "m"
    if not (lam_sig > 0 and math.isfinite(lam_sig) and math.isfinite(var_ref) and var_ref > 0):
        why = f"decay not measured: the coherent fit did not settle ({sol.message})"
        return SpinDecay(per, x0, None, None, None, None, None, None, 0, math.nan, "coherent phase fit", why)
    if abs(lam) * x_span > MAX_DECAY_OVER_SERIES:
        why = (
            f"decay not measured: the coherent fit wants the spin to change by a factor "
            f"{math.exp(abs(lam) * x_span):.2g} within the series (more than e): the brightness is not a "
            "clean flicker"
        )
        return SpinDecay(per, x0, None, None, None, None, None, None, 0, math.nan, "coherent phase fit", why)
    method = f"coherent phase fit of {int(keep.sum())} samples, exponential in {per}" + (
        f" ({n - int(keep.sum())} outliers left out)" if not np.all(keep) else ""
    )
    if lam > DECAY_RESOLVED_Z * lam_sig:
        return SpinDecay(
            per,
            x0,
            w_ref,
            math.sqrt(max(var_ref, 0.0)),
            lam,
            lam_sig,
            1.0 / lam,
            lam_sig / lam**2,
            0,
            math.nan,
            method,
            None,
        )
    reason = (
        f"decay not resolved: λ = {lam:.3g} ± {lam_sig:.2g} 1/{unit} is not {DECAY_RESOLVED_Z:g} σ above zero "
        "(flight too short for this decay)"
    )
    return SpinDecay(
        per, x0, w_ref, math.sqrt(max(var_ref, 0.0)), lam, lam_sig, None, None, 0, math.nan, method, reason
    )


__all__ = [
    "CONTINUITY_FRACTION",
    "DECAY_RESOLVED_Z",
    "MAX_DECAY_OVER_SERIES",
    "MIN_DECAY_WINDOWS",
    "SpinDecay",
    "SpinSeries",
    "fit_spin_decay",
    "fit_spin_decay_coherent",
    "spin_vs_time",
]
