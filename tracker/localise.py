"""Sub-pixel position of a BB image by least-squares model fitting, with its uncertainty.

Two models of the background-subtracted window, both symmetric about their centre: a pixel-integrated
circular Gaussian **spot**, and a Gaussian-profiled **streak** whose centre is the position at
mid-exposure (described, with their sources, in :mod:`tracker.profiles`).

The spot is always fitted; the streak is fitted too when the blob is elongated, and kept when it lowers
the residual sum of squares by more than :data:`STREAK_GAIN_SIGMA2` noise variances.

The uncertainty is the least-squares covariance σ²(JᵀJ)⁻¹ of the fit (J the model's Jacobian at the
optimum), with σ the local noise: the robust spread (1.4826·MAD) of the residuals outside the blob, never
below the caller's floor (the quantisation of 8-bit video), times a factor for spatially correlated noise
(:func:`correlation_factor`). A blob's residuals from a symmetric shape the model does not follow (a disk
fitted by a Gaussian) do not move its centre and are not counted. No σ is below the Cramér–Rao bound of
a spot with the fitted signal and width in that noise (:func:`spot_position_bound_px`).

Conventions: pixel (u, v) = (col, row), the centre of the top-left pixel at (0, 0).

References
----------
Smith, C. S., Joseph, N., Rieger, B., Lidke, K. A. (2010). Fast, single-molecule localization that
achieves theoretically minimum uncertainty. Nat. Methods 7:373–375 (integrated Gaussian model).
Vereš, P., Jedicke, R., Denneau, L., et al. (2012). Improved asteroid astrometry and photometry with
trail fitting. PASP 124:1197–1207 (trailed-source model, centre = mid-exposure position).
Mortensen, K. I., et al. (2010). Optimized localization analysis for single-molecule tracking and
super-resolution microscopy. Nat. Methods 7:377–381 (least-squares localisation variance).

Modules
-------
This module is where callers import the localisation from; the code lives in:

``tracker.spotfit``   :class:`Detection`, :func:`localise` (spot and streak fits, which model is kept)
``tracker.profiles``  the spot and streak image models and their Jacobians
``tracker.leastsq``   :func:`levenberg_marquardt`, the fit's covariance
``tracker.noise``     the window's noise σ, :func:`correlation_factor`, :func:`spot_position_bound_px`,
                      :data:`QUANTISATION_NOISE_DN`
``tracker.marked``    :func:`localise_marked`: a marked (half-dark) BB fitted by its outline, its own light
"""

from __future__ import annotations

from .leastsq import levenberg_marquardt
from .marked import (
    MARKED_COVERAGE_MIN,
    MARKED_PARAMS,
    MARKED_RADIUS_RANGE,
    MARKED_START_ITERATIONS,
    MARKED_SWEEP_SAMPLES,
    localise_marked,
    marked_ball_coverage,
    marked_ball_model,
)
from .noise import (
    QUANTISATION_NOISE_DN,
    correlation_factor,
    grouped_mad,
    spot_position_bound_px,
)
from .profiles import (
    spot_jacobian,
    spot_model,
    streak_jacobian,
    streak_model,
)
from .spotfit import (
    ELONGATION_RATIO,
    MIN_AMPLITUDE_SNR,
    MIN_WIDTH_PX,
    SATURATION_LEVEL,
    STREAK_GAIN_SIGMA2,
    WEAK_SNR,
    Detection,
    localise,
)

__all__ = [
    "Detection",
    "ELONGATION_RATIO",
    "MARKED_COVERAGE_MIN",
    "MARKED_PARAMS",
    "MARKED_RADIUS_RANGE",
    "MARKED_START_ITERATIONS",
    "MARKED_SWEEP_SAMPLES",
    "MIN_AMPLITUDE_SNR",
    "MIN_WIDTH_PX",
    "QUANTISATION_NOISE_DN",
    "SATURATION_LEVEL",
    "STREAK_GAIN_SIGMA2",
    "WEAK_SNR",
    "correlation_factor",
    "grouped_mad",
    "levenberg_marquardt",
    "localise",
    "localise_marked",
    "marked_ball_coverage",
    "marked_ball_model",
    "spot_jacobian",
    "spot_model",
    "spot_position_bound_px",
    "streak_jacobian",
    "streak_model",
]
