"""Level and scale check from a drop: a ball let fall in the flight plane, filmed by the rigged camera.

A free fall measures g in the rig's metres and the clip's seconds, so a wrong frame rate (g scales as the
square of the time scale) or a wrong scale (g scales with it) shows at once; the direction of the fall
gives the direction of gravity in the board's frame, which levels the world frame when the board was not
level. Self-contained: simple detection by differencing against a median background (no tracker).

Conventions
-----------
World frame: x downrange, y up, z toward the camera, metres; pixels (u, v) in OpenCV order; images indexed
(row, col); times in seconds since the clip's first frame (container timestamps unless overridden).

The fitted motion along the fall direction ĝ = (sin θ, −cos θ) (θ: tilt of gravity from the board's −y
toward +x) is s(t) = w0 t + ½ g t² − k (w0² t²/2 + w0 g t³/3 + g² t⁴/12): free fall with an optional
quadratic-drag term to first order in k (the drag deceleration per squared speed, 1/m), which is accurate
while k v² ≪ g. Across the fall: a constant drift. The drag term is kept when it is physical (k > 0 and
small) and lowers χ² by more than :data:`DRAG_TERM_MIN_DCHI2` (otherwise k = 0).

References
----------
Galilei, G. (1638). Discorsi e dimostrazioni matematiche intorno a due nuove scienze (free fall, s ∝ t²).
Bevington, P. R. & Robinson, D. K. (2003). Data Reduction and Error Analysis for the Physical Sciences,
3rd ed., McGraw-Hill, sec. 8.1 (parameter errors from the curvature matrix) and 11.4 (F test for an
added term).
"""

from __future__ import annotations

import dataclasses
import math
import os
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import cv2
import numpy as np
from scipy.optimize import least_squares

from hopscope.shared.constants import MAD_TO_SIGMA, STANDARD_GRAVITY_MPS2
from hopscope.shared.video import check_frame_rate, iter_frames, point_times_s

from .dropcheck import DropCheck, Measured
from .rig import Rig

#: Allowance for local gravity around the standard value, m/s²: normal gravity runs from 9.7803 (equator)
#: to 9.8322 (poles) (WGS84 Somigliana formula, NIMA TR8350.2 (2000) eq. 4-1). # from memory (constants)
LOCAL_GRAVITY_ALLOWANCE_MPS2 = 0.026

#: A measured g further than DROP_SIGMA_LIMIT standard errors (plus the allowance) from the expected value
#: is inconsistent. # common practice, no published source
DROP_SIGMA_LIMIT = 3.0

#: A drop whose g is known worse than this (relative standard error) gets a warning: it cannot catch a
#: frame-rate or scale error of a few per cent.
WEAK_DROP_RELATIVE_STDERR = 0.01

#: Systematic centroid error of the ball along its fall, px: a drift this size across the fall tilts the
#: fitted direction by (it / fall length in px) rad, so it is added to the tilt's standard error. On the
#: lane-long render the found centroids drift ≈ 0.05 px along a 77 px fall (a 0.22° tilt at 4 fit σ)
#: [measured]; 0.1 px keeps such a drift from levelling a level board.
CENTROID_SYSTEMATIC_PX = 0.1

#: The tilt is applied (the world frame levelled) when it is this many standard errors from zero.
TILT_SIGNIFICANCE = 3.0

#: Fewest frames with the ball found for a fit.
MIN_DROP_POINTS = 8

#: The drag term stays in the model when it lowers χ² by more than this. A light ball always has some drag;
#: a physical term (below) costs precision, but leaving it out biases g low by the mean k v² (on the
#: lane-close-holder render, −0.7 % against −0.4 % with it [measured]), so any improvement keeps it.
DRAG_TERM_MIN_DCHI2 = 0.0

#: ... and only when it is physical (k > 0) and small enough for the first-order model (k v² below this
#: fraction of g at the fastest point); a larger fitted k means the curvature comes from something else.
DRAG_TERM_MAX_FRACTION = 0.1

#: Detection: threshold in robust noise σ of the difference image, and its floor in grey levels.
DETECT_SIGMA = 6.0
DETECT_FLOOR_DN = 8.0
#: Smallest and largest accepted blob, px².
BLOB_MIN_AREA_PX = 3
BLOB_MAX_AREA_FRACTION = 0.01
#: Candidate blobs kept per frame (the largest), and the consensus and refined tolerances of the path
#: through them, px.
CANDIDATES_PER_FRAME = 3
PATH_CONSENSUS_PX = 3.0
PATH_REFINED_PX = 1.5
#: The fall's data start where the ball first moves more than this in one frame, px (on the lane
#: renders, the frames before it bias g by up to 0.6 % [measured]). # common practice, no published source
MOVING_STEP_PX = 0.3
#: Points of the path the backward growth fits its local curve to.
GROW_FIT_POINTS = 6
#: Frames sampled for the median background.
BACKGROUND_FRAMES = 15
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

#: A fall is a clean parabola when the lag-1 autocorrelation of its fit residuals stays below this
#: (noise: ≈ 0 ± 1/√N; a contact phase or a wrong model leaves a trend near 1). # common practice, no
#: published source (threshold; the statistic: Durbin & Watson 1950, Biometrika 37:409)
CLEAN_AUTOCORRELATION = 0.5

#: Camera frame rates, Hz: a wrong g that a true rate among these explains (within COMMON_RATE_TOLERANCE)
#: is blamed on the frame rate. # common practice, no published source
COMMON_FRAME_RATES_HZ = (24, 25, 30, 48, 50, 60, 90, 100, 120, 180, 200, 240, 250, 300, 400, 480, 500, 600,
                         960, 1000, 1200, 1920, 2000, 2500, 3000, 4000, 5000, 10000)  # fmt: skip
COMMON_RATE_TOLERANCE = 0.01


@dataclass(frozen=True)
class DropClip:
    """The ball's image positions in a drop clip.

    Attributes
    ----------
    source : the clip's path.
    t_s : (N,) times of the frames where the ball was found, s.
    uv_px : (N, 2) ball centroids (u, v), px.
    frames : (N,) frame indices.
    n_frames : frames in the clip.
    timing : "container timestamps" or "--fps override".
    fps : frame rate implied by the timing, 1/s.
    frame_size : (w, h) of the frames, px.
    """

    source: str
    t_s: np.ndarray
    uv_px: np.ndarray
    frames: np.ndarray
    n_frames: int
    timing: str
    fps: float
    frame_size: tuple[int, int] = (0, 0)


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


# --- the clip ----------------------------------------------------------------------------------------------
def _frames(path: Path, fps: float | None):
    """Yield (time_s, index, luma frame) through the ground floor's reader (container times or override)."""
    for frame in iter_frames(path, fps_override=fps, fps_option="--drop-fps"):
        yield frame.t_s, frame.index, frame.luma


def find_ball(path: str | os.PathLike[str], *, fps: float | None = None, readout_s: float = 0.0) -> DropClip:
    """Find the dropped ball in each frame of a clip: |frame − median background|, largest blob's centroid.

    Parameters
    ----------
    path : the clip (any container/codec FFmpeg reads).
    fps : frame rate override, 1/s (frame k at k/fps); None uses the container's timestamps.
    readout_s : rolling-shutter readout time, top row to bottom row, s: row v of a frame is exposed
        (v / rows)·readout later than its top row, and a falling ball crosses the rows.

    Returns
    -------
    DropClip (frames without a single clear blob are left out).

    Notes
    -----
    Pixels (u, v) in OpenCV order, centroids weighted by the difference image; times in s from the first
    frame.
    """
    p = Path(path)
    if fps is not None:
        check_frame_rate(fps, "--drop-fps")
    if not (math.isfinite(readout_s) and readout_s >= 0):
        raise ValueError(f"--drop-readout-ms: expected a readout time >= 0, got {readout_s!r}")
    # pass 1: timestamps of all frames and an evenly spread sample of them for the median background
    # (memory stays bounded: the sample is thinned by half whenever it grows past twice its size)
    all_t_list: list[float] = []
    sample: list[tuple[int, np.ndarray]] = []
    step = 1
    for t, i, img in _frames(p, fps):
        all_t_list.append(t)
        if i % step == 0:
            sample.append((i, np.array(img)))
            if len(sample) > 2 * BACKGROUND_FRAMES:
                step *= 2
                sample = [(j, f) for j, f in sample if j % step == 0]
    n_frames = len(all_t_list)
    if n_frames < MIN_DROP_POINTS:
        raise ValueError(f"{p}: the drop clip has only {n_frames} frame(s)")
    keep_idx = np.unique(np.linspace(0, len(sample) - 1, min(BACKGROUND_FRAMES, len(sample))).astype(int))
    picked = [sample[j][1] for j in keep_idx]
    background = np.median(np.stack(picked), axis=0).astype(np.uint8)
    # one robust noise level for the clip: the blurred difference of a background sample, every 4th pixel
    probe = cv2.GaussianBlur(cv2.absdiff(picked[len(picked) // 2], background), (0, 0), 1.0)
    sub = probe[::4, ::4].astype(np.float32)
    sigma = MAD_TO_SIGMA * float(np.median(np.abs(sub - np.median(sub))))
    thr = max(DETECT_SIGMA * sigma, DETECT_FLOOR_DN)
    max_area = BLOB_MAX_AREA_FRACTION * background.size
    cand_t, cand_uv, cand_i = [], [], []
    for t, i, img in _frames(p, fps):  # pass 2: the ball in every frame
        diff = cv2.absdiff(img, background)
        mask = (cv2.GaussianBlur(diff, (0, 0), 1.0) > thr).astype(np.uint8)
        n, _, stats, _ = cv2.connectedComponentsWithStats(mask, connectivity=8)
        order = np.argsort(stats[1:, cv2.CC_STAT_AREA])[::-1][:CANDIDATES_PER_FRAME] + 1
        for best in order:
            x, y, w, h, area = stats[best, :5]
            if not (BLOB_MIN_AREA_PX <= area <= max_area):
                continue
            if x <= 0 or y <= 0 or x + w >= diff.shape[1] or y + h >= diff.shape[0]:
                continue  # cut by the frame's edge: its centroid would be biased
            pad = 2
            r0, r1 = max(y - pad, 0), min(y + h + pad, diff.shape[0])
            c0, c1 = max(x - pad, 0), min(x + w + pad, diff.shape[1])
            patch = np.clip(diff[r0:r1, c0:c1].astype(np.float64) - 0.5 * thr, 0, None)
            total = float(patch.sum())
            if total <= 0:
                continue
            rr, cc = np.mgrid[r0:r1, c0:c1]
            cand_uv.append([(patch * cc).sum() / total, (patch * rr).sum() / total])
            cand_t.append(t)
            cand_i.append(i)
    keep = _consistent_path(np.asarray(cand_i, int), np.asarray(cand_uv, float).reshape(-1, 2))
    uv_arr = np.asarray([cand_uv[j] for j in keep], float).reshape(-1, 2)
    frame_idx = np.asarray([cand_i[j] for j in keep], int)
    all_t = np.array(all_t_list)
    span = all_t[-1] - all_t[0]
    if fps is not None:
        timing, rate = "--fps override", float(fps)
    else:
        timing, rate = "container timestamps", (len(all_t) - 1) / span if span > 0 else float("nan")
    size = (int(background.shape[1]), int(background.shape[0]))
    # the ball's row is exposed that much later than the frame's top row (the one place that offset is applied)
    t_s = point_times_s(np.asarray([cand_t[j] for j in keep], float), uv_arr[:, 1], size[1], readout_s)
    return DropClip(str(p), t_s, uv_arr, frame_idx, n_frames, timing, rate, size)


def _consistent_path(frames: np.ndarray, uv: np.ndarray) -> list[int]:
    """Indices of the candidates that form one smooth path, at most one per frame.

    Consensus of a cubic u(k), v(k) in the frame index k (a fall seen through a lens is smooth; a cubic
    absorbs the perspective and distortion bending over the fall) from deterministic triplets of
    candidates spread over the clip (RANSAC, Fischler & Bolles 1981, Commun. ACM 24:381, with a fixed
    sampling pattern), then refined on its inliers.
    """
    if len(uv) < MIN_DROP_POINTS:
        return list(range(len(uv)))
    order = np.argsort(frames, kind="stable")
    frames, uv = frames[order], uv[order]
    n = len(uv)
    k = frames.astype(float)
    best: np.ndarray | None = None
    best_count = 0
    picks = np.linspace(0, n - 1, 12).astype(int)
    for a in picks[:6]:
        for b in picks[3:9]:
            for c in picks[6:]:
                if not (frames[a] < frames[b] < frames[c]):
                    continue
                sel = np.array([a, b, c])
                cu = np.polyfit(k[sel], uv[sel, 0], 2)
                cv = np.polyfit(k[sel], uv[sel, 1], 2)
                r = np.hypot(np.polyval(cu, k) - uv[:, 0], np.polyval(cv, k) - uv[:, 1])
                inl = r < PATH_CONSENSUS_PX
                if inl.sum() > best_count:
                    best, best_count = inl, int(inl.sum())
    if best is None or best_count < MIN_DROP_POINTS:
        return []
    for _ in range(3):  # refine with a cubic on the inliers
        deg = 3 if best.sum() > 8 else 2
        cu = np.polyfit(k[best], uv[best, 0], deg)
        cv = np.polyfit(k[best], uv[best, 1], deg)
        r = np.hypot(np.polyval(cu, k) - uv[:, 0], np.polyval(cv, k) - uv[:, 1])
        best = r < PATH_REFINED_PX
    chosen: dict[int, int] = {}
    for j in np.flatnonzero(best):
        f = int(frames[j])
        if f not in chosen or r[j] < r[chosen[f]]:
            chosen[f] = int(j)
    _grow_backward(chosen, frames, k, uv)
    return sorted(int(order[j]) for j in chosen.values())


def _grow_backward(chosen: dict[int, int], frames: np.ndarray, k: np.ndarray, uv: np.ndarray) -> None:
    """Follow the ball from the path's first frame back in time (into ``chosen``, frame → candidate): each
    earlier frame's candidate nearest a quadratic through the next :data:`GROW_FIT_POINTS` chosen points,
    within :data:`PATH_CONSENSUS_PX`. A whole-clip curve cannot follow a ball that sat in a holder and
    was let go; the release search (:func:`find_release`) then decides where the free fall starts."""
    if len(chosen) < GROW_FIT_POINTS:
        return
    by_frame: dict[int, list[int]] = {}
    for j, f in enumerate(frames):
        by_frame.setdefault(int(f), []).append(j)
    f = min(chosen) - 1
    while f >= int(frames.min()) and f in by_frame:
        nxt = sorted(chosen)[:GROW_FIT_POINTS]
        sel = np.array([chosen[g] for g in nxt])
        cu = np.polyfit(k[sel], uv[sel, 0], 2)
        cv = np.polyfit(k[sel], uv[sel, 1], 2)
        pred = np.array([np.polyval(cu, f), np.polyval(cv, f)])
        cand = by_frame[f]
        d = [float(np.linalg.norm(uv[j] - pred)) for j in cand]
        if min(d) > PATH_CONSENSUS_PX:
            return
        chosen[f] = cand[int(np.argmin(d))]
        f -= 1


def _moving(clip: DropClip) -> np.ndarray:
    """Mask of the falling part: from the last frame before the ball first moves more than
    :data:`MOVING_STEP_PX` in one frame (drops the ball held still in the background, in a hand or in a
    holder, where its centroid can also be pulled by what holds it; what remains of a slow release,
    :func:`find_release` trims)."""
    uv = clip.uv_px
    if len(uv) < 3:
        return np.ones(len(uv), bool)
    step = np.linalg.norm(np.diff(uv, axis=0), axis=1)
    moving = np.concatenate([[False], step > MOVING_STEP_PX])
    if not moving.any():
        return np.ones(len(uv), bool)
    mask = np.zeros(len(uv), bool)
    mask[max(int(np.argmax(moving)) - 1, 0) :] = True
    return mask


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


def _likely_cause(ratio: float, fps: float, clean: bool) -> str:
    """Which error best explains g measured ``ratio`` × expected: not free fall when the fall is not a
    clean parabola; the frame rate when a common camera rate explains it; else the scale."""
    if not clean:
        return "not free fall"
    if math.isfinite(fps) and fps > 0:
        true_fps = fps / math.sqrt(ratio)
        if any(abs(true_fps / r - 1) < COMMON_RATE_TOLERANCE for r in COMMON_FRAME_RATES_HZ):
            return "frame rate"
    return "scale"


def check_drop(
    rig: Rig,
    path: str | os.PathLike[str],
    *,
    fps: float | None = None,
    g_expected_mps2: float = STANDARD_GRAVITY_MPS2,
    drag: str = "auto",
    readout_s: float = 0.0,
) -> tuple[DropCheck, tuple[str, ...]]:
    """Measure g from a drop clip through ``rig`` and judge it.

    Only the free fall is fitted: the frames where the ball sits still are left out, then
    :func:`find_release` finds where it leaves its holder. The fit's residuals decide whether the fall
    is a clean parabola (:func:`lag1_autocorrelation` below :data:`CLEAN_AUTOCORRELATION`); only then can a
    wrong g be blamed on the frame rate or the scale.

    Returns
    -------
    (drop_check, warnings): the :class:`~calibration.dropcheck.DropCheck` (verdict "consistent",
    "inconsistent" or "failed", ``likely_cause``, ``levelled`` false until :func:`apply_level`);
    ``warnings`` name the likely cause when g is off or why the check failed.

    Notes
    -----
    World frame: x downrange, y up (as the rig has it before levelling), metres; seconds from the clip.
    """
    if not (math.isfinite(g_expected_mps2) and g_expected_mps2 > 0):
        raise ValueError(f"--g-expected: expected a positive acceleration, got {g_expected_mps2!r}")
    clip = find_ball(path, fps=fps, readout_s=readout_s)
    if clip.frame_size != tuple(rig.image_size):
        raise ValueError(
            f"{clip.source}: drop clip frames are {clip.frame_size[0]}x{clip.frame_size[1]}, the rig's images "
            f"{rig.image_size[0]}x{rig.image_size[1]} (the drop must be filmed with the calibrated setting)"
        )
    mask = _moving(clip)
    xy = rig.pixel_to_world(clip.uv_px[mask]) if mask.any() else np.zeros((0, 2))
    t_fall, uv_fall, frames_fall = clip.t_s[mask], clip.uv_px[mask], clip.frames[mask]
    release = find_release(t_fall, xy) if len(xy) else 0
    t_fall, xy, uv_fall, frames_fall = (
        t_fall[release:],
        xy[release:],
        uv_fall[release:],
        frames_fall[release:],
    )
    fit = fit_free_fall(t_fall, xy, drag=drag)
    base = DropCheck(
        clip=clip.source,
        timing=clip.timing,
        fps=clip.fps if math.isfinite(clip.fps) else None,
        frames=clip.n_frames,
        g_expected_mps2=g_expected_mps2,
        verdict="failed",
        release_frame=int(frames_fall[0]) if len(frames_fall) else None,
    )
    if not fit.ok:
        failed = dataclasses.replace(base, reason=fit.reason, likely_cause="not free fall")
        return failed, (f"drop check failed on {clip.source}: {fit.reason}",)
    fall_px = float(np.linalg.norm(uv_fall[-1] - uv_fall[0]))
    tilt_sys = CENTROID_SYSTEMATIC_PX / max(fall_px, 1.0)
    tilt_err = math.hypot(fit.tilt_stderr_rad, tilt_sys)
    dev = fit.g_mps2 - g_expected_mps2
    allowed = DROP_SIGMA_LIMIT * fit.g_stderr_mps2 + LOCAL_GRAVITY_ALLOWANCE_MPS2
    verdict = "consistent" if abs(dev) <= allowed else "inconsistent"
    ratio = fit.g_mps2 / g_expected_mps2
    clean = abs(fit.residual_autocorrelation) < CLEAN_AUTOCORRELATION
    cause = "" if verdict == "consistent" else _likely_cause(ratio, clip.fps, clean)
    rate_hint = ""
    if math.isfinite(clip.fps):
        rate_hint = f" (a true frame rate of {clip.fps / math.sqrt(ratio):.4g} fps instead of {clip.fps:.4g})"
    reasons = {
        "": "",
        "frame rate": f"the frame rate is probably wrong{rate_hint}: g scales with its square; or the scale "
        "(--square-mm, plane offsets, parallax) is off, which scales g by its own error",
        "scale": "the scale is probably wrong (--square-mm, plane offsets typed in the wrong unit, parallax), "
        f"which scales g by its own error; or the frame rate{rate_hint}, which scales g by its square",
        "not free fall": "the ball's path is not a clean parabola (it touched the holder or a hand, or "
        "something else moved): film a ball falling freely; neither the frame rate nor the scale is blamed",
    }
    check = dataclasses.replace(
        base,
        verdict=verdict,
        reason=reasons[cause],
        g_measured_mps2=Measured(fit.g_mps2, fit.g_stderr_mps2),
        g_ratio=ratio,
        tilt_deg=Measured(math.degrees(fit.tilt_rad), math.degrees(tilt_err)),
        tilt_fit_stderr_deg=math.degrees(fit.tilt_stderr_rad),
        tilt_centroid_stderr_deg=math.degrees(tilt_sys),
        fall_px=fall_px,
        drag_per_m=None if fit.drag_per_m is None else Measured(fit.drag_per_m, fit.drag_stderr_per_m or 0.0),
        points=fit.n_points,
        duration_s=fit.duration_s,
        residual_rms_m=fit.residual_rms_m,
        clean_parabola=bool(clean),
        likely_cause=cause,
    )
    warns = []
    if fit.g_stderr_mps2 > WEAK_DROP_RELATIVE_STDERR * g_expected_mps2:
        warns.append(
            f"drop check on {clip.source} is weak: g is known only to ±{100 * fit.g_stderr_mps2 / g_expected_mps2:.1f} % "
            f"from {fit.n_points} points over {1e3 * fit.duration_s:.0f} ms; film a longer fall (≥ 0.2 s in view)"
        )
    if verdict == "inconsistent":
        warns.append(
            f"drop check: measured g = {fit.g_mps2:.4g} ± {fit.g_stderr_mps2:.2g} m/s², expected "
            f"{g_expected_mps2:.4g} ({100 * (ratio - 1):+.2f} %): {reasons[cause]}"
        )
    return check, tuple(warns)


def drop_refusal(check: DropCheck) -> str:
    """The one line ``calibrate`` stops with when the rig fails its own drop check."""
    if check.g_measured_mps2 is None:
        return (
            f"{check.clip}: drop check failed ({check.reason}); rerun with --keep-failed-drop to keep the rig"
        )
    g = check.g_measured_mps2
    return (
        f"{check.clip}: drop check failed: g = {g.value:.4g} ± {g.stderr:.2g} m/s², expected "
        f"{check.g_expected_mps2:.4g}; likely cause: {check.likely_cause} ({check.reason}); "
        "rerun with --keep-failed-drop to keep the rig anyway"
    )


def apply_level(
    rig: Rig,
    drop_check: DropCheck,
    warnings: tuple[str, ...] = (),
    *,
    rng: int | np.random.Generator | None = 0,
) -> Rig:
    """Attach ``drop_check`` to the rig and, when its tilt is significant, level the world frame.

    The world frame is turned about z by −tilt, so gravity points along −y: the origin and the plane stay;
    every mapped x, y is then in the levelled frame. Each ensemble member is turned by its own draw
    −(tilt + δ), δ ~ N(0, σ_tilt²), so the tilt's uncertainty reaches the error bars. Levelled or not is
    recorded in ``drop_check``. A check that is not consistent never levels the rig (its fall is not
    trusted).
    """
    check = dataclasses.replace(drop_check, levelled=False)
    tilt = check.tilt_deg
    out = rig
    if tilt is not None and check.verdict == "consistent":
        value, err = tilt.value, tilt.stderr
        if math.isfinite(err) and abs(value) > TILT_SIGNIFICANCE * err:
            gen = rng if isinstance(rng, np.random.Generator) else np.random.default_rng(rng)
            angle = -math.radians(value)
            out = rig.rotated_about_z(angle)
            draws = gen.normal(0.0, math.radians(err), len(rig.ensemble))
            members = tuple(
                dataclasses.replace(m, rotation=m.rotation @ _rz(angle - float(dd)).T)
                for m, dd in zip(rig.ensemble, draws, strict=True)
            )
            out = dataclasses.replace(out, ensemble=members)
            check = dataclasses.replace(check, levelled=True)
    return out.with_drop_check(check, warnings=warnings)


def _rz(angle_rad: float) -> np.ndarray:
    c, s = math.cos(angle_rad), math.sin(angle_rad)
    return np.array([[c, -s, 0.0], [s, c, 0.0], [0.0, 0.0, 1.0]])
