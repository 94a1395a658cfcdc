"""Noise of a fit window and the least uncertainty of a BB's position.

The uncertainty of a fitted centre is the least-squares covariance σ²(JᵀJ)⁻¹ of the fit (J the model's
Jacobian at the optimum), with σ the local noise: the robust spread (1.4826·MAD) of the residuals outside
the blob (:func:`_background_sigma`), never below the caller's floor (the quantisation of 8-bit video,
:data:`QUANTISATION_NOISE_DN`), times a factor for spatially correlated noise (:func:`correlation_factor`).
No σ is below the Cramér–Rao bound of a spot with the fitted signal and width in that noise
(:func:`spot_position_bound_px`).

References
----------
Mortensen, K. I., et al. (2010). Optimized localization analysis for single-molecule tracking and
super-resolution microscopy. Nat. Methods 7:377–381 (least-squares localisation variance).
"""

from __future__ import annotations

import math

import numpy as np

from hopscope.shared.constants import MAD_TO_SIGMA

#: Least noise σ of a difference of 8-bit video, grey levels: rounding a frame to whole grey levels adds
#: a uniform error of variance 1/12 (the quantisation noise of a uniform quantiser, e.g. Widrow & Kollár
#: 2008, Quantization Noise, ch. 4).  # from memory
QUANTISATION_NOISE_DN = 1.0 / math.sqrt(12.0)


def spot_position_bound_px(total: float, width_px: float, noise: float) -> float:
    """Least standard error of a spot's centre per axis the image noise allows (Cramér–Rao bound), px.

    For a spot of integrated signal N (grey levels × px) and Gaussian width s on pixels of side a = 1 px
    with background noise b per pixel (grey levels), the background-limited bound is
    var = 8π σ_a⁴ b² / (a² N²), σ_a² = s² + a²/12 (the second term of Thompson, Larson & Webb 2002; the
    pixelation term of Mortensen et al. 2010). The spot's own photon noise only adds to it, and a streak
    or a disk of the same signal is located no better, so no position σ may be smaller.

    References
    ----------
    Thompson, R. E., Larson, D. R., Webb, W. W. (2002). Precise nanometer localization analysis for
    individual fluorescent probes. Biophys. J. 82:2775–2783.
    Mortensen, K. I., et al. (2010). Optimized localization analysis for single-molecule tracking and
    super-resolution microscopy. Nat. Methods 7:377–381.
    """
    if not (total > 0 and math.isfinite(total)):
        return float("inf")
    sa2 = width_px * width_px + 1.0 / 12.0
    return math.sqrt(8.0 * math.pi) * sa2 * noise / total


def correlation_factor(resid: np.ndarray, outside: np.ndarray) -> float:
    """Variance factor for spatially correlated noise: (1 + 2ρ_u)(1 + 2ρ_v), clipped to [1, 9].

    ρ_u, ρ_v are the lag-one autocorrelations of the residuals between horizontally and vertically
    adjacent pixels outside the blob. Compression and demosaicing correlate neighbouring pixels' noise,
    which a least-squares covariance built on independent pixels underrates; for short-range correlation
    the variance of a smooth linear estimate grows by about the sum of the autocorrelation (Bartlett 1946:
    variance of a mean of an autocorrelated series, 1 + 2Σρ_k), applied per image axis.

    References
    ----------
    Bartlett, M. S. (1946). On the theoretical specification and sampling properties of autocorrelated
    time-series. J. R. Stat. Soc. Suppl. 8(1):27–41.
    """
    r = np.where(outside, resid, 0.0)
    r = r - (r.sum() / max(int(outside.sum()), 1)) * outside
    den = float(np.sum(r * r))
    if den <= 0 or int(outside.sum()) < 20:
        return 1.0
    pu = outside[:, 1:] & outside[:, :-1]
    pv = outside[1:, :] & outside[:-1, :]
    rho_u = float(np.sum((r[:, 1:] * r[:, :-1])[pu])) / max(float(np.sum((r[:, 1:] ** 2)[pu])), 1e-300)
    rho_v = float(np.sum((r[1:, :] * r[:-1, :])[pv])) / max(float(np.sum((r[1:, :] ** 2)[pv])), 1e-300)
    f = (1.0 + 2.0 * max(rho_u, 0.0)) * (1.0 + 2.0 * max(rho_v, 0.0))
    return float(min(max(f, 1.0), 9.0))


def _background_sigma(
    resid: np.ndarray, excess: np.ndarray, amp: float, data: np.ndarray | None = None
) -> float:
    """Robust σ of the residuals outside the blob (where the model is within 2 % of its offset).

    When the window's values ``data`` sit on a lattice of whole or half grey levels (8-bit video minus a
    median background), the spread is taken from them with the median interpolated within its bin
    (:func:`grouped_mad`): the plain median of quantised values is biased by up to half a step.
    """
    outside = np.abs(excess) < 0.02 * abs(amp) if amp else np.ones(resid.shape, bool)
    if int(outside.sum()) < 12:
        outside = np.ones(resid.shape, bool)
    if data is not None:
        step = _lattice_step(data[outside])
        if step:
            return max(MAD_TO_SIGMA * grouped_mad(data[outside], step), 1e-3)
    r = resid[outside]
    mad = float(np.median(np.abs(r - np.median(r))))
    return max(MAD_TO_SIGMA * mad, 1e-3)


def _lattice_step(values: np.ndarray) -> float:
    """1 or 0.5 when every value is a whole (or half) grey level, else 0."""
    for step in (1.0, 0.5):
        q = values / step
        if np.all(np.abs(q - np.round(q)) < 1e-4):
            return step
    return 0.0


def grouped_mad(values: np.ndarray, step: float) -> float:
    """Median absolute deviation of values quantised to ``step``, with the median interpolated in its bin.

    Deviations from a central lattice value are whole multiples of ``step``; their median is placed within
    its bin by the fraction of the counts needed to reach half (the grouped-data median, e.g. Spiegel &
    Stephens, Schaum's Outline of Statistics, ch. 3), as :func:`tracker.background.noise_map` does.
    """
    v = np.sort(np.asarray(values, float).ravel())
    centre = v[v.size // 2]  # a lattice value
    a = np.round(np.abs(v - centre) / step)
    m = float(np.median(a))
    if m != round(m):  # even count straddling two bins: take the lower one
        m = math.floor(m)
    below = int(np.sum(a < m))
    at = max(int(np.sum(a == m)), 1)
    lo, width = (m - 0.5, 1.0) if m > 0 else (0.0, 0.5)
    return step * (lo + width * (0.5 * a.size - below) / at)
