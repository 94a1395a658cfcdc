"""The free fall itself: fit a fall (with an optional small drag term) to world positions, find its release.

Pure functions of times (s) and world positions (m); :mod:`calibration.drop` measures a clip through the rig
and judges the result, :mod:`calibration.dropclip` finds the ball in the frames.

The fitted motion along the fall direction ĝ = (sin θ, −cos θ) (θ: tilt of gravity from the board's −y
toward +x) is s(t) = w0 t + ½ g t² − k (w0² t²/2 + w0 g t³/3 + g² t⁴/12): free fall with an optional
quadratic-drag term to first order in k (the drag deceleration per squared speed, 1/m), which is accurate
while k v² ≪ g. Across the fall: a constant drift. The drag term is kept when it is physical (k > 0 and
small) and lowers χ² by more than :data:`DRAG_TERM_MIN_DCHI2` (otherwise k = 0).

Conventions
-----------
World frame: x downrange, y up, z toward the camera, metres; times in seconds.

References
----------
Galilei, G. (1638). Discorsi e dimostrazioni matematiche intorno a due nuove scienze (free fall, s ∝ t²).
Bevington, P. R. & Robinson, D. K. (2003). Data Reduction and Error Analysis for the Physical Sciences,
3rd ed., McGraw-Hill, sec. 8.1 (parameter errors from the curvature matrix) and 11.4 (F test for an
added term).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy.optimize import least_squares

from hopscope.shared.constants import MAD_TO_SIGMA

#: Fewest frames with the ball found for a fit.
MIN_DROP_POINTS = 8

#: The drag term stays in the model when it lowers χ² by more than this. A light ball always has some drag;
#: a physical term (below) costs precision, but leaving it out biases g low by the mean k v² (on the
#: lane-close-holder render, −0.7 % against −0.4 % with it [measured]), so any improvement keeps it.
DRAG_TERM_MIN_DCHI2 = 0.0

#: ... and only when it is physical (k > 0) and small enough for the first-order model (k v² below this
#: fraction of g at the fastest point); a larger fitted k means the curvature comes from something else.
DRAG_TERM_MAX_FRACTION = 0.1

#: Points further than OUTLIER_SIGMA robust σ from the fit are dropped and the fit repeated.
OUTLIER_SIGMA = 5.0

#: Release search (:func:`find_release`): the first points of the free fall must lie within RELEASE_SIGMA
#: noise σ of the fall's curve. # common practice, no published source
RELEASE_HEAD_POINTS = 4
RELEASE_SIGMA = 4.0
#: ... and their mean along the fall must lie within RELEASE_TREND_SIGMA standard errors of zero: frames
#: of a ball still held sit on one side of the curve.
RELEASE_TREND_SIGMA = 3.0
#: Points of the window each start is judged on: short enough that a parabola follows the fall with its
#: drag and cannot bend round a held start.
RELEASE_WINDOW_POINTS = 30


@dataclass(frozen=True)
class FreeFallFit:
    """Result of :func:`fit_free_fall` (a failed fit carries ``reason``).

    Attributes
    ----------
    g_mps2, g_stderr_mps2 : magnitude of the acceleration of gravity and its standard error, m/s².
    tilt_rad, tilt_stderr_rad : angle of the fall from the world −y axis toward +x, rad.
    drag_per_m, drag_stderr_per_m : quadratic drag term k, 1/m (None when not kept).
    residual_rms_m : RMS of the position residuals, m.
    n_points : points used; duration_s : time they span, s.
    reason : why the fit failed ("" when it did not).
    residual_autocorrelation : lag-1 autocorrelation of the residuals (:func:`lag1_autocorrelation`).
    """

    g_mps2: float
    g_stderr_mps2: float
    tilt_rad: float
    tilt_stderr_rad: float
    drag_per_m: float | None
    drag_stderr_per_m: float | None
    residual_rms_m: float
    n_points: int
    duration_s: float
    reason: str = ""
    residual_autocorrelation: float = 0.0

    @property
    def ok(self) -> bool:
        return not self.reason


def _failed(reason: str, n: int = 0) -> FreeFallFit:
    nan = float("nan")
    return FreeFallFit(nan, nan, nan, nan, None, None, nan, n, nan, reason)


def _fall(t: np.ndarray, w0: float, g: float, k: float) -> np.ndarray:
    return w0 * t + 0.5 * g * t**2 - k * (0.5 * w0**2 * t**2 + w0 * g * t**3 / 3 + g**2 * t**4 / 12)


def _model(p: np.ndarray, t: np.ndarray, with_drag: bool) -> np.ndarray:
    x0, y0, theta, w0, g, c1 = p[:6]
    k = p[6] if with_drag else 0.0
    s = _fall(t, w0, g, k)
    gx, gy = math.sin(theta), -math.cos(theta)
    nx, ny = math.cos(theta), math.sin(theta)
    return np.column_stack([x0 + gx * s + nx * c1 * t, y0 + gy * s + ny * c1 * t])


def _solve(t, xy, with_drag, p0):
    def resid(p):
        return (_model(p, t, with_drag) - xy).ravel()

    start = np.append(p0, 0.0) if with_drag else p0
    res = least_squares(resid, start, method="lm", x_scale="jac", xtol=1e-14, ftol=1e-14, gtol=1e-14)
    rss = float(np.sum(res.fun**2))
    dof = max(xy.size - len(start), 1)
    try:
        cov = np.linalg.inv(res.jac.T @ res.jac) * rss / dof
    except np.linalg.LinAlgError:
        cov = np.full((len(start), len(start)), np.nan)
    return res.x, cov, rss, dof


def fit_free_fall(t_s: Any, xy_m: Any, *, drag: str = "auto") -> FreeFallFit:
    """Fit a free fall (optionally with a small quadratic-drag term) to world positions.

    Parameters
    ----------
    t_s : (N,) times, s.
    xy_m : (N, 2) world positions on the plane, m.
    drag : "auto" (keep the drag term when it is significant), "off" or "on".

    Returns
    -------
    FreeFallFit; standard errors from the curvature matrix scaled by the residual variance
    (Bevington & Robinson 2003, sec. 8.1). Points further than :data:`OUTLIER_SIGMA` robust σ from the
    first fit are dropped once.

    Notes
    -----
    World frame: x downrange, y up, metres. The model is in this module's docstring.
    """
    if drag not in ("auto", "off", "on"):
        raise ValueError(f"drag: expected 'auto', 'off' or 'on', got {drag!r}")
    t = np.asarray(t_s, float).ravel()
    xy = np.asarray(xy_m, float).reshape(-1, 2)
    good = np.isfinite(t) & np.all(np.isfinite(xy), axis=1)
    t, xy = t[good], xy[good]
    if len(t) < MIN_DROP_POINTS:
        return _failed(f"the ball was found in only {len(t)} frame(s), need {MIN_DROP_POINTS}", len(t))
    t = t - t[0]
    # start: a parabola per axis
    ax = np.polyfit(t, xy[:, 0], 2)
    ay = np.polyfit(t, xy[:, 1], 2)
    acc = 2 * np.array([ax[0], ay[0]])
    g0 = float(np.hypot(*acc))
    if not g0 > 0:
        return _failed("the ball does not accelerate", len(t))
    theta0 = math.atan2(acc[0], -acc[1])
    vel0 = np.array([ax[1], ay[1]])
    down = np.array([math.sin(theta0), -math.cos(theta0)])
    across = np.array([math.cos(theta0), math.sin(theta0)])
    p0 = np.array([ax[2], ay[2], theta0, vel0 @ down, g0, vel0 @ across])
    keep = np.ones(len(t), bool)
    for _ in range(2):
        p, cov, rss, dof = _solve(t[keep], xy[keep], False, p0)
        r = np.linalg.norm(_model(p, t, False) - xy, axis=1)
        mad = MAD_TO_SIGMA * np.median(np.abs(r[keep] - np.median(r[keep]))) + 1e-12
        new_keep = r < np.median(r[keep]) + OUTLIER_SIGMA * mad
        if new_keep.sum() < MIN_DROP_POINTS or np.array_equal(new_keep, keep):
            break
        keep = new_keep
        p0 = p
    tk, xyk = t[keep], xy[keep]
    p, cov, rss, dof = _solve(tk, xyk, False, p)
    with_drag = False
    if drag != "off":
        pd, covd, rssd, dofd = _solve(tk, xyk, True, p)
        s2 = rssd / dofd
        k_fit = float(pd[6])
        v_max = abs(float(pd[3])) + abs(float(pd[4])) * float(tk[-1])
        valid = 0.0 < k_fit and k_fit * v_max**2 < DRAG_TERM_MAX_FRACTION * abs(float(pd[4]))
        if drag == "on" or (valid and (rss - rssd) / s2 > DRAG_TERM_MIN_DCHI2):
            p, cov, rss, with_drag = pd, covd, rssd, True
    g = float(p[4])
    theta = float(math.remainder(p[2], 2 * math.pi))
    if g < 0:
        return _failed("the ball moves against gravity (upward acceleration)", len(tk))
    return FreeFallFit(
        g_mps2=g,
        g_stderr_mps2=float(np.sqrt(cov[4, 4])),
        tilt_rad=theta,
        tilt_stderr_rad=float(np.sqrt(cov[2, 2])),
        drag_per_m=float(p[6]) if with_drag else None,
        drag_stderr_per_m=float(np.sqrt(cov[6, 6])) if with_drag else None,
        residual_rms_m=float(np.sqrt(rss / len(tk))),
        n_points=int(len(tk)),
        duration_s=float(tk[-1] - tk[0]),
        residual_autocorrelation=lag1_autocorrelation(_model(p, tk, with_drag) - xyk),
    )


def _poly_residuals(t: np.ndarray, xy: np.ndarray, deg: int) -> np.ndarray:
    """(N, 2) residuals of a per-axis polynomial of degree ``deg`` in t fitted to ``xy``."""
    tc = t - t.mean()
    out = np.empty_like(xy)
    for ax in range(2):
        out[:, ax] = xy[:, ax] - np.polyval(np.polyfit(tc, xy[:, ax], deg), tc)
    return out


def find_release(t_s: np.ndarray, xy_m: np.ndarray) -> int:
    """Index of the first point of the free fall: where the ball has left its holder or hand.

    Before the release the ball is held, or slides and rolls against the holder with less than g; that part
    does not lie on the fall's curve. For each start, a parabola per axis is fitted to the next
    :data:`RELEASE_WINDOW_POINTS` points but the first :data:`RELEASE_HEAD_POINTS`, and those first points
    are compared with its prediction (the parabola cannot bend round them); the prediction's noise is
    measured the same way on the fall's last windows. The release is the earliest start whose first points
    lie within :data:`RELEASE_SIGMA` of it without a one-sided trend (:data:`RELEASE_TREND_SIGMA`).
    Returns 0 when every start looks like free fall. (A change-point search by residuals, Bevington &
    Robinson 2003, sec. 11.4, applied to the start of the segment.)
    """
    t = np.asarray(t_s, float)
    xy = np.asarray(xy_m, float).reshape(-1, 2)
    n = len(t)
    if n < 3 * MIN_DROP_POINTS:
        return 0
    window = min(n // 2, RELEASE_WINDOW_POINTS)
    h = RELEASE_HEAD_POINTS
    starts = range(0, n - window + 1)
    heads = np.array([_head_misfit(t, xy, s0, window, h) for s0 in starts])  # (S, h, 2)
    # the noise of that prediction, from the fall's last windows (free fall there for sure)
    tail = heads[-max(len(heads) // 4, 1) :]
    sigma = float(np.sqrt(np.mean(tail**2))) + 1e-12
    for s0, head in zip(starts, heads, strict=True):
        res = head / sigma
        fall = xy[s0 + window - 1] - xy[s0]
        along = res @ (fall / (np.linalg.norm(fall) + 1e-300))
        trend = abs(float(np.mean(along))) * math.sqrt(h)  # a held start leaves residuals of one sign
        if np.max(np.linalg.norm(res, axis=1)) < RELEASE_SIGMA and trend < RELEASE_TREND_SIGMA:
            return s0
    return 0


def _head_misfit(t: np.ndarray, xy: np.ndarray, start: int, window: int, h: int) -> np.ndarray:
    """(h, 2) misfit of the first ``h`` points of a window to the parabola fitted to the window's rest."""
    seg_t, seg = t[start + h : start + window], xy[start + h : start + window]
    tc = t[start : start + h] - seg_t.mean()
    out = np.empty((h, 2))
    for ax in range(2):
        coef = np.polyfit(seg_t - seg_t.mean(), seg[:, ax], 2)
        out[:, ax] = xy[start : start + h, ax] - np.polyval(coef, tc)
    return out


def lag1_autocorrelation(residuals: np.ndarray) -> float:
    """Lag-1 autocorrelation of a fit's residuals (each column separately, averaged): ≈ 0 ± 1/√N for
    noise, near 1 when a trend is left (Durbin & Watson 1950, Biometrika 37:409, d ≈ 2(1 − ρ₁))."""
    r = np.asarray(residuals, float).reshape(len(residuals), -1)
    r = r - r.mean(axis=0)
    den = np.sum(r**2, axis=0)
    num = np.sum(r[1:] * r[:-1], axis=0)
    ok = den > 0
    return float(np.mean(num[ok] / den[ok])) if ok.any() else 0.0
