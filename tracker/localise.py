"""Sub-pixel position of a BB image by least-squares model fitting, with its uncertainty.

Two models of the background-subtracted window, both symmetric about their centre:

* **spot** — a pixel-integrated circular Gaussian (amplitude A, width s, centre (u₀, v₀), offset c):
  each pixel holds the Gaussian's integral over its unit square, written with error functions (the
  integrated-Gaussian model of Smith, Joseph, Rieger & Lidke 2010). A blurred disk is close to a Gaussian
  of the same second moment; by symmetry the centre stays unbiased when the shape differs.
* **streak** — a Gaussian-profiled line segment of length L along direction θ (the trail model of Vereš
  et al. 2012): the image of a BB that moved a distance L during the exposure. Its centre is the
  position at mid-exposure; L is the travel during the exposure (the visible streak is L plus the BB's
  image diameter).

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
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

import cv2
import numpy as np
from scipy.special import erf

from hopscope.shared.constants import MAD_TO_SIGMA

#: A streak model is tried when the blob's second-moment axis ratio exceeds this.
ELONGATION_RATIO = 1.25

#: The streak is kept when it lowers the residual sum of squares by more than this many noise variances.
STREAK_GAIN_SIGMA2 = 25.0

#: Detections with amplitude below this many standard errors are dropped (value with a reason).
MIN_AMPLITUDE_SNR = 5.0

#: A fitted width below this is a noise spike or a defective pixel, not a BB's image, px.
MIN_WIDTH_PX = 0.45

#: Least noise σ of a difference of 8-bit video, grey levels: rounding a frame to whole grey levels adds
#: a uniform error of variance 1/12 (the quantisation noise of a uniform quantiser, e.g. Widrow & Kollár
#: 2008, Quantization Noise, ch. 4).  # from memory
QUANTISATION_NOISE_DN = 1.0 / math.sqrt(12.0)

#: Sensor top code value: a blob reaching it is flagged ``saturated`` (8-bit video).
SATURATION_LEVEL = 254.5

#: Signal-to-noise below which a detection is flagged ``weak``.
WEAK_SNR = 10.0

_SQRT2 = math.sqrt(2.0)
_TWO_OVER_SQRTPI = 2.0 / math.sqrt(math.pi)


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
    sigma_floor_px : the noise bound on σ_u and σ_v (:func:`spot_position_bound_px`), px; neither is below it.
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


# --- models -------------------------------------------------------------------------------------------


def spot_model(p: np.ndarray, x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Pixel-integrated circular Gaussian on a grid: p = (u0, v0, A, s, c).

    ``x`` are the window's column coordinates (cols,), ``y`` its row coordinates (rows,); the result is the
    flattened (rows, cols) image. A is the continuous Gaussian's peak, grey levels. The model is separable,
    so the error functions are evaluated once per row and per column.
    """
    u0, v0, a, s, c = p
    k = 1.0 / (_SQRT2 * s)
    ex = erf((x - u0 + 0.5) * k) - erf((x - u0 - 0.5) * k)
    ey = erf((y - v0 + 0.5) * k) - erf((y - v0 - 0.5) * k)
    return (c + a * (0.5 * math.pi * s * s) * np.outer(ey, ex)).ravel()


def _g(z: np.ndarray) -> np.ndarray:
    """d erf(z) / dz."""
    return _TWO_OVER_SQRTPI * np.exp(-z * z)


def spot_jacobian(p: np.ndarray, x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """(rows·cols, 5) derivatives of :func:`spot_model` by (u0, v0, A, s, c), same grid arguments."""
    u0, v0, a, s, _c = p
    k = 1.0 / (_SQRT2 * s)
    xa, xb = x - u0 + 0.5, x - u0 - 0.5
    ya, yb = y - v0 + 0.5, y - v0 - 0.5
    gxa, gxb, gya, gyb = _g(xa * k), _g(xb * k), _g(ya * k), _g(yb * k)
    ex = erf(xa * k) - erf(xb * k)
    ey = erf(ya * k) - erf(yb * k)
    dk_ds = -k / s
    ex_u = -k * (gxa - gxb)
    ey_v = -k * (gya - gyb)
    ex_s = (xa * gxa - xb * gxb) * dk_ds
    ey_s = (ya * gya - yb * gyb) * dk_ds
    f = 0.5 * math.pi * s * s
    n = x.size * y.size
    jac = np.empty((n, 5))
    jac[:, 0] = (a * f * np.outer(ey, ex_u)).ravel()
    jac[:, 1] = (a * f * np.outer(ey_v, ex)).ravel()
    jac[:, 2] = (f * np.outer(ey, ex)).ravel()
    jac[:, 3] = (a * (math.pi * s * np.outer(ey, ex) + f * (np.outer(ey, ex_s) + np.outer(ey_s, ex)))).ravel()
    jac[:, 4] = 1.0
    return jac


def streak_jacobian(p: np.ndarray, x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """(N, 7) derivatives of :func:`streak_model` by (u0, v0, A, s, L, θ, c)."""
    u0, v0, a, s, length, th, _c = p
    ct, st = math.cos(th), math.sin(th)
    dx, dy = x - u0, y - v0
    al = dx * ct + dy * st
    cr = -dx * st + dy * ct
    xx = np.exp(-0.5 * (cr / s) ** 2)
    x_cr = -cr / (s * s) * xx
    x_s = cr * cr / s**3 * xx
    h = 0.5 * length
    k = 1.0 / (_SQRT2 * s)
    if h * k < 1e-3:
        t = np.exp(-0.5 * (al / s) ** 2)
        t_al = -al / (s * s) * t
        t_s = al * al / s**3 * t
        t_len = np.zeros_like(t)
    else:
        zp, zm = (al + h) * k, (al - h) * k
        gp, gm = _g(zp), _g(zm)
        num = erf(zp) - erf(zm)
        den = 2.0 * math.erf(h * k)
        ghk = float(_TWO_OVER_SQRTPI * math.exp(-((h * k) ** 2)))
        t = num / den
        t_al = k * (gp - gm) / den
        n_h, d_h = k * (gp + gm), 2.0 * k * ghk
        n_k, d_k = (al + h) * gp - (al - h) * gm, 2.0 * h * ghk
        t_h = (n_h * den - num * d_h) / (den * den)
        t_k = (n_k * den - num * d_k) / (den * den)
        t_s = t_k * (-k / s)
        t_len = 0.5 * t_h
    jac = np.empty((x.size, 7))
    jac[:, 0] = a * (x_cr * st * t + xx * t_al * (-ct))
    jac[:, 1] = a * (x_cr * (-ct) * t + xx * t_al * (-st))
    jac[:, 2] = xx * t
    jac[:, 3] = a * (x_s * t + xx * t_s)
    jac[:, 4] = a * xx * t_len
    jac[:, 5] = a * (x_cr * (-al) * t + xx * t_al * cr)
    jac[:, 6] = 1.0
    return jac


def streak_model(p: np.ndarray, x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Gaussian-profiled segment: p = (u0, v0, A, s, L, θ, c); A is the peak at the centre, grey levels.

    Along the streak the profile is the Gaussian convolved with a segment of length L (difference of error
    functions, normalised to 1 at the centre); across it a Gaussian of width s (Vereš et al. 2012).
    """
    u0, v0, a, s, length, th, c = p
    ct, st = math.cos(th), math.sin(th)
    dx, dy = x - u0, y - v0
    al = dx * ct + dy * st
    cr = -dx * st + dy * ct
    across = np.exp(-0.5 * (cr / s) ** 2)
    half = 0.5 * length
    k = 1.0 / (_SQRT2 * s)
    if half * k < 1e-3:
        along = np.exp(-0.5 * (al / s) ** 2)
    else:
        along = (erf((al + half) * k) - erf((al - half) * k)) / (2.0 * erf(half * k))
    return c + a * across * along


# --- fitting ------------------------------------------------------------------------------------------


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


@dataclass(frozen=True)
class _Fit:
    x: np.ndarray
    fun: np.ndarray
    jac: np.ndarray
    cost: float
    success: bool
    message: str


def levenberg_marquardt(
    fun: Callable[[np.ndarray], np.ndarray],
    jac: Callable[[np.ndarray], np.ndarray],
    p0: np.ndarray,
    lower: np.ndarray,
    upper: np.ndarray,
    *,
    max_iter: int = 40,
    ftol: float = 1e-5,
) -> _Fit:
    """Minimise ½‖fun(p)‖² by Levenberg–Marquardt with Marquardt's diagonal scaling, p kept in bounds.

    A small dense solver (a few parameters, a few hundred residuals) without the per-call overhead of a
    general one; tests check it reaches the optimum of ``scipy.optimize.least_squares``.

    References
    ----------
    Marquardt, D. W. (1963). An algorithm for least-squares estimation of nonlinear parameters.
    J. SIAM 11(2):431–441.
    """
    p = np.clip(np.asarray(p0, float), lower, upper)
    r = fun(p)
    cost = float(r @ r)
    lam = 1e-3
    j = jac(p)
    for _ in range(max_iter):
        a = j.T @ j
        g = j.T @ r
        dg = np.diag(a).copy()
        dg[dg <= 0] = 1e-12
        # parameters held at a bound by the gradient stay there (projected steps)
        free = ~(((p <= lower) & (g > 0)) | ((p >= upper) & (g < 0)))
        af = a[np.ix_(free, free)]
        while True:
            step = np.zeros_like(p)
            try:
                step[free] = np.linalg.solve(af + lam * np.diag(dg[free]), -g[free])
            except np.linalg.LinAlgError:
                pass
            pn = np.clip(p + step, lower, upper)
            rn = fun(pn)
            cn = float(rn @ rn)
            if np.isfinite(cn) and cn <= cost:
                break
            lam *= 10.0
            if lam > 1e10:
                return _Fit(p, r, j, 0.5 * cost, True, "no further decrease")
        # converged when the step changes the fit by a negligible fraction of the residual
        gain = float(np.sum(dg * (pn - p) ** 2))
        drop = cost - cn
        p, r = pn, rn
        cost = cn
        lam = max(lam / 10.0, 1e-12)
        j = jac(p)
        if drop <= ftol * max(cost, 1e-300) or gain <= ftol * max(cost, 1e-300):
            return _Fit(p, r, j, 0.5 * cost, True, "converged")
    return _Fit(p, r, j, 0.5 * cost, False, f"no convergence in {max_iter} iterations")


def _covariance(jac: np.ndarray, sig2: np.ndarray) -> np.ndarray:
    """Sandwich covariance (JᵀJ)⁻¹ Jᵀ diag(σ²) J (JᵀJ)⁻¹ (equals σ²(JᵀJ)⁻¹ for uniform σ)."""
    jtj_inv = np.linalg.pinv(jac.T @ jac)
    meat = jac.T @ (jac * sig2[:, None])
    return jtj_inv @ meat @ jtj_inv


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
        :data:`QUANTISATION_NOISE_DN`).

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

    def resid_spot(p: np.ndarray) -> np.ndarray:
        return spot_model(p, gx, gy) - d

    p0 = np.array([cx, cy, a_guess, s_guess, c_guess])
    lo = [-0.5, -0.5, 0.0, 0.3, -np.inf]
    hi = [cols - 0.5, rows - 0.5, np.inf, max(rows, cols), np.inf]
    p0 = np.clip(p0, np.array(lo) + 1e-9, np.array(hi) - 1e-9)
    fit = levenberg_marquardt(resid_spot, lambda q: spot_jacobian(q, gx, gy), p0, np.array(lo), np.array(hi))
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


# --- a marked BB: half dark, lit from one side ----------------------------------------------------------

#: Positions along the exposure at which the marked-ball model is evaluated and averaged (motion blur).
MARKED_SWEEP_SAMPLES = 5

#: The marked ball's fitted radius stays within these factors of the expected one.
MARKED_RADIUS_RANGE = (0.8, 1.25)

#: Iterations of each trial start of the marked-ball fit before the best one is carried on.
MARKED_START_ITERATIONS = 12

#: Pixels the marked ball covers for less than this fraction of the exposure are left out of its light.
MARKED_COVERAGE_MIN = 0.005

#: Names of the marked-ball model's parameters, in order.
MARKED_PARAMS = (
    "u0",
    "v0",
    "radius",
    "edge",
    "mark_angle",
    "bright",
    "dark",
    "shade",
    "limb",
    "length",
    "angle",
)


def marked_ball_model(p: np.ndarray, x: np.ndarray, y: np.ndarray, background: np.ndarray) -> np.ndarray:
    """A half-dark ball occluding the background, swept over the exposure: the window's grey levels.

    p = (u0, v0, R, w, φ, B, D, G, λ, L, θ): centre at mid-exposure (px), radius R (px), edge blur w (px,
    the lens's Gaussian σ), the mark's bright-side direction φ (rad, from +u toward +v), the bright and
    dark halves' radiance B and D (grey levels), shading G (relative change per radius down the image:
    light from above makes G < 0), limb darkening λ, travel during the exposure L (px) along θ (rad).

    The ball covers m(x, y) = ½ erfc((r − R)/(√2 w)) of each pixel and shows
    [D + (B − D) h] (1 + G Δv/R) (1 − λ (1 − √(1 − r²/R²))) there, h = ½ erfc(−(Δ·n)/(√2 w)) the bright
    side; the background shows through the rest: frame = background·(1 − m) + m·radiance, averaged over
    :data:`MARKED_SWEEP_SAMPLES` positions along the travel. ``x``, ``y``, ``background`` are flat arrays of
    the same length (pixel centres and the background's grey levels).
    """
    return background + _marked_ball_light(p, x, y, background)[2]


def marked_ball_coverage(p: np.ndarray, x: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Fraction of each pixel's exposure the ball of :func:`marked_ball_model` covers, and its derivative.

    Returns (m, ∂m/∂R) on the flat pixel arrays: the coverage m(x, y), 0..1, averaged over the exposure's
    sweep (Σ m is the ball's image area, px²) and its derivative by the radius R, 1/px.
    """
    cover, dcover, _ = _marked_ball_light(p, x, y, np.zeros_like(x))
    return cover, dcover


def _marked_ball_light(
    p: np.ndarray, x: np.ndarray, y: np.ndarray, background: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(coverage, its derivative by R, frame − background) of :func:`marked_ball_model`, sweep-averaged."""
    u0, v0, rad, w, phi, b, dk, g, lam, length, th = p
    k = 1.0 / (_SQRT2 * max(w, 1e-3))
    cn, sn = math.cos(phi), math.sin(phi)
    ct, st = math.cos(th), math.sin(th)
    covered = np.zeros_like(x)
    slope = np.zeros_like(x)
    out = np.zeros_like(x)
    for f in np.linspace(-0.5, 0.5, MARKED_SWEEP_SAMPLES):
        dx = x - (u0 + f * length * ct)
        dy = y - (v0 + f * length * st)
        r2 = dx * dx + dy * dy
        r = np.sqrt(r2)
        z = (r - rad) * k
        cover = 0.5 * (1.0 - erf(z))
        side = 0.5 * (1.0 + erf((dx * cn + dy * sn) * k))
        rho2 = np.minimum(r2 / (rad * rad), 1.0)
        radiance = (dk + (b - dk) * side) * (1.0 + g * dy / rad) * (1.0 - lam * (1.0 - np.sqrt(1.0 - rho2)))
        covered += cover
        slope += (k / math.sqrt(math.pi)) * np.exp(-z * z)
        out += cover * (radiance - background)
    n = MARKED_SWEEP_SAMPLES
    return covered / n, slope / n, out / n


def _numeric_jacobian(
    fun: Callable[[np.ndarray], np.ndarray], p: np.ndarray, steps: np.ndarray
) -> np.ndarray:
    """Forward-difference Jacobian of ``fun`` at ``p`` with per-parameter ``steps``."""
    base = fun(p)
    cols = []
    for i, h in enumerate(steps):
        dp = np.zeros_like(p)
        dp[i] = h
        cols.append((fun(p + dp) - base) / h)
    return np.column_stack(cols)


def localise_marked(
    frame_win: np.ndarray,
    background: np.ndarray,
    origin: tuple[int, int],
    *,
    frame: int,
    radius_px: float | None = None,
    noise_floor: float = 0.0,
) -> Detection:
    """Centre of a marked BB (one half dark, lit from one side) from its outline: :func:`marked_ball_model`.

    Parameters
    ----------
    frame_win : (rows, cols) the frame's grey levels in the window.
    background : (rows, cols) the background's grey levels there (the temporal median).
    origin : (row0, col0) full-image position of the window's top-left pixel.
    frame : frame index.
    radius_px : the BB's expected image radius, px (from the rig's scale): the fit starts there and keeps
        R within :data:`MARKED_RADIUS_RANGE` of it (None: from the blob's moments, unbounded).
    noise_floor : least noise σ, grey levels.

    Returns
    -------
    Detection
        ``brightness`` is the ball's own light, grey levels × px: Σ (frame − background) + Σ m·background
        over the pixels the ball covers (m its coverage over the exposure, :func:`marked_ball_coverage`, at
        the fitted centre, edge and travel and the expected radius ``radius_px`` when given), so the wall
        texture the ball hides is added back instead of mixed in; it swings as the mark turns.
        ``amplitude`` is the bright half's radiance minus the mean background, ``width_px`` R/2 (a disk's
        second moment), flag ``marked``.

    Notes
    -----
    Pixel (u, v) = (col, row), centre of the top-left pixel at (0, 0). The ball's outline fixes the
    centre wherever the mark turns, so the centre does not follow the bright half.
    """
    r0, c0 = origin
    rows, cols = frame_win.shape
    if rows < 5 or cols < 5:
        return _failed(frame, float("nan"), float("nan"), "fit window smaller than 5×5 px")
    yy, xx = np.mgrid[0:rows, 0:cols]
    x, y = xx.ravel().astype(float), yy.ravel().astype(float)
    f = frame_win.ravel().astype(float)
    bg = background.ravel().astype(float)
    diff = (f - bg).reshape(rows, cols)
    # start: the blob of |frame − background| (both halves differ from the wall)
    cx, cy, l1, l2, th0 = _moments(np.abs(diff), xx, yy)
    rad0 = float(np.clip(2.0 * math.sqrt(l2), 1.0, min(rows, cols) / 2))
    r_lo, r_hi = 0.5, float(min(rows, cols))
    if radius_px is not None:
        rad0 = float(radius_px)
        r_lo, r_hi = MARKED_RADIUS_RANGE[0] * rad0, MARKED_RADIUS_RANGE[1] * rad0
    # a disk of radius R swept by L has the second moment R²/4 + L²/12 along the sweep
    len0 = float(np.clip(math.sqrt(max(12.0 * (l1 - rad0 * rad0 / 4.0), 0.0)), 0.5, max(rows, cols) / 2))
    pos = np.clip(diff, 0, None)
    neg = np.clip(-diff, 0, None)
    if pos.sum() > 0 and neg.sum() > 0:
        bx, by = (pos * xx).sum() / pos.sum(), (pos * yy).sum() / pos.sum()
        dxn, dyn = (neg * xx).sum() / neg.sum(), (neg * yy).sum() / neg.sum()
        phi0 = math.atan2(by - dyn, bx - dxn)
    else:
        phi0 = 0.0
    bright0 = float(np.max(f))
    dark0 = float(np.min(f))
    p0 = np.array([cx, cy, rad0, 0.8, phi0, bright0, dark0, 0.0, 0.2, len0, th0])
    lo = np.array([-0.5, -0.5, r_lo, 0.3, phi0 - 2 * math.pi, 0.0, 0.0, -0.95, 0.0, 0.0, th0 - math.pi])
    hi = np.array(
        [cols - 0.5, rows - 0.5, r_hi, 3.0, phi0 + 2 * math.pi, 512.0, 512.0, 0.95, 1.0,
         max(rows, cols), th0 + math.pi]
    )  # fmt: skip
    p0 = np.clip(p0, lo + 1e-9, hi - 1e-9)
    steps = np.array([1e-3, 1e-3, 1e-3, 1e-3, 1e-3, 1e-2, 1e-2, 1e-4, 1e-4, 1e-3, 1e-4])

    def resid(p: np.ndarray) -> np.ndarray:
        return marked_ball_model(p, x, y, bg) - f

    def jac(q: np.ndarray) -> np.ndarray:
        return _numeric_jacobian(resid, q, steps)

    # the blob of |difference| leans toward the half with more contrast: start there and half a radius
    # either way along the mark's axis, and keep the start that fits best
    fits = []
    for shift in (0.0, 0.5, -0.5):
        q0 = p0.copy()
        q0[0] += shift * rad0 * math.cos(phi0)
        q0[1] += shift * rad0 * math.sin(phi0)
        q0 = np.clip(q0, lo + 1e-9, hi - 1e-9)
        fits.append(levenberg_marquardt(resid, jac, q0, lo, hi, max_iter=MARKED_START_ITERATIONS))
    start = min(fits, key=lambda ft: ft.cost)
    fit = levenberg_marquardt(resid, jac, start.x, lo, hi, max_iter=60)
    p = fit.x
    u, v = float(p[0]) + c0, float(p[1]) + r0
    if not fit.success:
        return _failed(frame, u, v, f"marked-ball fit did not converge: {fit.message}")
    if not (0 <= p[0] <= cols - 1 and 0 <= p[1] <= rows - 1):
        return _failed(frame, u, v, "fitted centre left the fit window")
    model = marked_ball_model(p, x, y, bg)
    excess = model - bg
    amp = float(p[5] - np.mean(bg))
    scale = max(abs(amp), abs(float(p[6] - np.mean(bg))), 1e-6)
    outside = np.abs(excess) < 0.02 * scale
    noise = max(_background_sigma(fit.fun, excess, scale, f - bg), noise_floor)
    corr = correlation_factor(fit.fun.reshape(rows, cols), outside.reshape(rows, cols))
    cov = noise * noise * np.linalg.pinv(fit.jac.T @ fit.jac) * corr
    su, sv = (math.sqrt(max(float(cov[i, i]), 0.0)) for i in (0, 1))
    ball = ~outside
    total_abs = float(np.abs(excess).sum())
    floor = spot_position_bound_px(total_abs, 0.5 * float(p[2]), noise)
    su, sv = max(su, floor), max(sv, floor)
    # the BB's own light: frame − background over the ball, plus the background it hides there
    # the BB's own light: frame − background over the ball, plus the background it hides there. The ball's
    # coverage is taken at the expected radius (the fitted one wobbles as the mark turns, and its error
    # times the background is a false flicker: on lane-spin it tripled the spin rate's standard error)
    at_radius = p.copy()
    if radius_px is not None:
        at_radius[2] = radius_px
    cover, dcover = marked_ball_coverage(at_radius, x, y)
    on_ball = cover >= MARKED_COVERAGE_MIN
    signal = float(np.sum((f - bg + cover * bg)[on_ball]))
    signal_per_radius = float(np.sum((dcover * bg)[on_ball]))
    snr = total_abs / (noise * math.sqrt(max(int(ball.sum()), 1)))
    if snr < MIN_AMPLITUDE_SNR:
        return _failed(frame, u, v, f"signal {snr:.1f} σ is below {MIN_AMPLITUDE_SNR:g} σ")
    length = float(p[9])
    angle = (float(p[10]) + math.pi / 2) % math.pi - math.pi / 2 if length > 0 else 0.0
    flags = ["marked"] + (["streak"] if length > 1.0 else [])
    return Detection(
        frame=frame,
        u_px=u,
        v_px=v,
        sigma_u_px=su,
        sigma_v_px=sv,
        amplitude=amp,
        brightness=signal,
        width_px=0.5 * float(p[2]),
        streak_len_px=length,
        streak_angle_rad=angle,
        noise=noise,
        snr=float(snr),
        flags=tuple(flags),
        sigma_floor_px=floor,
        light_radius_px=float(at_radius[2]),
        light_per_radius=signal_per_radius,
    )
