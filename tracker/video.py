"""Video reading for the tracker: the ground floor's reader (:mod:`hopscope.shared.video`), re-exported.

Frames with their real times, the ``--fps`` override, slow-motion hints and each row's rolling-shutter
offset live in one place, :mod:`hopscope.shared.video`; the tracker's modules keep importing them from
here.
"""

from __future__ import annotations

from hopscope.shared.video import (
    CAPTURE_RATE_KEYS,
    FRAME_RATE_RANGE_HZ,
    SLOWMO_RATE_RATIO,
    TRUNCATION_TOLERANCE,
    VIDEO_SUFFIXES,
    VideoFrame,
    VideoInfo,
    check_frame_rate,
    frame_count,
    frame_times,
    iter_frames,
    point_times_s,
    probe_video,
    regularise_times,
    row_offsets_s,
    timestamp_rate_hz,
    timing_warnings,
)

__all__ = [
    "CAPTURE_RATE_KEYS",
    "FRAME_RATE_RANGE_HZ",
    "SLOWMO_RATE_RATIO",
    "TRUNCATION_TOLERANCE",
    "VIDEO_SUFFIXES",
    "VideoFrame",
    "VideoInfo",
    "check_frame_rate",
    "frame_count",
    "frame_times",
    "iter_frames",
    "point_times_s",
    "probe_video",
    "regularise_times",
    "row_offsets_s",
    "timestamp_rate_hz",
    "timing_warnings",
]
