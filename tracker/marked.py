"""A marked BB (one half dark, lit from one side) fitted by its outline, and the ball's own light.

:func:`marked_ball_model` is a half-dark ball occluding the background, swept over the exposure;
:func:`localise_marked` fits it to a window of the frame and its background, so the outline fixes the
centre wherever the mark turns, and takes the ball's own light (the background it hides added back,
:func:`marked_ball_coverage`). The result is a :class:`tracker.spotfit.Detection` flagged ``marked``.

Conventions: pixel (u, v) = (col, row), the centre of the top-left pixel at (0, 0).
"""

from __future__ import annotations

import math

import numpy as np
from scipy.special import erf

from .leastsq import _numeric_jacobian, levenberg_marquardt
from .noise import _background_sigma, correlation_factor, spot_position_bound_px
from .profiles import _SQRT2
from .spotfit import MIN_AMPLITUDE_SNR, Detection, _failed, _moments

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
