"""The tracker end to end: video → background → candidates → sub-pixel fits → tracks → metres and seconds.

One streaming pass over the clip (memory bounded by the background window), then linking, timing and the
mapping through the rig. The result is a :class:`TrackResult`: the :class:`~tracker.trackfile.Track` (or
the reason there is none), a summary for the user and what the overlay needs.

Which track is the BB: every smooth track of either polarity (and, where the BB's image is large enough,
of bright and dark halves fitted together as a marked ball) is judged by :mod:`tracker.select` (image size
at the flight plane from the rig and ``bb_diameter_m``, ``speed_band_mps``, fall under gravity within a
plausible lift, drag); the BB's tracks of the polarity with most points are the shots, the rest are counted
in the summary with their reasons. Decoding runs in a thread (:func:`prefetched`).

A marked BB whose mark turns one half to match the wall shows only the other half: within a few frames of
the marked track's last ball, a lone blob where the track predicts the ball is fitted as the ball too
(:func:`_follow_marked`).

Brightness of a point (the spin signal of a marked BB): the BB's light per px² of its apparent image and per
second of exposure (:func:`brightness_per_area`; for a marked BB its own light with the hidden background
added back, at the fitted radius smoothed along the shot: :func:`_brightness_column`).

Uncertainty of a point: the fit's σ from the local noise (:mod:`tracker.localise`), then checked against the
shot's own scatter about a smooth path (:func:`tracker.associate.scatter_ratio`) and scaled up by that
ratio when it is larger than 1 (a warning when it exceeds :data:`SIGMA_SCALE_WARN`).

Time of a point: the frame's time (container timestamps, or index / fps with an override), plus the
rolling-shutter offset of the point's row, (v / rows) · readout, plus half the exposure when it is known
(the fitted centre of a streak is the mid-exposure position).
"""

from __future__ import annotations

import math
import queue
import threading
from collections.abc import Callable, Iterable, Iterator
from dataclasses import dataclass, field
from typing import Any, TypeVar

import numpy as np

from hopscope.calibration.rig import Rig
from hopscope.shared.constants import DEFAULT_BB_DIAMETER_M, STANDARD_GRAVITY_MPS2

from .associate import MIN_STEP_PX, SIGMA_FLOOR_PX, LinkOptions, link, scatter_ratio
from .background import default_scale, windowed
from .detect import THRESHOLD_SIGMA, Candidate, find_candidates
from .localise import QUANTISATION_NOISE_DN, Detection, localise, localise_marked
from .select import (
    SPEED_BAND_MPS,
    BBSearch,
    TrackJudgement,
    describe_rejections,
    judge_track,
    lift_accel_max_mps2,
    likely_time_scale,
)
from .trackfile import Track, TrackMeta
from .video import (
    VideoFrame,
    VideoInfo,
    check_frame_rate,
    iter_frames,
    point_times_s,
    probe_video,
    regularise_times,
    timing_warnings,
)

#: Margin around the union of a marked BB's two half windows, px.
MARKED_PAD_PX = 3

#: A bright and a dark blob side by side are fitted as a marked BB only when the BB's image radius is at
#: least this, px (a smaller ball cannot show its two halves).
MARKED_MIN_RADIUS_PX = 2.0

#: A blob that moved less than this since the frame before is not localised, px (the linker's least step
#: per frame of a BB in flight, :data:`tracker.associate.MIN_STEP_PX`).
SLOW_STEP_PX = MIN_STEP_PX

#: A lone bright or dark blob is fitted as the marked BB when the marked track saw the ball at most this
#: many frames before (:func:`_follow_marked`).
MARKED_FOLLOW_FRAMES = 8

#: ... and the blob lies within this many image radii of where the track predicts the ball (a half's
#: centroid sits up to a radius off the ball's centre).
MARKED_FOLLOW_RADII = 3.0

#: ... plus this share of the predicted travel (a step that changes between detections).
MARKED_FOLLOW_STEP_SHARE = 0.2

#: Degree of the polynomial in time through a marked BB's fitted radii along its shot (its apparent size
#: changes smoothly as it flies nearer or farther).
RADIUS_SMOOTH_DEGREE = 2

#: Decoded frames the decoding thread may run ahead of detection.
PREFETCH_DEPTH = 8

#: Polarity options and their detection signs.
POLARITIES = {"auto": 0, "bright": 1, "dark": -1}

#: Points used for the speed estimate at the start of a shot.
SPEED_POINTS = 10

#: A shot whose σ had to be scaled up by more than this gets a warning.
SIGMA_SCALE_WARN = 2.0


def start_speed(t_s: np.ndarray, x_m: np.ndarray, y_m: np.ndarray) -> float:
    """Speed at a shot's first point, m/s: derivative of a quadratic in time through its first points.

    A local polynomial derivative (the finite-difference estimate of Savitzky & Golay 1964, Anal. Chem.
    36:1627) through up to :data:`SPEED_POINTS` points, evaluated at the first one (a line for 2 points).
    """
    n = min(SPEED_POINTS, t_s.size)
    tt = t_s[:n] - t_s[0]
    deg = 2 if n >= 4 else 1
    cx = np.polyfit(tt, x_m[:n], deg)
    cy = np.polyfit(tt, y_m[:n], deg)
    return float(math.hypot(cx[-2], cy[-2]))


def brightness_per_area(light: np.ndarray, radius_px: np.ndarray, exposure_s: float | None) -> np.ndarray:
    """The track's ``brightness``: integrated light per px² of the BB's image, per second of exposure.

    Parameters
    ----------
    light : (N,) the detections' integrated light, grey levels × px (:attr:`Detection.brightness`).
    radius_px : (N,) the BB's apparent image radius r at each point, px.
    exposure_s : exposure time, s, or None when unknown (then no division by it).

    Returns
    -------
    (N,) light / (π r²) (a ball that comes nearer looks bigger, not brighter), divided by the exposure when
    it is known: grey levels per second of exposure, else grey levels.
    """
    r = np.asarray(radius_px, dtype=float)
    out = np.asarray(light, dtype=float) / (math.pi * r * r)
    return out / exposure_s if exposure_s else out


def _brightness_column(
    d: list[Detection], t_s: np.ndarray, shot: np.ndarray, rig: Rig, uv: np.ndarray, opt: TrackOptions
) -> np.ndarray:
    """Each point's brightness for the track (:func:`brightness_per_area`).

    The apparent radius is the rig's (the BB's diameter over the metres per pixel at the point) for a plain
    BB. For a marked BB it is the fitted ball radius smoothed along its shot (a polynomial of degree
    :data:`RADIUS_SMOOTH_DEGREE` in time), which is the size the image shows: the light is first moved to
    that radius (:attr:`Detection.light_per_radius`, the background a wider ball hides).
    """
    light = np.array([x.brightness for x in d])
    radius = 0.5 * opt.bb_diameter_m / rig.metres_per_pixel(uv)
    marked = np.array([math.isfinite(x.light_radius_px) for x in d], dtype=bool)
    for s_id in np.unique(shot[marked]):
        m = marked & (shot == s_id)
        fitted = np.array([2.0 * d[i].width_px for i in np.flatnonzero(m)])
        deg = min(RADIUS_SMOOTH_DEGREE, int(m.sum()) - 1)
        tt = t_s[m] - t_s[m].mean()
        smooth = (
            np.polyval(np.polyfit(tt, fitted, deg), tt) if deg >= 1 else np.full(fitted.shape, fitted.mean())
        )
        at = np.array([d[i].light_radius_px for i in np.flatnonzero(m)])
        slope = np.array([d[i].light_per_radius for i in np.flatnonzero(m)])
        light[m] = light[m] + (smooth - at) * slope
        radius[m] = smooth
    return brightness_per_area(light, radius, opt.exposure_s)


@dataclass(frozen=True)
class TrackOptions:
    """How to track a clip.

    Attributes
    ----------
    fps_override : frame rate, Hz, replacing the container timestamps (None: use them).
    readout_s : rolling-shutter readout, top row to bottom row, s (0: global shutter).
    exposure_s : exposure time, s (None: unknown; times are then the exposure start).
    polarity : ``"auto"``, ``"bright"`` (BB brighter than the background) or ``"dark"``.
    gap_frames : spacing of the background samples, frames.
    scale : detection block size, px (None: about 480 px wide).
    threshold_sigma : detection threshold in units of the local noise σ.
    link : association tuning.
    bb_diameter_m : the BB's diameter, m (its expected image size at the flight plane).
    speed_band_mps : (lowest, highest) speed of a BB, m/s; slower or faster tracks are not the BB.
    """

    fps_override: float | None = None
    readout_s: float = 0.0
    exposure_s: float | None = None
    polarity: str = "auto"
    gap_frames: int = 2
    scale: int | None = None
    threshold_sigma: float = THRESHOLD_SIGMA
    link: LinkOptions = field(default_factory=LinkOptions)
    bb_diameter_m: float = DEFAULT_BB_DIAMETER_M
    speed_band_mps: tuple[float, float] = SPEED_BAND_MPS

    @property
    def search(self) -> BBSearch:
        """What the BB looks like and how it may move (:class:`tracker.select.BBSearch`)."""
        return BBSearch(diameter_m=self.bb_diameter_m, speed_band_mps=self.speed_band_mps)

    def __post_init__(self) -> None:
        BBSearch(diameter_m=self.bb_diameter_m, speed_band_mps=self.speed_band_mps)  # validates them
        if self.fps_override is not None:
            check_frame_rate(self.fps_override, "--fps")
        if not (math.isfinite(self.readout_s) and self.readout_s >= 0):
            raise ValueError(f"--readout-ms: expected a finite value >= 0, got {self.readout_s * 1e3:g}")
        if self.exposure_s is not None and not (math.isfinite(self.exposure_s) and 0 < self.exposure_s < 1.0):
            raise ValueError(
                f"--exposure-ms: expected a value between 0 and 1000 ms, got {self.exposure_s * 1e3:g}"
            )
        if self.polarity not in POLARITIES:
            raise ValueError(f"--polarity: expected one of {', '.join(POLARITIES)}, got {self.polarity!r}")
        if self.scale is not None and self.scale < 1:
            raise ValueError(f"scale: expected an integer >= 1, got {self.scale}")


@dataclass(frozen=True)
class TrackSummary:
    """Figures for the one-screen summary.

    Attributes
    ----------
    frames_read : frames decoded.
    frames_with_points : frames that contributed a track point.
    frame_rate_hz : frame rate used (override or container mean), Hz.
    candidates : blobs found (all polarities searched).
    fitted : blobs localised successfully.
    points : track points written.
    rejected_candidates : localised blobs not in any shot (distractors, noise, outliers).
    outliers : points dropped from shots as off the smooth path.
    polarity : ``"bright"`` or ``"dark"`` (chosen or given).
    shot_speeds_mps : per shot, speed at its first point (:func:`start_speed`), m/s.
    rejected_tracks : reasons for the tracks that were not accepted (a few).
    rejected_track_count : candidate tracks turned down (too short or not smooth, or smooth but not a BB:
        size, speed band, fall, drag, or of the other polarity).
    slow_candidates : blobs within :data:`SLOW_STEP_PX` of one in the frame before (not localised: no BB
        in flight moves so little).
    """

    frames_read: int
    frames_with_points: int
    frame_rate_hz: float
    candidates: int
    fitted: int
    points: int
    rejected_candidates: int
    outliers: int
    polarity: str
    shot_speeds_mps: tuple[float, ...]
    rejected_tracks: tuple[str, ...]
    rejected_track_count: int = 0
    slow_candidates: int = 0


@dataclass(frozen=True)
class TrackResult:
    """Outcome of tracking a clip.

    Attributes
    ----------
    track : the Track, or None when no BB was found.
    reason : empty, or why there is no track (without the clip's name; callers add it).
    summary : figures for the user.
    warnings : one line each (also in the track's header).
    info : the container information.
    detections : every successfully localised blob, with its polarity sign, for the overlay (blobs whose
        fit failed are only counted, so memory stays bounded).
    in_shot : per detection, the shot it belongs to (−1: none).
    still : the first frame's luma (for the contact sheet).
    """

    track: Track | None
    reason: str
    summary: TrackSummary
    warnings: tuple[str, ...]
    info: VideoInfo
    detections: tuple[tuple[Detection, int], ...] = ()
    in_shot: tuple[int, ...] = ()
    still: np.ndarray | None = None

    @property
    def ok(self) -> bool:
        return self.track is not None


_T = TypeVar("_T")


class _Failure:
    def __init__(self, exc: BaseException) -> None:
        self.exc = exc


_END = object()


def prefetched(items: Iterator[_T], depth: int = PREFETCH_DEPTH) -> Iterator[_T]:
    """The items of ``items``, produced by a worker thread up to ``depth`` ahead of the consumer.

    Memory holds at most ``depth`` items in flight. An exception in the worker is raised here, at the point
    of the stream where it happened; when the consumer stops early the worker stops and closes ``items``.
    """
    q: queue.Queue[object] = queue.Queue(maxsize=depth)
    stop = threading.Event()

    def put(x: object) -> bool:
        while not stop.is_set():
            try:
                q.put(x, timeout=0.05)
                return True
            except queue.Full:
                continue
        return False

    def work() -> None:
        try:
            for x in items:
                if not put(x):
                    break
            else:
                put(_END)
        except BaseException as exc:  # handed to the consumer
            put(_Failure(exc))
        finally:
            close = getattr(items, "close", None)
            if close is not None:
                close()

    worker = threading.Thread(target=work, name="hopscope-decode", daemon=True)
    worker.start()
    try:
        while True:
            x = q.get()
            if x is _END:
                return
            if isinstance(x, _Failure):
                raise x.exc
            yield x  # type: ignore[misc]
    finally:
        stop.set()
        while True:
            try:
                q.get_nowait()
            except queue.Empty:
                break
        worker.join(timeout=5.0)


def check_rig_size(rig: Rig, info: VideoInfo, rig_name: str = "rig") -> None:
    """Raise a one-line ValueError when the rig was made for another image size than the video's."""
    if tuple(rig.image_size) != (info.width, info.height):
        w, h = rig.image_size
        raise ValueError(
            f"{rig_name}: made for {w}x{h} px images, but {info.path} has {info.width}x{info.height} px frames"
        )


def track_video(
    video: str,
    rig: Rig,
    options: TrackOptions | None = None,
    *,
    progress: Callable[[Iterable[VideoFrame], int | None], Iterable[VideoFrame]] | None = None,
    rig_name: str = "rig",
) -> TrackResult:
    """Track the BB through a clip and map it to metres and seconds.

    Parameters
    ----------
    video : path of the clip.
    rig : the calibrated camera and plane (:class:`calibration.rig.Rig`).
    options : :class:`TrackOptions`.
    progress : optional wrapper ``progress(frames, total)`` around the frame stream (a progress bar).
    rig_name : how to name the rig in error messages (its file).

    Returns
    -------
    TrackResult
        ``track`` is None, with ``reason``, when no BB was found.

    Raises
    ------
    OSError, ValueError
        Unreadable, empty, corrupt or truncated video, a rig for another image size, bad options, bad
        timestamps (one line naming the file or option).
    """
    opt = options or TrackOptions()
    info = probe_video(video)
    check_rig_size(rig, info, rig_name)
    scale = opt.scale or default_scale(info.width, info.height)
    want = POLARITIES[opt.polarity]
    # decoding runs in a thread (FFmpeg releases the interpreter lock) while this one detects
    frames: Iterable[VideoFrame] = prefetched(iter_frames(video, fps_override=opt.fps_override))
    if progress is not None:
        frames = progress(frames, info.n_frames)
    times: list[float] = []

    def timed(it: Iterable[VideoFrame]) -> Iterator[VideoFrame]:
        for fr in it:
            times.append(fr.t_s)
            yield fr

    dets: list[tuple[Detection, int, float, bool]] = []
    # the last marked-ball detections (frame, u px, v px, image radius px): where its next one is expected
    marked_seen: list[tuple[int, float, float, float]] = []
    previous: dict[int, list[Candidate]] = {}
    n_slow = 0
    n_cand = 0
    still: np.ndarray | None = None
    for wf in windowed(timed(frames), gap_frames=opt.gap_frames, scale=scale):
        if still is None:
            still = np.array(wf.frame.luma, copy=True)
        cands = find_candidates(wf, threshold_sigma=opt.threshold_sigma, polarity=want)
        n_cand += len(cands)
        # a blob within a pixel of one in the frame before is no BB in flight (the linker's least step):
        # it is counted, not localised
        moving = [c for c in cands if not _slow(c, previous)]
        n_slow += len(cands) - len(moving)
        previous = {wf.frame.index: cands}
        cands = moving
        paired: set[int] = set()
        if not want:  # a marked BB: a bright and a dark half side by side, fitted as one ball
            windows = _marked_pairs(cands, info)
            followed = _follow_marked(cands, windows, marked_seen, wf.frame.index, info)
            for box, edge in windows + followed:
                r0, r1, c0, c1 = box
                mpp = float(rig.metres_per_pixel(np.array([[0.5 * (c0 + c1), 0.5 * (r0 + r1)]]))[0])
                radius = 0.5 * opt.bb_diameter_m / mpp if math.isfinite(mpp) and mpp > 0 else 0.0
                if radius < MARKED_MIN_RADIUS_PX:
                    continue
                d = localise_marked(
                    wf.frame.luma[r0:r1, c0:c1],
                    wf.background_roi(r0, r1, c0, c1),
                    (r0, c0),
                    frame=wf.frame.index,
                    radius_px=radius,
                    noise_floor=QUANTISATION_NOISE_DN,
                )
                if d.ok:
                    dets.append((d, 0, wf.frame.t_s, edge))
                    marked_seen.append((d.frame, d.u_px, d.v_px, radius))
                    del marked_seen[:-2]
                    paired.update(id(c) for c in cands if _inside_box(c, box))
                elif (box, edge) in windows:
                    paired.update(id(c) for c in cands if _inside_box(c, box))
            cands = [c for c in cands if id(c) not in paired]
        for c in cands:
            r0, r1, c0, c1 = c.box
            diff = wf.diff_roi(r0, r1, c0, c1)
            raw = wf.frame.luma[r0:r1, c0:c1]
            d = localise(
                diff,
                (r0, c0),
                frame=c.frame,
                sign=c.sign,
                raw=raw,
                guess_uv=(c.u_px, c.v_px),
                noise_floor=QUANTISATION_NOISE_DN,
            )
            if d.ok:  # failed fits are only counted: memory stays bounded by the blobs that look like a BB
                dets.append((d, c.sign, wf.frame.t_s, c.touches_edge))
    n_frames = len(times)
    if n_frames == 0:
        raise ValueError(f"{video}: video has no frames")
    t_all = np.array(times)
    notes: list[str] = []
    if opt.fps_override is None:
        t_all, note = regularise_times(t_all, info.time_base_s)
        if note:
            notes.append(note)
            dets = [(d, sgn, float(t_all[d.frame]), edge) for d, sgn, _, edge in dets]
    if opt.fps_override is not None:
        rate = float(opt.fps_override)
        source = "override"
    else:
        span = t_all[-1] - t_all[0]
        rate = (n_frames - 1) / span if n_frames > 1 and span > 0 else (info.average_rate_hz or 0.0)
        source = "container"
        if not rate:
            raise ValueError(f"{video}: cannot tell the frame rate from one frame; give it with --fps")
        check_frame_rate(rate, f"{video}: container timestamps imply a frame rate that")
    warns = notes + timing_warnings(info, t_all, fps_override=opt.fps_override)
    if n_frames > 1:
        period = float(np.min(np.diff(t_all)))
        if opt.readout_s >= period:
            raise ValueError(
                f"--readout-ms: readout {opt.readout_s * 1e3:g} ms is not shorter than the frame period "
                f"{period * 1e3:.4g} ms"
            )
        if opt.exposure_s is not None and opt.exposure_s > period * 1.0001:
            warns.append(
                f"exposure {opt.exposure_s * 1e3:g} ms is longer than the frame period {period * 1e3:.4g} ms"
            )

    chosen = _select_tracks(dets, want, opt, info, rig, rate)
    warns.extend(chosen.warnings)
    pol_name = chosen.polarity
    in_shot = [-1] * len(dets)
    points: list[int] = []
    shot_of: list[int] = []
    for s, tr in enumerate(chosen.tracks):
        for gi in tr:
            in_shot[int(gi)] = s
            points.append(int(gi))
            shot_of.append(s)
    rejected_reasons = chosen.rejected
    fitted = len(dets)
    base_summary: dict[str, Any] = dict(
        frames_read=n_frames,
        frame_rate_hz=rate,
        candidates=n_cand,
        fitted=fitted,
        outliers=chosen.outliers,
        polarity=pol_name,
        rejected_tracks=rejected_reasons,
        rejected_track_count=chosen.n_rejected_tracks,
        slow_candidates=n_slow,
    )
    det_pairs = tuple((d, sgn) for d, sgn, _, _ in dets)
    if not points:
        why = (
            f"no BB found: {n_cand} candidate blob(s) in {n_frames} frames, "
            f"{fitted} localised, none formed a fast, smooth track"
        )
        if rejected_reasons:
            why += f" (e.g. {rejected_reasons[0]})"
        summary = TrackSummary(
            frames_with_points=0,
            points=0,
            rejected_candidates=fitted,
            shot_speeds_mps=(),
            **base_summary,
        )
        return TrackResult(None, why, summary, tuple(warns), info, det_pairs, tuple(in_shot), still)

    track, speeds, map_warns = _build_track(
        [dets[i] for i in points], np.array(shot_of), rig, opt, info, video, source, rate, pol_name, warns
    )
    warns = list(track.meta.warnings)
    summary = TrackSummary(
        frames_with_points=int(np.unique(track.frame).size),
        points=track.n_points,
        rejected_candidates=fitted - track.n_points,
        shot_speeds_mps=speeds,
        **base_summary,
    )
    return TrackResult(track, "", summary, tuple(warns), info, det_pairs, tuple(in_shot), still)


def _overlap(a: Candidate, b: Candidate) -> bool:
    ar0, ar1, ac0, ac1 = a.box
    br0, br1, bc0, bc1 = b.box
    return ar0 < br1 and br0 < ar1 and ac0 < bc1 and bc0 < ac1


def _slow(c: Candidate, previous: dict[int, list[Candidate]]) -> bool:
    """A candidate within :data:`SLOW_STEP_PX` of one of the same sign in the frame before."""
    before = previous.get(c.frame - 1, ())
    return any(
        o.sign == c.sign and math.hypot(o.u_px - c.u_px, o.v_px - c.v_px) < SLOW_STEP_PX for o in before
    )


def _inside_box(c: Candidate, box: tuple[int, int, int, int]) -> bool:
    r0, r1, c0, c1 = box
    return r0 <= c.v_px < r1 and c0 <= c.u_px < c1


def _marked_pairs(cands: list[Candidate], info: VideoInfo) -> list[tuple[tuple[int, int, int, int], bool]]:
    """Union windows of bright and dark candidates that overlap (the two halves of a marked BB).

    Returns (r0, r1, c0, c1) windows grown by :data:`MARKED_PAD_PX`, clipped to the image, and whether a
    window touched the border. Each bright candidate pairs with the overlapping dark ones.
    """
    out = []
    for b in cands:
        if b.sign <= 0:
            continue
        group = [b] + [d for d in cands if d.sign < 0 and _overlap(b, d)]
        if len(group) < 2:
            continue
        r0 = min(c.box[0] for c in group) - MARKED_PAD_PX
        r1 = max(c.box[1] for c in group) + MARKED_PAD_PX
        c0 = min(c.box[2] for c in group) - MARKED_PAD_PX
        c1 = max(c.box[3] for c in group) + MARKED_PAD_PX
        edge = any(c.touches_edge for c in group) or r0 < 0 or c0 < 0 or r1 > info.height or c1 > info.width
        out.append(((max(0, r0), min(info.height, r1), max(0, c0), min(info.width, c1)), edge))
    return out


def _follow_marked(
    cands: list[Candidate],
    windows: list[tuple[tuple[int, int, int, int], bool]],
    seen: list[tuple[int, float, float, float]],
    frame: int,
    info: VideoInfo,
) -> list[tuple[tuple[int, int, int, int], bool]]:
    """A window for a marked BB seen as one half only, where the marked track predicts the ball.

    When the mark turns so that one half matches the wall, only the other half stands out and no bright and
    dark pair forms; such frames were lost from the marked track. Where the predicted ball lies wholly inside
    the image, within :data:`MARKED_FOLLOW_FRAMES` of the
    last marked detection, the unpaired candidates within :data:`MARKED_FOLLOW_RADII` image radii (plus the
    travel's uncertainty) of the position extrapolated from the last two at constant velocity get one
    window: their boxes and the predicted ball, grown by :data:`MARKED_PAD_PX`, clipped to the image.
    """
    if not seen or frame - seen[-1][0] > MARKED_FOLLOW_FRAMES:
        return []
    k1, u1, v1, rad = seen[-1]
    du = dv = 0.0
    if len(seen) == 2 and seen[0][0] < k1:
        k0, u0, v0, _ = seen[0]
        du, dv = (u1 - u0) / (k1 - k0), (v1 - v0) / (k1 - k0)
    gap = frame - k1
    pu, pv = u1 + du * gap, v1 + dv * gap
    if not (rad - 0.5 <= pu <= info.width - 0.5 - rad and rad - 0.5 <= pv <= info.height - 0.5 - rad):
        return []  # a ball cut by the image border: neither its centre nor its light can be told from half
    reach = MARKED_FOLLOW_RADII * rad + MARKED_FOLLOW_STEP_SHARE * math.hypot(du, dv) * gap
    taken = [c for c in cands if any(_inside_box(c, box) for box, _ in windows)]
    near = [c for c in cands if c not in taken and math.hypot(c.u_px - pu, c.v_px - pv) <= reach]
    if not near:
        return []
    half = rad + MARKED_PAD_PX
    r0 = min([c.box[0] for c in near] + [math.floor(pv - half)]) - MARKED_PAD_PX
    r1 = max([c.box[1] for c in near] + [math.ceil(pv + half) + 1]) + MARKED_PAD_PX
    c0 = min([c.box[2] for c in near] + [math.floor(pu - half)]) - MARKED_PAD_PX
    c1 = max([c.box[3] for c in near] + [math.ceil(pu + half) + 1]) + MARKED_PAD_PX
    edge = any(c.touches_edge for c in near) or r0 < 0 or c0 < 0 or r1 > info.height or c1 > info.width
    return [((max(0, r0), min(info.height, r1), max(0, c0), min(info.width, c1)), edge)]


@dataclass(frozen=True)
class _Selection:
    """Tracks chosen as the BB's shots (indices into the detections) and what was turned down."""

    tracks: tuple[np.ndarray, ...]
    polarity: str
    rejected: tuple[str, ...]
    n_rejected_tracks: int
    outliers: int
    warnings: tuple[str, ...]


def _select_tracks(
    dets: list[tuple[Detection, int, float, bool]],
    want: int,
    opt: TrackOptions,
    info: VideoInfo,
    rig: Rig,
    timestamp_rate_hz: float,
) -> _Selection:
    """Link each polarity's detections, judge every smooth track as a BB (:mod:`tracker.select`), keep the BB's.

    Every track the linker accepts, of either polarity, is compared with a BB: image size at the flight
    plane, speed band, fall under gravity within a plausible lift, drag. Of the tracks that pass, those of
    the polarity with more points are the shots. When none passes but some fail only in the way playback
    timing makes them fail (too slow, falling too little for their speed), those are kept with a warning
    naming the likely capture rate.
    """
    diag = math.hypot(info.width, info.height)
    lopt = opt.link
    if lopt.max_first_step_px is None:  # not set: half the frame diagonal
        lopt = LinkOptions(**{**lopt.__dict__, "max_first_step_px": 0.5 * diag})
    search = opt.search
    judged: list[tuple[int, np.ndarray, TrackJudgement]] = []
    rejected: list[str] = []
    outliers = 0
    for sign in (1, -1, 0):
        if want and sign != want:
            continue
        sel = np.array([i for i, d in enumerate(dets) if d[1] == sign], dtype=np.int64)
        if not sel.size:
            continue
        d = [dets[i][0] for i in sel]
        uv = np.array([[x.u_px, x.v_px] for x in d])
        xy = rig.pixel_to_world(uv)
        t = np.array([dets[i][2] for i in sel])
        sig = np.array([x.sigma_px for x in d])
        res = link(np.array([x.frame for x in d]), t, uv[:, 0], uv[:, 1], sig, lopt, world_xy=xy)
        rejected.extend(r for _, r in res.rejected)
        outliers += int(res.outliers.size)
        for tr in res.tracks:
            tr = np.asarray(tr, dtype=np.int64)
            ok = np.all(np.isfinite(xy[tr]), axis=1)
            if ok.sum() < 3:
                rejected.append("maps to no point of the flight plane")
                continue
            mpp = float(np.median(rig.metres_per_pixel(uv[tr][ok])))
            j = judge_track(
                t[tr][ok],
                xy[tr][ok, 0],
                xy[tr][ok, 1],
                np.maximum(sig[tr][ok], SIGMA_FLOOR_PX) * mpp,
                np.array([d[i].width_px for i in tr[ok]]),
                mpp,
                search,
            )
            judged.append((sign, sel[tr], j))
    names = {1: "bright", -1: "dark", 0: "marked"}
    bb = [x for x in judged if x[2].is_bb]
    warns: list[str] = []
    pool = bb
    if not bb:
        pool = [x for x in judged if x[2].timing_suspect]
    if not pool:
        rejected.extend(x[2].reason for x in judged)
        pol = names[want] if want else "bright"
        return _Selection((), pol, describe_rejections(rejected), len(rejected), outliers, ())
    points = {s: sum(x[1].size for x in pool if x[0] == s) for s in (1, -1, 0)}
    sign = max((1, -1, 0), key=lambda s: points[s])
    keep = [x for x in pool if x[0] == sign]
    kept = {id(x) for x in keep}
    for x in judged:
        if id(x) in kept:
            continue
        rejected.append(
            x[2].reason or f"a BB-like track of {names[x[0]]} polarity beside more {names[sign]} points"
        )
    if not bb:
        for x in keep:
            j = x[2]
            k = likely_time_scale(
                j.start_speed_mps, j.accel_y_mps2, search, timestamp_rate_hz=timestamp_rate_hz
            )
            rate = f"about {k * timestamp_rate_hz:.6g} fps" if k else "unknown"
            warns.append(
                f"a track moves like a BB's image but at {j.speed_mps:.3g} m/s and falls at "
                f"{-j.accel_y_mps2:.3g} m/s² where a BB falls at g = {STANDARD_GRAVITY_MPS2:.4g} m/s² less at most "
                f"{lift_accel_max_mps2(j.speed_mps, search.diameter_m):.3g} m/s² of lift: the times look "
                f"scaled (playback timing of a slow-motion clip); likely capture rate {rate}: rerun with --fps"
            )
    keep.sort(key=lambda x: float(dets[int(x[1][0])][2]))
    return _Selection(
        tuple(x[1] for x in keep),
        names[sign],
        describe_rejections(rejected),
        len(rejected),
        outliers,
        tuple(dict.fromkeys(warns)),
    )


def _build_track(
    pts: list[tuple[Detection, int, float, bool]],
    shot: np.ndarray,
    rig: Rig,
    opt: TrackOptions,
    info: VideoInfo,
    video: str,
    source: str,
    rate: float,
    polarity: str,
    warns: list[str],
) -> tuple[Track, tuple[float, ...], list[str]]:
    d = [p[0] for p in pts]
    frame = np.array([x.frame for x in d], dtype=np.int64)
    t_frame = np.array([p[2] for p in pts])
    uv = np.array([[x.u_px, x.v_px] for x in d])
    sig = np.array([x.sigma_px for x in d])
    warns = list(warns)
    # σ checked against the shot's own scatter about a smooth path; scaled up where it was too small
    scales: dict[int, float] = {}
    for s_id in np.unique(shot):
        m = shot == s_id
        o = np.argsort(frame[m])
        ratio = scatter_ratio(t_frame[m][o], uv[m][o, 0], uv[m][o, 1], sig[m][o])
        scales[int(s_id)] = max(1.0, ratio)
        if ratio > 1.0:
            sig[m] *= ratio
    rows = info.height
    t = point_times_s(t_frame, uv[:, 1], rows, opt.readout_s, opt.exposure_s)
    xy = rig.pixel_to_world(uv)
    good = np.all(np.isfinite(xy), axis=1)
    if not np.all(good):
        warns.append(f"{int((~good).sum())} point(s) map to no point of the flight plane and were dropped")
    jac = rig.pixel_to_world_jacobian(uv[good]) if np.any(good) else np.zeros((0, 2, 2))
    sig_m = np.zeros(len(d))
    sig_m[good] = sig[good] * np.sqrt(0.5 * np.einsum("nij,nij->n", jac, jac))
    ens = rig.ensemble_pixel_to_world(uv[good]) if np.any(good) else np.zeros((0, 0, 2))
    k = ens.shape[0]
    cal = np.zeros((k, len(d), 2))
    if k:
        cal[:, good] = ens - xy[good][None]
        if not np.all(np.isfinite(cal[:, good])):
            bad = ~np.all(np.isfinite(cal), axis=(0, 2))
            warns.append(
                f"{int((bad & good).sum())} point(s) fall outside an ensemble rig's plane and were dropped"
            )
            good &= ~bad
    flags = []
    cov = rig.coverage_m
    has_cov = cov[1] > cov[0] and cov[3] > cov[2]
    inside = rig.in_coverage(np.where(np.isfinite(xy), xy, 0.0)) if has_cov else np.ones(len(d), bool)
    for i, x in enumerate(d):
        f = list(x.flags)
        if pts[i][3]:
            f.append("edge")
        if not inside[i]:
            f.append("outside_coverage")
        flags.append(";".join(f))
    if has_cov and not np.all(inside[good]):
        warns.append(
            f"{int((~inside[good]).sum())} point(s) lie outside the rig's calibrated area "
            "(flag outside_coverage): their metres are extrapolated"
        )
    g = good
    order = np.lexsort((t[g], shot[g]))
    # renumber shots 0.. in order of appearance
    shots_kept = shot[g][order]
    _, first = np.unique(shots_kept, return_index=True)
    remap = {int(s): r for r, s in enumerate(shots_kept[np.sort(first)])}
    shot_new = np.array([remap[int(s)] for s in shots_kept], dtype=np.int64)
    speeds: list[float] = []
    xs, ys, ts = xy[g][order, 0], xy[g][order, 1], t[g][order]
    inv = {r: s_old for s_old, r in remap.items()}
    for s in range(len(remap)):
        m = shot_new == s
        k = scales.get(inv[s], 1.0)
        if k > SIGMA_SCALE_WARN:
            warns.append(
                f"shot {s}: the points scatter {k:.1f}x more about a smooth path than their noise-based "
                "sigma says (compression or an unusual BB image); sigma_px and sigma_m were scaled up by that"
            )
        if m.sum() >= 2:
            sp = start_speed(ts[m], xs[m], ys[m])
            speeds.append(sp)
            lo, hi = opt.speed_band_mps
            if not lo <= sp <= hi:
                hint = (
                    "the timestamps may be playback time (slow motion: give the capture rate with --fps)"
                    if sp < lo
                    else "check the frame rate (--fps) and the rig's scale"
                )
                warns.append(
                    f"shot {s}: implied speed {sp:.3g} m/s is outside the plausible {lo:g}..{hi:g} m/s: {hint}"
                )
    meta = TrackMeta(
        video=video,
        timing_source=source,
        frame_rate_hz=rate,
        readout_s=opt.readout_s,
        exposure_s=opt.exposure_s,
        rig_digest=rig.digest,
        image_size=(info.width, info.height),
        warnings=tuple(dict.fromkeys(warns)),
        polarity=polarity,
    )
    sel = np.flatnonzero(g)[order]
    track = Track(
        frame=frame[sel],
        t_s=t[sel],
        u_px=uv[sel, 0],
        v_px=uv[sel, 1],
        x_m=xy[sel, 0],
        y_m=xy[sel, 1],
        sigma_px=sig[sel],
        sigma_m=sig_m[sel],
        shot=shot_new,
        brightness=_brightness_column([d[i] for i in sel], t[sel], shot_new, rig, uv[sel], opt),
        streak_len_px=np.array([d[i].streak_len_px for i in sel]),
        flags=tuple(flags[i] for i in sel),
        cal_dx_m=cal[:, sel, 0],
        cal_dy_m=cal[:, sel, 1],
        meta=meta,
    )
    return track, tuple(speeds), warns
