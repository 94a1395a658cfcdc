"""Spin rate measured from a marked BB's brightness flicker, and its decay along the flight.

A trajectory fixes the lift force, not the spin rate. A BB marked so that its brightness changes as it
turns flickers at a frequency proportional to its spin; this module turns a brightness series (one value
per detection, uneven times allowed) into a spin rate with an honest uncertainty:

1. the slow trend of the brightness (lighting along the path, apparent size) is removed with a low-order
   polynomial in time;
2. a generalised Lomb–Scargle periodogram (a least-squares sinusoid with a floating mean at each trial
   frequency) finds the flicker; its false-alarm probability says whether the peak is real;
3. a least-squares sinusoid fit around the peak refines the frequency and gives its standard error;
4. the flicker frequency becomes a spin rate through the marking (flicker cycles per turn); when the
   flicker may exceed half the frame rate every alias in a plausible band is listed and one is chosen only
   with a stated prior (the spin implied by the fitted lift under a named lift law, or a second clip at
   another frame rate);
5. the exposure's smoothing of the flicker (a flicker at f integrated over T_e is scaled by
   |sinc(f·T_e)|) is taken out of the reported modulation depth, candidate by candidate.

Sliding windows give the spin along the flight (:func:`spin_vs_time`) and an exponential fit to them, in
time or in distance flown, gives the spin decay (:func:`fit_spin_decay`); a flight too short for windows of
their own is fitted at once by a chirped sinusoid (:func:`fit_spin_decay_coherent`). One refit leaves out
samples more than :data:`OUTLIER_CLIP_SIGMA` robust σ off (a BB cut by the image edge). For one shot,
:func:`measure_shot_spin` does all of it and :func:`shot_spin_to_json` gives ``fit.json``'s record.

The brightness wanted is the BB's own light: the frame minus the background, plus the background the BB
hides (Σ (frame − background) + Σ coverage · background). Frame minus background alone mixes in the wall
texture passing behind the ball, which on the rendered ``lane-spin`` scene moves the rate by 2 % and the
decay time of a short, fast-decaying flight by half (``tests/bench/bench_spin.py``).

Everything here is SI: seconds, hertz (flicker cycles per second), rad/s (spin). rpm only at the edges.
Failure to measure is a value (``rate_radps`` None with a ``reason``); bad arrays raise ``ValueError``.

References
----------
Lomb (1976), "Least-squares frequency analysis of unequally spaced data", Astrophys. Space Sci. 39:447.
Scargle (1982), "Studies in astronomical time series analysis II", Astrophys. J. 263:835.
Zechmeister & Kürster (2009), "The generalised Lomb-Scargle periodogram", Astron. Astrophys. 496:577,
eqs. 4–20 (the floating-mean form used here).
Baluev (2008), "Assessing the statistical significance of periodogram peaks", MNRAS 385:1279, Table 1 and
eq. 6 (the false-alarm probability; read as implemented in astropy's LombScargle).
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy.optimize import least_squares
from scipy.special import gammaln

from hopscope.shared.constants import MAD_TO_SIGMA
from hopscope.shared.parse import finite_or_none, is_finite_number

from .laws import LinearLift, SaturatingLift, spin_ratio

# ---------------------------------------------------------------------------------------------- settings

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
#: Trial frequencies per periodogram peak width 1/T.
#: VanderPlas (2018), "Understanding the Lomb-Scargle periodogram", ApJS 236:16, §7.1 (5–10). # from memory
DEFAULT_OVERSAMPLE = 10
#: Degree of the polynomial in time removed from the brightness before the search (1: a straight line).
DEFAULT_TREND_DEGREE = 1
#: A prior picks an alias only when the best candidate is this many times more likely than the next one.
#: # common practice, no published source
PRIOR_ODDS_MIN = 100.0
#: ... and lies within this many combined standard deviations of the prior.
PRIOR_MATCH_Z = 3.0
#: A window's alias follows the previous window's rate only when the nearest candidate is nearer than this
#: fraction of the distance to the next one.
CONTINUITY_FRACTION = 0.5
#: Two clips agree on a rate when their candidates differ by at most this many combined σ.
CLIP_MATCH_Z = 3.0
#: Relative uncertainty allowed for a published lift relation applied to a BB (a 6 mm plastic sphere is not
#: the ball the relation was measured on).  # common practice, no published source
DEFAULT_LIFT_LAW_REL_SIGMA = 0.25
#: A decay constant is reported as resolved (τ or L given) only when it is this many σ above zero.
DECAY_RESOLVED_Z = 2.0
#: Fewest windows a decay fit is made from.
MIN_DECAY_WINDOWS = 3
#: Samples further than this many robust σ from a fit are left out of one refit.
#: # common practice, no published source
OUTLIER_CLIP_SIGMA = 4.0
#: Trial-frequency × sample products evaluated at once (memory bound of the periodogram).
_CHUNK = 2_000_000


# ---------------------------------------------------------------------------------------------- markings


@dataclass(frozen=True)
class Marking:
    """How a BB is marked and seen, and how many flicker cycles one turn of the ball makes.

    Attributes
    ----------
    name : key in :data:`MARKINGS`.
    cycles_per_turn : flicker cycles per revolution (0: this marking does not flicker).
    description : the geometry in words.
    """

    name: str
    cycles_per_turn: int
    description: str


#: The markings the estimator knows. A BB's backspin axis is perpendicular to the flight plane, so a camera
#: looking square at the flight plane (the project's set-up) looks along the spin axis.
#:
#: Thinking it through for a ball half dark (the dividing great circle contains the spin axis):
#:
#: - axis toward the camera: the camera sees a disk, half dark, whose dividing line turns once per turn.
#:   Under light along the line of sight the total brightness does not change at all; under light from one
#:   side (from above, as usual) the bright half is lit best once per turn: one cycle per turn.
#: - axis in the image plane: the bright hemisphere faces the camera once per turn (all bright, then half,
#:   then all dark, then half): one cycle per turn.
#:
#: Two cycles per turn come from a marking that looks the same after half a turn: a dark stripe along a
#: great circle through the axis (axis in the image plane: the stripe is seen as a dark band across the
#: middle of the disk twice per turn, when its plane holds the line of sight, and edge-on at the limb in
#: between; axis toward the camera: a dark diameter that turns, lit from one side), or two opposite
#: quarters dark. A ball half dark across its equator (dividing circle perpendicular to the axis)
#: seen along the axis does not flicker at all. A strongly non-sinusoidal flicker also has a second harmonic;
#: the periodogram's highest peak is the fundamental unless the marking is nearly symmetric under a half
#: turn, which is what the stripe markings say.
MARKINGS: dict[str, Marking] = {
    "half-axis-toward-camera": Marking(
        "half-axis-toward-camera",
        1,
        "half dark (dividing circle through the spin axis), axis along the line of sight, lit from one side",
    ),
    "half-axis-in-image": Marking(
        "half-axis-in-image",
        1,
        "half dark (dividing circle through the spin axis), axis in the image plane",
    ),
    "stripe-axis-toward-camera": Marking(
        "stripe-axis-toward-camera",
        2,
        "dark stripe along a great circle through the spin axis, axis along the line of sight, lit from one side",
    ),
    "stripe-axis-in-image": Marking(
        "stripe-axis-in-image",
        2,
        "dark stripe along a great circle through the spin axis, axis in the image plane",
    ),
    "none": Marking("none", 0, "unmarked BB: its brightness does not follow the spin"),
}

#: Default marking: a half-dark BB seen by a camera square to the flight plane, so along the backspin
#: axis, lit from above (the project's set-up and the ``lane-spin`` scene): one flicker cycle per turn.
DEFAULT_MARKING = "half-axis-toward-camera"


def marking_named(name: str) -> Marking:
    """The :class:`Marking` called ``name``; ``ValueError`` naming the choices for any other."""
    if name not in MARKINGS:
        raise ValueError(f"marking: unknown marking {name!r}; choose one of {sorted(MARKINGS)}")
    return MARKINGS[name]


# ---------------------------------------------------------------------------------------------- results


@dataclass(frozen=True)
class SpinPrior:
    """What is known about the spin rate before the flicker is read, to choose between aliases.

    Attributes
    ----------
    rate_radps : expected spin rate, rad/s (> 0).
    stderr_radps : its 1σ uncertainty, rad/s (> 0).
    source : where it comes from, in words (shown in the result's ``method``).
    """

    rate_radps: float
    stderr_radps: float
    source: str

    def __post_init__(self) -> None:
        for name in ("rate_radps", "stderr_radps"):
            value = getattr(self, name)
            if not (math.isfinite(value) and value > 0):
                raise ValueError(f"prior {name} must be positive and finite, got {value!r}")
        if not self.source:
            raise ValueError("prior source must name where the prior comes from")


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


def _series(t_s, values, t_name: str = "t_s", v_name: str = "brightness") -> tuple[np.ndarray, np.ndarray]:
    t = np.asarray(t_s, dtype=float)
    y = np.asarray(values, dtype=float)
    if t.ndim != 1:
        raise ValueError(f"{t_name} must be a 1-D array of times in s, got shape {t.shape}")
    if y.shape != t.shape:
        raise ValueError(f"{v_name} must have the shape of {t_name} {t.shape}, got {y.shape}")
    if not np.all(np.isfinite(t)):
        raise ValueError(f"{t_name} has non-finite values")
    if not np.all(np.isfinite(y)):
        raise ValueError(f"{v_name} has non-finite values")
    if t.size > 1 and np.any(np.diff(t) <= 0):
        raise ValueError(f"{t_name} must be strictly increasing")
    return t, y


def _frequencies(frequencies_hz) -> np.ndarray:
    f = np.asarray(frequencies_hz, dtype=float)
    if f.ndim != 1 or f.size == 0:
        raise ValueError(f"frequencies_hz must be a non-empty 1-D array, got shape {f.shape}")
    if not np.all(np.isfinite(f)) or np.any(f <= 0):
        raise ValueError("frequencies_hz must be positive and finite")
    return f


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


# ---------------------------------------------------------------------------------------------- periodogram


def lomb_scargle(t_s, values, frequencies_hz, *, fit_mean: bool = True) -> np.ndarray:
    """Normalised Lomb–Scargle power of a series at trial frequencies (uneven times allowed).

    At each frequency f the series is fitted by least squares with a·cos(2πft) + b·sin(2πft) (+ c with
    ``fit_mean``, the floating mean of Zechmeister & Kürster 2009; without it the series is centred on its
    mean first, the classic form of Lomb 1976 and Scargle 1982). The power is the fraction of the variance
    about the mean that the sinusoid explains, P = 1 − χ²(f)/χ²₀, between 0 and 1.

    Parameters
    ----------
    t_s : sample times, s (1-D, strictly increasing).
    values : the series (any unit), same shape.
    frequencies_hz : trial frequencies, Hz (cycles per second; > 0).
    fit_mean : floating mean (True) or classic centred form (False).

    Returns
    -------
    power : ndarray like ``frequencies_hz``, dimensionless in [0, 1].

    References
    ----------
    Lomb (1976), Astrophys. Space Sci. 39:447; Scargle (1982), Astrophys. J. 263:835; Zechmeister & Kürster
    (2009), Astron. Astrophys. 496:577, eqs. 4–20.
    """
    t, y = _series(t_s, values, v_name="values")
    f = _frequencies(frequencies_hz)
    if t.size < 3:
        raise ValueError(f"values: a periodogram needs at least 3 samples, got {t.size}")
    y = y - y.mean()
    yy = float(np.mean(y * y))
    if yy == 0:
        raise ValueError("values are constant: no periodogram")
    t = t - t.mean()  # only phases matter; centring keeps the trigonometry well conditioned
    out = np.empty(f.size)
    step = max(1, _CHUNK // t.size)
    for i in range(0, f.size, step):
        arg = 2.0 * np.pi * f[i : i + step, None] * t[None, :]
        c = np.cos(arg)
        s = np.sin(arg)
        yc = (c @ y) / t.size
        ys = (s @ y) / t.size
        cc = np.mean(c * c, axis=1)
        ss = np.mean(s * s, axis=1)
        cs = np.mean(c * s, axis=1)
        if fit_mean:  # centred sums (Zechmeister & Kürster 2009, eqs. 10-15); y is centred already
            mc = c.mean(axis=1)
            ms = s.mean(axis=1)
            cc = cc - mc * mc
            ss = ss - ms * ms
            cs = cs - mc * ms
        d = cc * ss - cs * cs
        out[i : i + step] = (ss * yc * yc + cc * ys * ys - 2.0 * cs * yc * ys) / (yy * d)
    return out


def frequency_grid(
    t_s, f_min_hz: float, f_max_hz: float, *, oversample: int = DEFAULT_OVERSAMPLE
) -> np.ndarray:
    """Trial frequencies from ``f_min_hz`` to ``f_max_hz`` (Hz), ``oversample`` per peak width 1/T."""
    t = np.asarray(t_s, dtype=float)
    span = float(t[-1] - t[0])
    if not (span > 0):
        raise ValueError("t_s must span a positive time")
    if oversample < 1:
        raise ValueError(f"oversample must be >= 1, got {oversample!r}")
    if not (0 < f_min_hz < f_max_hz):
        raise ValueError(f"frequency band must satisfy 0 < low < high, got {f_min_hz!r}, {f_max_hz!r}")
    df = 1.0 / (oversample * span)
    n = int(math.ceil((f_max_hz - f_min_hz) / df)) + 1
    return np.linspace(f_min_hz, f_max_hz, n)


def false_alarm_probability(power: float, *, t_s, f_max_hz: float, n_null_params: int = 1) -> float:
    """Probability that white noise alone gives a periodogram peak of ``power`` or more below ``f_max_hz``.

    The alias-free approximation of Baluev (2008), eq. 6, for the normalised ('standard') power:
    FAP = 1 − (1 − P₁) e^(−τ), P₁ = (1 − z)^((N−d_K)/2) the single-frequency probability and
    τ = γ(N_H) · W · (1 − z)^((N_K−1)/2) · √(N_H z / 2) the Davies term, with N_H = N − d_H, N_K = N − d_K,
    d_K = d_H + 2, W = f_max · √(4π Var(t)) and γ(n) = √(2/n) Γ(n/2) / Γ((n−1)/2).

    Parameters
    ----------
    power : normalised peak power z (0..1).
    t_s : the sample times, s.
    f_max_hz : highest frequency searched, Hz.
    n_null_params : parameters of the no-signal model d_H (1: a constant; a removed trend of degree k: k + 1).

    References
    ----------
    Baluev (2008), MNRAS 385:1279, Table 1 and eqs. 5–6 (read as implemented in astropy's LombScargle,
    ``false_alarm_probability(method="baluev")``).
    """
    t = np.asarray(t_s, dtype=float)
    n = t.size
    n_h = n - n_null_params
    n_k = n_h - 2
    if n_k < 2:
        raise ValueError(f"t_s: too few samples ({n}) for a false-alarm probability")
    z = float(np.clip(power, 0.0, 1.0))
    single = (1.0 - z) ** (0.5 * n_k)
    gamma = math.sqrt(2.0 / n_h) * math.exp(gammaln(0.5 * n_h) - gammaln(0.5 * (n_h - 1)))
    w = f_max_hz * math.sqrt(4.0 * math.pi * float(np.var(t)))
    tau = gamma * w * (1.0 - z) ** (0.5 * (n_k - 1)) * math.sqrt(0.5 * n_h * z)
    return float(-math.expm1(-tau) + single * math.exp(-tau))


# ---------------------------------------------------------------------------------------------- aliases


def exposure_attenuation(frequency_hz, exposure_s: float) -> np.ndarray:
    """|sinc(f·T_e)|: how much integrating over the exposure T_e (s) shrinks a flicker at f (Hz).

    A sinusoid averaged over a window of length T_e centred on the sample time keeps its phase and is
    scaled by sin(π f T_e)/(π f T_e) (the Fourier transform of a box; numpy's normalised sinc).
    """
    return np.abs(np.sinc(np.asarray(frequency_hz, dtype=float) * exposure_s))


def alias_frequencies(flicker_hz: float, sample_rate_hz: float, f_lo_hz: float, f_hi_hz: float) -> np.ndarray:
    """Every true frequency in [f_lo, f_hi] (Hz) that uniform sampling at ``sample_rate_hz`` shows as
    ``flicker_hz``: f_obs + k·f_s (k ≥ 0) and k·f_s − f_obs (k ≥ 1), ascending."""
    k_max = int(math.ceil((f_hi_hz + flicker_hz) / sample_rate_hz)) + 1
    k = np.arange(0, k_max + 1)
    cand = np.concatenate([flicker_hz + k * sample_rate_hz, k[1:] * sample_rate_hz - flicker_hz])
    cand = cand[(cand >= f_lo_hz) & (cand <= f_hi_hz)]
    return np.unique(cand)


# ---------------------------------------------------------------------------------------------- estimator


def _no_spin(base: dict[str, Any], reason: str, **extra: Any) -> SpinEstimate:
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


def _inliers(residuals: np.ndarray) -> np.ndarray:
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
    t, y = _series(t_s, brightness)
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
        return _no_spin(base, f"unmarked BB (marking {mk.name!r}): its brightness does not follow the spin")
    if n < MIN_POINTS + trend_degree:
        return _no_spin(
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
        return _no_spin(
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
        return _no_spin(base, "brightness has no variation left after its slow trend: no flicker")
    grid = frequency_grid(t, search_lo, search_hi, oversample=opt.oversample)
    power = lomb_scargle(t, resid, grid)
    i = int(np.argmax(power))
    peak = float(power[i])
    fap = false_alarm_probability(peak, t_s=t, f_max_hz=search_hi, n_null_params=trend_degree + 1)
    base.update(power=peak, false_alarm_probability=fap)
    if fap > max_false_alarm:
        return _no_spin(
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
        keep = _inliers(fit[3])
        if not np.all(keep) and keep.sum() >= MIN_POINTS + trend_degree:
            fit = _sinusoid_fit(t[keep], y[keep], fit[0], trend_degree, span)
            base.update(n_points=int(keep.sum()), n_outliers=int((~keep).sum()), at_t_s=float(t[keep].mean()))
    if fit is None:
        return _no_spin(base, f"the sinusoid fit at the peak ({grid[i]:.4g} Hz) did not settle")
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
        return _no_spin(
            base,
            f"flicker at {f_obs:.4g} Hz maps to no spin rate in the plausible band "
            f"{lo_w:.4g}..{hi_w:.4g} rad/s",
        )

    est = _no_spin(base, "")
    if len(rates) == 1:
        how = "lomb-scargle" if f_hi < nyquist else "lomb-scargle, the only alias in the plausible band"
        return _with_choice(est, 0, how, None)
    if prior is None:
        return _no_spin(
            base,
            f"aliased: flicker at {f_obs:.4g} Hz sampled at {fs:.6g} Hz fits {len(rates)} spin rates in the "
            "plausible band; give a prior (fitted lift) or a second clip at another frame rate",
        )
    k, why = _pick_with_prior(np.array(rates), _candidate_sigma_radps(est), prior)
    if k is None:
        return _no_spin(base, f"aliased: {why}", prior=prior.source)
    return _with_choice(est, k, f"lomb-scargle, alias chosen by prior ({prior.source})", prior.source)


def _with_choice(est: SpinEstimate, k: int, method: str, prior_source: str | None) -> SpinEstimate:
    """``est`` (with candidates) reporting its candidate ``k`` as the rate."""
    att = est.candidate_attenuation[k]
    obs = est.observed_modulation
    return dataclasses.replace(
        est,
        rate_radps=est.candidates_radps[k],
        stderr_radps=_candidate_sigma_radps(est),
        method=method,
        modulation=obs / att if obs is not None and att > 0 else None,
        prior=prior_source,
        reason=None,
    )


def _pick_with_prior(rates: np.ndarray, sigma: float, prior: SpinPrior) -> tuple[int | None, str]:
    z = np.abs(rates - prior.rate_radps) / math.hypot(sigma, prior.stderr_radps)
    order = np.argsort(z)
    best = int(order[0])
    if z[best] > PRIOR_MATCH_Z:
        return None, (
            f"the prior {prior.rate_radps:.4g} ± {prior.stderr_radps:.2g} rad/s ({prior.source}) matches no "
            f"candidate within {PRIOR_MATCH_Z:g} σ"
        )
    if rates.size > 1:
        second = int(order[1])
        log_odds = 0.5 * (z[second] ** 2 - z[best] ** 2)
        if log_odds < math.log(PRIOR_ODDS_MIN):
            return None, (
                f"the prior {prior.rate_radps:.4g} ± {prior.stderr_radps:.2g} rad/s ({prior.source}) does not "
                f"separate the candidates {rates[best]:.4g} and {rates[second]:.4g} rad/s"
            )
    return best, ""


def spin_prior_from_lift(
    lift_coefficient: float,
    lift_stderr: float,
    *,
    speed_mps: float,
    radius_m: float,
    law: LinearLift | SaturatingLift | None = None,
    law_rel_sigma: float = DEFAULT_LIFT_LAW_REL_SIGMA,
    source: str | None = None,
) -> SpinPrior:
    """The spin implied by a fitted lift coefficient under a lift law C_L(S), as a prior for the aliases.

    ω = S · u / r with S = law⁻¹(C_L). Its 1σ combines the lift coefficient's standard error (propagated
    through the law) with ``law_rel_sigma`` · ω, the allowance for the law itself.

    Parameters
    ----------
    lift_coefficient, lift_stderr : fitted C_L at the time of the rate (dimensionless) and its 1σ.
    speed_mps : air speed at that time, m/s.
    radius_m : BB radius, m.
    law : a lift law of :mod:`fitting.laws`; default the published saturating form
        C_L = 1.12 S / (0.583 + 2.333 S) (:class:`SaturatingLift` with its defaults).
    law_rel_sigma : relative uncertainty allowed for the law (default
        :data:`DEFAULT_LIFT_LAW_REL_SIGMA`).
    source : text naming the prior (default: the law and the fitted value).
    """
    law = SaturatingLift() if law is None else law
    for name, value in (
        ("lift_coefficient", lift_coefficient),
        ("speed_mps", speed_mps),
        ("radius_m", radius_m),
    ):
        if not (math.isfinite(value) and value > 0):
            raise ValueError(f"{name} must be positive and finite, got {value!r}")
    if not (math.isfinite(lift_stderr) and lift_stderr >= 0):
        raise ValueError(f"lift_stderr must be finite and >= 0, got {lift_stderr!r}")
    if not (math.isfinite(law_rel_sigma) and law_rel_sigma >= 0):
        raise ValueError(f"law_rel_sigma must be finite and >= 0, got {law_rel_sigma!r}")
    s = float(law.spin_ratio_for(lift_coefficient))
    h = 1e-6 * lift_coefficient
    ds_dcl = (
        float(law.spin_ratio_for(lift_coefficient + h)) - float(law.spin_ratio_for(lift_coefficient - h))
    ) / (2 * h)
    rate = s * speed_mps / radius_m
    sigma = math.hypot(abs(ds_dcl) * lift_stderr * speed_mps / radius_m, law_rel_sigma * rate)
    if source is None:
        source = f"fitted C_L {lift_coefficient:.3g} ± {lift_stderr:.2g} under the {law.name} lift law" + (
            " C_L = 1.12 S / (0.583 + 2.333 S)" if isinstance(law, SaturatingLift) else ""
        )
    return SpinPrior(rate, sigma if sigma > 0 else 1e-9 * rate, source)


def _base_of(est: SpinEstimate) -> dict[str, Any]:
    return {f.name: getattr(est, f.name) for f in dataclasses.fields(est)}


def _candidate_sigma_radps(est: SpinEstimate) -> float:
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
    base = _base_of(first)
    if not first.candidates_radps or not second.candidates_radps:
        missing = "first" if not first.candidates_radps else "second"
        return _no_spin(base, f"the {missing} clip has no candidate spin rate")
    if math.isclose(first.sample_rate_hz, second.sample_rate_hz, rel_tol=1e-6):
        raise ValueError("second: a second clip must be at another frame rate to tell aliases apart")
    a = np.array(first.candidates_radps)
    b = np.array(second.candidates_radps)
    sa = _candidate_sigma_radps(first)
    sb = _candidate_sigma_radps(second)
    tol = CLIP_MATCH_Z * math.hypot(sa, sb)
    matches = [(i, j) for i in range(a.size) for j in range(b.size) if abs(a[i] - b[j]) <= tol]
    if len(matches) != 1:
        what = "no candidate" if not matches else f"{len(matches)} candidates"
        return _no_spin(
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
    return _with_choice(first, i, f"lomb-scargle, alias chosen by a {how}", how)


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
    t, y = _series(t_s, brightness)
    opt = SpinOptions() if options is None else options
    least = MIN_POINTS + opt.trend_degree
    if not (isinstance(window_points, int) and window_points >= least):
        raise ValueError(f"window_points must be an integer >= {least}, got {window_points!r}")
    step = window_points if step_points is None else step_points
    if not (isinstance(step, int) and step >= 1):
        raise ValueError(f"step_points must be a positive integer, got {step_points!r}")
    overall = _measure(t, y, opt, prior)
    raw = [
        _measure(t[i : i + window_points], y[i : i + window_points], opt, None)
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
                k, why = _pick_with_prior(cands, _candidate_sigma_radps(w), prior)
                if k is None:
                    out.append(_no_spin(_base_of(w), f"aliased: {why}", prior=prior.source))
                    continue
                ref, source = float(cands[k]), f"prior ({prior.source})"
            else:
                out.append(w)  # aliased, no prior: the window's own reason says so
                continue
        dist = np.abs(cands - ref)
        order = np.argsort(dist)
        if cands.size > 1 and dist[order[0]] > CONTINUITY_FRACTION * dist[order[1]]:
            out.append(
                _no_spin(
                    _base_of(w),
                    f"aliased: candidates {cands[order[0]]:.4g} and {cands[order[1]]:.4g} rad/s are about "
                    f"equally near the rate {ref:.4g} rad/s the previous windows lead to",
                )
            )
            continue
        k = int(order[0])
        picks.append((w.at_t_s, float(cands[k])))
        out.append(_with_choice(w, k, f"lomb-scargle, alias followed from {source}", w.prior))
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
    t, y = _series(t_s, brightness)
    if start.rate_radps is None:
        raise ValueError(f"start: needs an estimate with a rate, got none ({start.reason})")
    per_time = distance_m is None
    if per_time:
        x = t
    else:
        _, x = _series(t, distance_m, v_name="distance_m")
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
    inl = _inliers(sol.fun)
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


# ---------------------------------------------------------------------------------------------- one shot


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
    t, y = _series(t_s, brightness)
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


def spin_prior_for_fit_shot(shot: Mapping[str, Any], *, radius_m: float) -> SpinPrior | None:
    """The alias prior for one shot of a fit's document (``fit.json`` ``shots[i]``): the spin its fitted
    lift coefficient at the first point implies under the published saturating relation
    C_L = 1.12 S / (0.583 + 2.333 S) (:func:`spin_prior_from_lift` with its defaults), at the fitted speed
    there. None when the fit gives no positive lift coefficient or speed, or the lift is beyond the law."""
    try:
        cl = shot["lift_coefficient"]
        speed = shot["initial"]["speed_mps"]["value"]
        cl_value, cl_stderr = cl["value"], cl["stderr"]
    except (KeyError, TypeError):
        return None
    if not (is_finite_number(cl_value) and is_finite_number(speed) and cl_value > 0 and speed > 0):
        return None
    stderr = float(cl_stderr) if is_finite_number(cl_stderr) else 0.0
    try:
        return spin_prior_from_lift(float(cl_value), stderr, speed_mps=float(speed), radius_m=radius_m)
    except ValueError:  # C_L beyond the saturating law's reach
        return None


def add_spin_measured(doc: Mapping[str, Any], spins: Mapping[str, ShotSpin]) -> dict[str, Any]:
    """A copy of a fit's document with ``shots[i].spin_measured`` for the shots in ``spins`` (by label),
    and one warning for each of them without a rate, saying why (and listing the candidates when aliased).

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
    return {**doc, "shots": shots, "warnings": warnings}
