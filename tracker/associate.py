"""Association: link per-frame detections into BB tracks with physics-aware gating.

A BB in flight moves fast, decelerates smoothly and curves smoothly; a leaf, an insect, a flicker or a
sensor defect does not. The linker works frame by frame in image space:

1. each open track predicts its position in the next frame from its last points (constant velocity from
   two points, constant acceleration from three or more);
2. detections within the gate (``gate_floor_px`` plus ``gate_fraction`` of the track's step length, grown
   with the frames elapsed) are assigned greedily, nearest first, one detection per track;
3. unassigned detections open new tracks; a track that finds nothing for ``max_gap_frames`` is closed.

Closed tracks are then checked as projectiles: points that do not lie on a smooth path through their
neighbours (a local quadratic in time, leave-one-out) are dropped as outliers; tracks that barely move,
that wiggle about a smooth arc (a quadratic in time over ``arc_points`` consecutive points, by more than
``max_wiggle`` times their noise), that turn by more than ``max_turn_rad`` or change speed by more than
``max_speed_change`` over their length, or that keep fewer than ``min_points`` points, are
rejected with the reason. Tracks of one BB broken by a gap are joined when one extrapolates onto the other.
Each surviving track is one shot.

Pixel (u, v) = (col, row), centre of the top-left pixel at (0, 0); times in seconds.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

#: Fewest points a shot must keep.
MIN_POINTS = 5

#: Gate radius: floor, px, plus this fraction of the track's current step length.
GATE_FLOOR_PX = 3.0
GATE_FRACTION = 0.25

#: Frames a track may go without a detection before it is closed.
MAX_GAP_FRAMES = 3

#: A track whose median step is below this many px per frame is not a BB in flight (a flicker, a leaf at
#: rest, a defect).
MIN_STEP_PX = 1.0

#: Leave-one-out residual above which a point is an outlier: this many σ, and at least OUTLIER_FLOOR_PX.
OUTLIER_SIGMA = 8.0
OUTLIER_FLOOR_PX = 0.5

#: Floor on a point's σ in the outlier test, px (compression and texture make real scatter larger
#: than the noise-based σ of the sharpest points).
SIGMA_FLOOR_PX = 0.05

#: A track that loses more than this fraction of its points as outliers is not a projectile.
MAX_OUTLIER_FRACTION = 0.3

#: Points per arc in the wiggle test, and the largest RMS of residuals about the arc, in units of the
#: points' σ (floored at SIGMA_FLOOR_PX): a BB stays near 1 (2 on compressed video).
ARC_POINTS = 15
MAX_WIGGLE = 6.0

#: Largest change of direction over a track, rad, and largest relative change of step length.
MAX_TURN_RAD = math.radians(35.0)
MAX_SPEED_CHANGE = 0.6


#: Largest first step of a new track when the frame size is not known, px.
FIRST_STEP_PX = 400.0


@dataclass(frozen=True)
class LinkOptions:
    """Tuning of the linker (defaults suit BB flights in the frame; see the module constants)."""

    min_points: int = MIN_POINTS
    gate_floor_px: float = GATE_FLOOR_PX
    gate_fraction: float = GATE_FRACTION
    max_gap_frames: int = MAX_GAP_FRAMES
    min_step_px: float = MIN_STEP_PX
    outlier_sigma: float = OUTLIER_SIGMA
    outlier_floor_px: float = OUTLIER_FLOOR_PX
    max_outlier_fraction: float = MAX_OUTLIER_FRACTION
    max_turn_rad: float = MAX_TURN_RAD
    max_speed_change: float = MAX_SPEED_CHANGE
    #: largest first step of a new track, px; None: half the frame diagonal in the tracker pipeline,
    #: :data:`FIRST_STEP_PX` when :func:`link` is called directly
    max_first_step_px: float | None = None
    arc_points: int = ARC_POINTS
    max_wiggle: float = MAX_WIGGLE


@dataclass(frozen=True)
class LinkResult:
    """Outcome of linking.

    Attributes
    ----------
    tracks : index arrays into the detections, one per accepted shot, ordered by start time; each sorted
        by frame.
    rejected : (indices, reason) of tracks that were not accepted (at least two points).
    outliers : indices of points dropped from accepted tracks.
    """

    tracks: tuple[np.ndarray, ...]
    rejected: tuple[tuple[np.ndarray, str], ...] = ()
    outliers: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=np.int64))

    @property
    def n_points(self) -> int:
        return int(sum(t.size for t in self.tracks))


@dataclass
class _Open:
    idx: list[int]
    last_frame: int


def _predict(idx: list[int], frame: np.ndarray, t: np.ndarray, u: np.ndarray, v: np.ndarray, t_new: float):
    """Predicted (u, v) at t_new and the step length scale (px per frame) of a track."""
    k = len(idx)
    if k == 1:
        return None
    last = idx[-3:] if k >= 3 else idx[-2:]
    tt, uu, vv = t[last], u[last], v[last]
    dt = t_new - tt[-1]
    frames = frame[last]
    step = math.hypot(uu[-1] - uu[-2], vv[-1] - vv[-2]) / max(frames[-1] - frames[-2], 1)
    vu = (uu[-1] - uu[-2]) / (tt[-1] - tt[-2])
    vvv = (vv[-1] - vv[-2]) / (tt[-1] - tt[-2])
    pu, pv = uu[-1] + vu * dt, vv[-1] + vvv * dt
    if len(last) == 3:
        # constant acceleration through the last three points (divided differences)
        d1u = (uu[1] - uu[0]) / (tt[1] - tt[0])
        d1v = (vv[1] - vv[0]) / (tt[1] - tt[0])
        au = (vu - d1u) / (tt[2] - tt[0])
        av = (vvv - d1v) / (tt[2] - tt[0])
        pu += au * dt * (t_new - tt[1])
        pv += av * dt * (t_new - tt[1])
    return pu, pv, step


def link(
    frame: np.ndarray,
    t_s: np.ndarray,
    u_px: np.ndarray,
    v_px: np.ndarray,
    sigma_px: np.ndarray,
    options: LinkOptions | None = None,
    *,
    world_xy: np.ndarray | None = None,
) -> LinkResult:
    """Link detections into tracks.

    Parameters
    ----------
    frame : (N,) frame index of each detection.
    t_s : (N,) frame time, s.
    u_px, v_px : (N,) positions, px.
    sigma_px : (N,) per-axis position uncertainty, px.
    options : tuning (defaults: :class:`LinkOptions`).
    world_xy : (N, 2) positions on the flight plane, m, optional. The wiggle test then runs in the world,
        where a flight is a true ballistic arc (in the image, lens distortion and perspective bend it).

    Returns
    -------
    LinkResult
    """
    opt = options or LinkOptions()
    first_step_px = FIRST_STEP_PX if opt.max_first_step_px is None else opt.max_first_step_px
    frame = np.asarray(frame, dtype=np.int64)
    t = np.asarray(t_s, dtype=float)
    u = np.asarray(u_px, dtype=float)
    v = np.asarray(v_px, dtype=float)
    sig = np.asarray(sigma_px, dtype=float)
    n = frame.size
    arc_xy = None
    if world_xy is not None:
        arc_xy = np.asarray(world_xy, dtype=float)
        if arc_xy.shape != (n, 2):
            arc_xy = None  # (rows that map off the plane are NaN: those tracks fall back to the image test)
    if n == 0:
        return LinkResult(tracks=())
    order = np.argsort(frame, kind="stable")
    open_tracks: list[_Open] = []
    closed: list[list[int]] = []
    pos = 0
    while pos < n:
        f = int(frame[order[pos]])
        end = pos
        while end < n and frame[order[end]] == f:
            end += 1
        dets = [int(i) for i in order[pos:end]]
        pos = end
        still = []
        for tr in open_tracks:
            if f - tr.last_frame > opt.max_gap_frames + 1:
                closed.append(tr.idx)
            else:
                still.append(tr)
        open_tracks = still
        pairs = []
        tf = float(t[dets[0]])
        for ti, tr in enumerate(open_tracks):
            gap = f - tr.last_frame
            pred = _predict(tr.idx, frame, t, u, v, tf)
            last = tr.idx[-1]
            for di in dets:
                if pred is None:
                    # a one-point track may only continue in the next frame
                    dist = math.hypot(u[di] - u[last], v[di] - v[last])
                    if gap == 1 and opt.min_step_px <= dist <= first_step_px:
                        pairs.append((1, dist, ti, di))
                else:
                    pu, pv, step = pred
                    dist = math.hypot(u[di] - pu, v[di] - pv)
                    gate = opt.gate_floor_px + opt.gate_fraction * step * gap * gap + 3.0 * sig[di]
                    if dist <= gate:
                        pairs.append((0, dist / gate, ti, di))
        # established tracks (kind 0) choose first: their gates are tight
        pairs.sort()
        used_t: set[int] = set()
        used_d: set[int] = set()
        for _, _, ti, di in pairs:
            if ti in used_t or di in used_d:
                continue
            used_t.add(ti)
            used_d.add(di)
            open_tracks[ti].idx.append(di)
            open_tracks[ti].last_frame = f
        for di in dets:
            if di not in used_d:
                open_tracks.append(_Open(idx=[di], last_frame=f))
    closed.extend(tr.idx for tr in open_tracks)

    accepted: list[np.ndarray] = []
    rejected: list[tuple[np.ndarray, str]] = []
    outliers: list[int] = []
    candidates = [np.array(c, dtype=np.int64) for c in closed if len(c) >= 2]
    candidates = _join(candidates, frame, t, u, v, opt)
    results = []
    for idx in candidates:
        results.append((idx, *_check(idx, frame, t, u, v, sig, opt, arc_xy)))
    taken = np.zeros(n, bool)
    for _idx, keep, _out, reason in results:
        if not reason:
            taken[keep] = True
    for idx, keep, out, reason in results:
        if reason:
            rejected.append((idx, reason))
            continue
        grown = _extend(keep, taken, frame, t, u, v, sig, opt)
        if grown.size > keep.size:
            keep2, out2, reason2 = _check(grown, frame, t, u, v, sig, opt, arc_xy)
            if not reason2:
                taken[keep] = False
                keep, out = keep2, np.concatenate([out, out2]).astype(np.int64)
                taken[keep] = True
        accepted.append(keep)
        outliers.extend(int(i) for i in out)
    accepted.sort(key=lambda a: (t[a[0]], u[a[0]]))
    return LinkResult(
        tracks=tuple(accepted),
        rejected=tuple(rejected),
        outliers=np.array(sorted(outliers), dtype=np.int64),
    )


def _join(tracks: list[np.ndarray], frame, t, u, v, opt: LinkOptions) -> list[np.ndarray]:
    """Join a track onto an earlier one when the earlier one's extrapolation meets its first point."""
    tracks = sorted(tracks, key=lambda a: frame[a[0]])
    merged = True
    while merged:
        merged = False
        for i, a in enumerate(tracks):
            if a.size < 3:
                continue
            for j, b in enumerate(tracks):
                if j == i or frame[b[0]] <= frame[a[-1]]:
                    continue
                gap = int(frame[b[0]] - frame[a[-1]])
                if gap > 4 * (opt.max_gap_frames + 1):
                    continue
                pred = _predict(list(a), frame, t, u, v, float(t[b[0]]))
                if pred is None:
                    continue
                pu, pv, step = pred
                gate = opt.gate_floor_px + opt.gate_fraction * step * gap
                if math.hypot(u[b[0]] - pu, v[b[0]] - pv) <= gate:
                    tracks[i] = np.concatenate([a, b])
                    del tracks[j]
                    merged = True
                    break
            if merged:
                break
    return tracks


def _extend(keep: np.ndarray, taken: np.ndarray, frame, t, u, v, sig, opt: LinkOptions) -> np.ndarray:
    """Grow an accepted track backwards and forwards onto free detections that its extrapolation meets."""
    idx = list(keep[np.argsort(frame[keep], kind="stable")])
    for direction in (-1, 1):
        while True:
            end = idx[0] if direction < 0 else idx[-1]
            ref = idx[:3][::-1] if direction < 0 else idx[-3:]
            found = None
            for gap in range(1, opt.max_gap_frames + 2):
                f = int(frame[end]) + direction * gap
                cand = [int(c) for c in np.flatnonzero((frame == f) & ~taken) if c not in idx]
                if not cand:
                    continue
                tf = float(t[cand[0]])
                pred = _predict(ref, frame, t, u, v, tf)
                if pred is None:
                    break
                pu, pv, step = pred
                gate = opt.gate_floor_px + opt.gate_fraction * step * gap * gap
                dist = [math.hypot(u[c] - pu, v[c] - pv) for c in cand]
                j = int(np.argmin(dist))
                if dist[j] <= gate + 3.0 * sig[cand[j]]:
                    found = int(cand[j])
                    break
            if found is None:
                break
            if direction < 0:
                idx.insert(0, found)
            else:
                idx.append(found)
    return np.array(idx, dtype=np.int64)


def scatter_ratio(t_s: np.ndarray, u_px: np.ndarray, v_px: np.ndarray, sigma_px: np.ndarray) -> float:
    """How much a shot's points scatter about a smooth path, in units of their σ (robust Birge ratio).

    Each point is compared with a quadratic in time through its neighbours (leave-one-out); with correct σ
    the squared misfit over (σᵢ² + σ_pred²) follows χ² with 2 degrees of freedom, whose median is 2 ln 2.
    Returns sqrt(median / (2 ln 2)) (1 when fewer than 6 points). A BB's path is smooth on the scale of a
    few frames, so a ratio above 1 means σ was too small (compression, a shape the model does not follow).

    References
    ----------
    Birge, R. T. (1932). The calculation of errors by the method of least squares. Phys. Rev. 40:207.
    """
    t = np.asarray(t_s, float)
    if t.size < 6:
        return 1.0
    sig = np.asarray(sigma_px, float)
    r, sp = _loo_residuals(t, np.asarray(u_px, float), np.asarray(v_px, float), sig)
    z2 = r**2 / (sig**2 + sp**2)
    return float(math.sqrt(float(np.median(z2)) / (2.0 * math.log(2.0))))


def _loo_residuals(
    tt: np.ndarray, uu: np.ndarray, vv: np.ndarray, ss: np.ndarray, half: int = 3
) -> tuple[np.ndarray, np.ndarray]:
    """Leave-one-out misfit of each point against a polynomial through its neighbours.

    Returns (distance, σ of the prediction), px: a quadratic in time through the ±half nearest points
    (itself left out; a line where fewer than four are at hand), weighted by the neighbours' σ ``ss``.
    """
    n = tt.size
    res = np.zeros(n)
    spred = np.zeros(n)
    for i in range(n):
        lo, hi = max(0, i - half), min(n, i + half + 1)
        nb = [j for j in range(lo, hi) if j != i]
        if len(nb) < 2 * half:
            nb = [int(j) for j in np.argsort(np.abs(np.arange(n) - i), kind="stable") if j != i][
                : min(2 * half, n - 1)
            ]
        interior = min(nb) < i < max(nb)
        deg = 2 if (len(nb) >= 4 and interior) or len(nb) >= 5 else 1
        ts = tt[nb] - tt[i]
        scale = max(float(np.max(np.abs(ts))), 1e-12)
        x = np.vander(ts / scale, deg + 1)
        w = 1.0 / ss[nb]
        xw = x * w[:, None]
        cov = np.linalg.pinv(xw.T @ xw)
        cu = cov @ (xw.T @ (uu[nb] * w))
        cv = cov @ (xw.T @ (vv[nb] * w))
        res[i] = math.hypot(uu[i] - cu[-1], vv[i] - cv[-1])
        spred[i] = math.sqrt(max(float(cov[-1, -1]), 0.0))
    return res, spred


def _wiggle(tt: np.ndarray, uu: np.ndarray, vv: np.ndarray, ss: np.ndarray, arc: int) -> float:
    """Largest RMS of normalised residuals about a quadratic arc fitted to ``arc`` consecutive points.

    Over a short stretch a projectile's image path is a parabola in time to within its noise (gravity,
    drag and lift change slowly); a wobbling insect or a fluttering leaf is not.
    """
    n = tt.size
    w = min(arc, n)
    if w < 5:
        return 0.0
    worst = 0.0
    for start in sorted({*range(0, n - w + 1, max(1, w // 2)), n - w}):
        sl = slice(start, start + w)
        ts = tt[sl] - tt[sl].mean()
        scale = max(float(np.max(np.abs(ts))), 1e-12)
        x = np.vander(ts / scale, 3) / ss[sl, None]
        for y in (uu[sl], vv[sl]):
            coef, *_ = np.linalg.lstsq(x, y / ss[sl], rcond=None)
            r = x @ coef - y / ss[sl]
            worst = max(worst, math.sqrt(float(r @ r) / (w - 3)))
    return worst


def _check(
    idx: np.ndarray, frame, t, u, v, sig, opt: LinkOptions, arc_xy: np.ndarray | None = None
) -> tuple[np.ndarray, np.ndarray, str]:
    """(kept indices, outlier indices, reason-or-empty) for one candidate track."""
    idx = idx[np.argsort(frame[idx], kind="stable")]
    if idx.size < opt.min_points:
        return idx, np.zeros(0, np.int64), f"only {idx.size} points (need {opt.min_points})"
    steps = np.hypot(np.diff(u[idx]), np.diff(v[idx])) / np.maximum(np.diff(frame[idx]), 1)
    if float(np.median(steps)) < opt.min_step_px:
        return idx, np.zeros(0, np.int64), f"barely moves ({np.median(steps):.2f} px per frame)"
    keep = idx.copy()
    out: list[int] = []
    with np.errstate(all="ignore"):
        for _ in range(idx.size):
            if keep.size < 4:
                break
            se = np.maximum(sig[keep], SIGMA_FLOOR_PX)
            r, sp = _loo_residuals(t[keep], u[keep], v[keep], se)
            lim = np.maximum(opt.outlier_sigma * np.hypot(se, sp), opt.outlier_floor_px)
            worst = int(np.argmax(r / lim))
            if r[worst] <= lim[worst]:
                break
            out.append(int(keep[worst]))
            keep = np.delete(keep, worst)
    if len(out) > opt.max_outlier_fraction * idx.size:
        return idx, np.array(out), f"not a smooth path ({len(out)} of {idx.size} points off it)"
    if keep.size < opt.min_points:
        return idx, np.array(out), f"only {keep.size} points on a smooth path (need {opt.min_points})"
    se = np.maximum(sig[keep], SIGMA_FLOOR_PX)
    if arc_xy is not None and keep.size >= 2 and np.all(np.isfinite(arc_xy[keep])):
        # σ in metres from the local scale (metres per pixel from neighbouring points' spacing)
        step_m = np.hypot(*np.diff(arc_xy[keep], axis=0).T)
        step_px = np.hypot(np.diff(u[keep]), np.diff(v[keep]))
        m_per_px = float(np.median(step_m / np.maximum(step_px, 1e-9)))
        wig = _wiggle(t[keep], arc_xy[keep, 0], arc_xy[keep, 1], se * m_per_px, opt.arc_points)
    else:
        wig = _wiggle(t[keep], u[keep], v[keep], se, opt.arc_points)
    if wig > opt.max_wiggle:
        return (
            idx,
            np.array(out),
            (
                f"wiggles: {wig:.1f} times its noise about a smooth arc (an insect or a leaf, not a projectile)"
            ),
        )
    du, dv = np.diff(u[keep]), np.diff(v[keep])
    df = np.maximum(np.diff(frame[keep]), 1)
    step = np.hypot(du, dv) / df
    if float(np.median(step)) < opt.min_step_px:
        return idx, np.array(out), f"barely moves ({np.median(step):.2f} px per frame)"
    ang = np.unwrap(np.arctan2(dv, du))
    m = max(1, keep.size // 4)
    turn = abs(float(np.median(ang[-m:]) - np.median(ang[:m])))
    if turn > opt.max_turn_rad:
        return idx, np.array(out), f"turns by {math.degrees(turn):.0f}° (a BB curves less)"
    s0, s1 = float(np.median(step[:m])), float(np.median(step[-m:]))
    if abs(s1 - s0) > opt.max_speed_change * max(s0, s1):
        return idx, np.array(out), f"speed changes from {s0:.1f} to {s1:.1f} px per frame"
    return keep, np.array(out, dtype=np.int64), ""
