"""The tracker end to end: video → background → candidates → sub-pixel fits → tracks → metres and seconds.

One streaming pass over the clip (memory bounded by the background window), then linking, timing and the
mapping through the rig. The result is a :class:`TrackResult`: the :class:`~tracker.trackfile.Track` (or
the reason there is none), a summary for the user and what the overlay needs.

Which track is the BB: every smooth track of either polarity (and, where the BB's image is large enough,
of bright and dark halves fitted together as a marked ball) is judged by :mod:`tracker.select` (image size
at the flight plane from the rig and ``bb_diameter_m``, ``speed_band_mps``, fall under gravity within a
plausible lift, drag); the BB's tracks of the polarity with most points are the shots, the rest are counted
in the summary with their reasons (:mod:`tracker.choose`). Decoding runs in a thread
(:func:`tracker.prefetch.prefetched`).

A marked BB whose mark turns one half to match the wall shows only the other half: within a few frames of
the marked track's last ball, a lone blob where the track predicts the ball is fitted as the ball too
(:func:`tracker.windows._follow_marked`).

Brightness of a point (the spin signal of a marked BB): the BB's light per px² of its apparent image and per
second of exposure (:func:`tracker.shots.brightness_per_area`; for a marked BB its own light with the hidden
background added back, at the fitted radius smoothed along the shot:
:func:`tracker.shots._brightness_column`).

Uncertainty of a point: the fit's σ from the local noise (:mod:`tracker.localise`), then checked against the
shot's own scatter about a smooth path (:func:`tracker.associate.scatter_ratio`) and scaled up by that
ratio when it is larger than 1 (a warning when it exceeds :data:`tracker.shots.SIGMA_SCALE_WARN`).

Time of a point: the frame's time (container timestamps, or index / fps with an override), plus the
rolling-shutter offset of the point's row, (v / rows) · readout, plus half the exposure when it is known
(the fitted centre of a streak is the mid-exposure position).

Modules
-------
This module is where callers import the tracker from; besides :func:`track_video` (the frame loop) the
code lives in:

``tracker.options``   :class:`TrackOptions`, :class:`TrackSummary`, :class:`TrackResult`, :data:`POLARITIES`
``tracker.prefetch``  :func:`prefetched`: the decoding thread
``tracker.windows``   which blobs are fitted and in which window (slow blobs, a marked BB's halves)
``tracker.choose``    which tracks are the BB's shots
``tracker.shots``     the chosen shots as a Track: σ, times, metres, brightness, :func:`start_speed`
"""

from __future__ import annotations

import math
from collections.abc import Callable, Iterable, Iterator
from typing import Any

import numpy as np

from hopscope.calibration.rig import Rig

from .background import default_scale, downsample, windowed
from .choose import _select_tracks
from .detect import Candidate, find_candidates
from .localise import QUANTISATION_NOISE_DN, Detection, localise, localise_marked
from .options import POLARITIES, TrackOptions, TrackResult, TrackSummary
from .prefetch import PREFETCH_DEPTH, prefetched
from .shots import (
    RADIUS_SMOOTH_DEGREE,
    SIGMA_SCALE_WARN,
    SPEED_POINTS,
    _build_track,
    brightness_per_area,
    start_speed,
)
from .video import (
    VideoFrame,
    VideoInfo,
    check_frame_rate,
    iter_frames,
    probe_video,
    regularise_times,
    timing_warnings,
)
from .windows import (
    MARKED_FOLLOW_FRAMES,
    MARKED_FOLLOW_RADII,
    MARKED_FOLLOW_STEP_SHARE,
    MARKED_MIN_RADIUS_PX,
    MARKED_PAD_PX,
    SLOW_STEP_PX,
    _follow_marked,
    _inside_box,
    _marked_pairs,
    _slow,
)

__all__ = [
    "MARKED_FOLLOW_FRAMES",
    "MARKED_FOLLOW_RADII",
    "MARKED_FOLLOW_STEP_SHARE",
    "MARKED_MIN_RADIUS_PX",
    "MARKED_PAD_PX",
    "POLARITIES",
    "PREFETCH_DEPTH",
    "RADIUS_SMOOTH_DEGREE",
    "SIGMA_SCALE_WARN",
    "SLOW_STEP_PX",
    "SPEED_POINTS",
    "TrackOptions",
    "TrackResult",
    "TrackSummary",
    "brightness_per_area",
    "check_rig_size",
    "prefetched",
    "start_speed",
    "track_video",
]


def check_rig_size(rig: Rig, info: VideoInfo, rig_name: str = "rig") -> None:
    """Raise a one-line ValueError when the rig was made for another image size than the video's."""
    if tuple(rig.image_size) != (info.width, info.height):
        w, h = rig.image_size
        raise ValueError(
            f"{rig_name}: made for {w}x{h} px images, but {info.path} has {info.width}x{info.height} px frames"
        )


def _with_low(frames: Iterator[VideoFrame], scale: int) -> Iterator[tuple[VideoFrame, np.ndarray]]:
    """Each frame with its detection image (:func:`tracker.background.downsample`); closes ``frames``."""
    try:
        for fr in frames:
            yield fr, downsample(fr.luma, scale)
    finally:
        close = getattr(frames, "close", None)
        if close is not None:
            close()


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
    # decoding and the detection image's block averaging run in a thread (FFmpeg and OpenCV release the
    # interpreter lock) while this one detects
    reduced = prefetched(_with_low(iter_frames(video, fps_override=opt.fps_override), scale))
    lows: dict[int, np.ndarray] = {}  # the detection image of the frame on its way to the background window

    def decoded() -> Iterator[VideoFrame]:
        for fr, low in reduced:
            lows[fr.index] = low
            yield fr

    frames: Iterable[VideoFrame] = decoded()
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
    for wf in windowed(
        timed(frames), gap_frames=opt.gap_frames, scale=scale, low_of=lambda f: lows.pop(f.index)
    ):
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
