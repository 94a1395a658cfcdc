"""The periodogram of a brightness series and the false-alarm probability of its highest peak.

A generalised Lomb–Scargle periodogram (a least-squares sinusoid with a floating mean at each trial
frequency; uneven times allowed), the grid of trial frequencies, and Baluev's false-alarm probability.
SI: seconds and hertz (cycles per second). Part of :mod:`fitting.spin`.

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

import math

import numpy as np
from scipy.special import gammaln

#: Trial frequencies per periodogram peak width 1/T.
#: VanderPlas (2018), "Understanding the Lomb-Scargle periodogram", ApJS 236:16, §7.1 (5–10). # from memory
DEFAULT_OVERSAMPLE = 10
#: Trial-frequency × sample products evaluated at once (memory bound of the periodogram).
_CHUNK = 2_000_000


# ---------------------------------------------------------------------------------------------- input checks


def series_arrays(
    t_s, values, t_name: str = "t_s", v_name: str = "brightness"
) -> tuple[np.ndarray, np.ndarray]:
    """``(t, values)`` as float arrays: 1-D, same shape, finite, times (s) strictly increasing; else
    ``ValueError`` naming the argument."""
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
    t, y = series_arrays(t_s, values, v_name="values")
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


__all__ = ["DEFAULT_OVERSAMPLE", "false_alarm_probability", "frequency_grid", "lomb_scargle", "series_arrays"]
