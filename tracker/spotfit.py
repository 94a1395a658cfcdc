"""Spot and streak fits of a background-subtracted window (:func:`localise`) and the :class:`Detection`
they give.

The spot (:func:`tracker.profiles.spot_model`) is always fitted; the streak
(:func:`tracker.profiles.streak_model`) is fitted too when the blob is elongated (:data:`ELONGATION_RATIO`),
and kept when it lowers the residual sum of squares by more than :data:`STREAK_GAIN_SIGMA2` noise variances.
The centre's σ comes from the local noise and is floored at the Cramér–Rao bound (:mod:`tracker.noise`).

Conventions: pixel (u, v) = (col, row), the centre of the top-left pixel at (0, 0).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import cv2
import numpy as np

from hopscope.shared.constants import MAD_TO_SIGMA

from .leastsq import _covariance, _Fit, levenberg_marquardt, minimise_normal
from .noise import _background_sigma, correlation_factor, spot_position_bound_px
from .profiles import spot_cost, spot_jacobian, spot_model, spot_normal, streak_jacobian, streak_model

#: A streak model is tried when the blob's second-moment axis ratio exceeds this.
ELONGATION_RATIO = 1.25

#: The streak is kept when it lowers the residual sum of squares by more than this many noise variances.
STREAK_GAIN_SIGMA2 = 25.0

#: Detections with amplitude below this many standard errors are dropped (value with a reason).
MIN_AMPLITUDE_SNR = 5.0

#: A fitted width below this is a noise spike or a defective pixel, not a BB's image, px.
MIN_WIDTH_PX = 0.45

#: Sensor top code value: a blob reaching it is flagged ``saturated`` (8-bit video).
SATURATION_LEVEL = 254.5

#: Signal-to-noise below which a detection is flagged ``weak``.
WEAK_SNR = 10.0


@dataclass(frozen=True)
class Detection:
    """A localised blob in one frame, or the reason it could not be localised.

    Attributes
    ----------
    frame : frame index.
    u_px, v_px : centre (mid-exposure position for a streak), px.
    sigma_u_px, sigma_v_px : standard uncertainty of u and v, px.
    amplitude : model peak above the background, grey levels (negative for a dark blob).
    brightness : integrated signal above the background, grey levels × px (signed).
    width_px : Gaussian width s of the profile, px.
    streak_len_px : travel during the exposure L, px (0 for a spot).
    streak_angle_rad : direction of the streak, rad from +u toward +v (0 for a spot).
    noise : local noise σ of the difference image, grey levels.
    snr : |amplitude| / its standard error.
    flags : tokens from :data:`tracker.trackfile.FLAG_TOKENS`.
    reason : empty for a good detection, else why it failed.
    sigma_floor_px : the noise bound on σ_u and σ_v (:func:`tracker.noise.spot_position_bound_px`), px;
        neither is below it.
    light_radius_px : for a marked BB, the radius its coverage (and so ``brightness``) was taken at, px
        (NaN otherwise).
    light_per_radius : for a marked BB, ∂brightness/∂radius there (the background hidden by a wider
        ball), grey levels × px per px (0 otherwise): ``brightness`` at another radius R is
        brightness + (R − light_radius_px) · light_per_radius to first order.
    """

    frame: int
    u_px: float
    v_px: float
    sigma_u_px: float
    sigma_v_px: float
    amplitude: float
    brightness: float
    width_px: float
    streak_len_px: float
    streak_angle_rad: float
    noise: float
    snr: float
    flags: tuple[str, ...] = ()
    reason: str = ""
    sigma_floor_px: float = float("nan")
    light_radius_px: float = float("nan")
    light_per_radius: float = 0.0

    @property
    def ok(self) -> bool:
        """True when the fit succeeded."""
        return not self.reason

    @property
    def sigma_px(self) -> float:
        """Per-axis uncertainty, px: RMS of σ_u and σ_v."""
        return math.sqrt(0.5 * (self.sigma_u_px**2 + self.sigma_v_px**2))


def _failed(frame: int, u: float, v: float, reason: str) -> Detection:
    nan = float("nan")
    return Detection(frame, u, v, nan, nan, nan, nan, nan, nan, nan, nan, nan, (), reason)


def _moments(img: np.ndarray, x: np.ndarray, y: np.ndarray) -> tuple[float, float, float, float, float]:
    """Centroid, principal second moments and angle of the significant positive part of ``img``.

    Pixels count when they exceed the window's median by 3 robust σ and belong to the connected blob
    around the brightest pixel (so noise does not widen the blob).
    """
    med = float(np.median(img))
    sig = MAD_TO_SIGMA * float(np.median(np.abs(img - med)))
    w = img - med
    mask = (w > 3.0 * sig).astype(np.uint8)
    if mask.any():
        # only the blob around the brightest pixel: stray noise pixels would widen the moments
        _, labels = cv2.connectedComponents(mask, connectivity=8)
        peak = np.unravel_index(int(np.argmax(np.where(mask > 0, w, -np.inf))), w.shape)
        mask = labels == labels[peak]
    w = np.where(mask > 0, w, 0.0)
    tot = float(w.sum())
    if tot <= 0:
        return float(x.mean()), float(y.mean()), 1.0, 1.0, 0.0
    cx, cy = float((w * x).sum() / tot), float((w * y).sum() / tot)
    dx, dy = x - cx, y - cy
    mxx, myy, mxy = (w * dx * dx).sum() / tot, (w * dy * dy).sum() / tot, (w * dx * dy).sum() / tot
    tr, det = mxx + myy, mxx * myy - mxy * mxy
    disc = math.sqrt(max(tr * tr / 4 - det, 0.0))
    l1, l2 = tr / 2 + disc, max(tr / 2 - disc, 1e-6)
    th = 0.5 * math.atan2(2 * mxy, mxx - myy)
    return cx, cy, float(l1), float(l2), th


def _fit_spot(
    d: np.ndarray, gx: np.ndarray, gy: np.ndarray, p0: np.ndarray, lo: np.ndarray, hi: np.ndarray
) -> _Fit:
    """The spot model fitted to the flattened window ``d`` (cols ``gx``, rows ``gy``) by the
    Levenberg–Marquardt iteration on its separable normal equations (:func:`tracker.profiles.spot_normal`:
    the same steps as with the explicit Jacobian, at a fraction of the cost); the residual and Jacobian of
    the result are formed once, at the end."""
    xy = np.concatenate((gx, gy))
    d2 = d.reshape(gy.size, gx.size)
    dd = float(d @ d)
    p, _, ok, msg = minimise_normal(
        lambda q: spot_cost(q, xy, gx.size, d2, dd), lambda q: spot_normal(q, xy, gx.size, d2), p0, lo, hi
    )
    r = spot_model(p, gx, gy) - d
    return _Fit(p, r, spot_jacobian(p, gx, gy), 0.5 * float(r @ r), ok, msg)


def localise(
    diff: np.ndarray,
    origin: tuple[int, int],
    *,
    frame: int,
    sign: int,
    raw: np.ndarray | None = None,
    guess_uv: tuple[float, float] | None = None,
    max_streak_px: float | None = None,
    noise_floor: float = 0.0,
) -> Detection:
    """Fit a spot (and, if elongated, a streak) to a background-subtracted window.

    Parameters
    ----------
    diff : (rows, cols) float array, frame minus background in the window, grey levels.
    origin : (row0, col0) full-image position of the window's top-left pixel.
    frame : frame index (carried into the result).
    sign : +1 for a blob brighter than the background, −1 for darker.
    raw : the frame's grey levels in the window (to flag saturation), optional.
    guess_uv : coarse centre, full-image px, optional (else the window's signal centroid).
    max_streak_px : upper bound on L, px (default: the window's diagonal).
    noise_floor : least noise σ of the difference image, grey levels (the quantisation of 8-bit video:
        :data:`tracker.noise.QUANTISATION_NOISE_DN`).

    Returns
    -------
    Detection
        In full-image pixel coordinates; ``reason`` says why when the fit failed.

    Notes
    -----
    Pixel (u, v) = (col, row), centre of the top-left pixel at (0, 0).
    """
    r0, c0 = origin
    rows, cols = diff.shape
    if rows < 3 or cols < 3:
        return _failed(frame, float("nan"), float("nan"), "fit window smaller than 3×3 px")
    yy, xx = np.mgrid[0:rows, 0:cols]
    x = xx.ravel().astype(float)
    y = yy.ravel().astype(float)
    d = (sign * diff).ravel().astype(float)
    cx, cy, l1, l2, th0 = _moments(d.reshape(rows, cols), xx, yy)
    if guess_uv is not None:
        qx, qy = guess_uv[0] - c0, guess_uv[1] - r0
        if 0 <= qx < cols and 0 <= qy < rows:
            cx, cy = 0.5 * (cx + qx), 0.5 * (cy + qy)
    c_guess = float(np.median(d))
    a_guess = float(max(d.max() - c_guess, 1e-3))
    s_guess = float(np.clip(math.sqrt(l2), 0.6, max(rows, cols) / 3))
    diag = math.hypot(rows, cols)
    lmax = float(max_streak_px if max_streak_px is not None else diag)

    gx = np.arange(cols, dtype=float)
    gy = np.arange(rows, dtype=float)

    p0 = np.array([cx, cy, a_guess, s_guess, c_guess])
    lo = [-0.5, -0.5, 0.0, 0.3, -np.inf]
    hi = [cols - 0.5, rows - 0.5, np.inf, max(rows, cols), np.inf]
    p0 = np.clip(p0, np.array(lo) + 1e-9, np.array(hi) - 1e-9)
    fit = _fit_spot(d, gx, gy, p0, np.array(lo), np.array(hi))
    best, kind = fit, "spot"
    spot_ok = fit.x[3] >= MIN_WIDTH_PX and fit.x[2] > 0
    if spot_ok and l1 / l2 > ELONGATION_RATIO**2:
        length0 = float(np.clip(math.sqrt(max(12.0 * (l1 - l2), 0.0)), 0.5, lmax))

        def resid_streak(p: np.ndarray) -> np.ndarray:
            return streak_model(p, x, y) - d

        q0 = np.array([cx, cy, a_guess, s_guess, length0, th0, c_guess])
        qlo = [-0.5, -0.5, 0.0, 0.3, 0.0, th0 - math.pi, -np.inf]
        qhi = [cols - 0.5, rows - 0.5, np.inf, max(rows, cols), lmax, th0 + math.pi, np.inf]
        q0 = np.clip(q0, np.array(qlo) + 1e-9, np.array(qhi) - 1e-9)
        sfit = levenberg_marquardt(
            resid_streak, lambda q: streak_jacobian(q, x, y), q0, np.array(qlo), np.array(qhi)
        )
        if sfit.success:
            noise0 = _background_sigma(fit.fun, spot_model(fit.x, gx, gy) - fit.x[-1], fit.x[2])
            if (2 * fit.cost - 2 * sfit.cost) > STREAK_GAIN_SIGMA2 * noise0**2:
                best, kind = sfit, "streak"
    p = best.x
    amp, s_fit, c_fit = float(p[2]), float(p[3]), float(p[-1])
    excess = (streak_model(p, x, y) if kind == "streak" else spot_model(p, gx, gy)) - c_fit
    noise = max(_background_sigma(best.fun, excess, amp, d), noise_floor)
    inside = np.abs(excess) >= 0.02 * abs(amp)
    corr = correlation_factor(best.fun.reshape(rows, cols), ~inside.reshape(rows, cols))
    sig2 = np.full(x.shape, noise * noise)
    cov = _covariance(best.jac, sig2) * corr
    su, sv, sa = (math.sqrt(max(float(cov[i, i]), 0.0)) for i in (0, 1, 2))
    floor = spot_position_bound_px(abs(float(excess.sum())), s_fit, noise)
    su, sv = max(su, floor), max(sv, floor)
    u = float(p[0]) + c0
    v = float(p[1]) + r0
    if not best.success:
        return _failed(frame, u, v, f"{kind} fit did not converge: {best.message}")
    if not (0 <= p[0] <= cols - 1 and 0 <= p[1] <= rows - 1):
        return _failed(frame, u, v, "fitted centre left the fit window")
    if s_fit < MIN_WIDTH_PX:
        return _failed(frame, u, v, f"width {s_fit:.2f} px: a noise spike or a bad pixel, not a BB")
    snr = amp / sa if sa > 0 else float("inf")
    if snr < MIN_AMPLITUDE_SNR:
        return _failed(frame, u, v, f"signal {snr:.1f} σ is below {MIN_AMPLITUDE_SNR:g} σ")
    flags: list[str] = []
    if kind == "streak":
        flags.append("streak")
    if raw is not None and sign > 0 and float(np.max(raw)) >= SATURATION_LEVEL:
        flags.append("saturated")
    if snr < WEAK_SNR:
        flags.append("weak")
    length = float(p[4]) if kind == "streak" else 0.0
    angle = float(p[5]) if kind == "streak" else 0.0
    if length > 0:
        angle = (angle + math.pi / 2) % math.pi - math.pi / 2
    return Detection(
        frame=frame,
        u_px=u,
        v_px=v,
        sigma_u_px=su,
        sigma_v_px=sv,
        amplitude=sign * amp,
        brightness=sign * float(excess.sum()),
        width_px=s_fit,
        streak_len_px=length,
        streak_angle_rad=angle,
        noise=noise,
        snr=float(snr),
        flags=tuple(flags),
        sigma_floor_px=floor,
    )
