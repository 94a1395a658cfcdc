"""What :func:`tracker.pipeline.track_video` takes and gives: :class:`TrackOptions` in, a
:class:`TrackResult` with its :class:`TrackSummary` out."""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from hopscope.shared.constants import DEFAULT_BB_DIAMETER_M

from .associate import LinkOptions
from .detect import THRESHOLD_SIGMA
from .localise import Detection
from .select import SPEED_BAND_MPS, BBSearch
from .trackfile import Track
from .video import VideoInfo, check_frame_rate

#: Polarity options and their detection signs.
POLARITIES = {"auto": 0, "bright": 1, "dark": -1}


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
    shot_speeds_mps : per shot, speed at its first point (:func:`tracker.shots.start_speed`), m/s.
    rejected_tracks : reasons for the tracks that were not accepted (a few).
    rejected_track_count : candidate tracks turned down (too short or not smooth, or smooth but not a BB:
        size, speed band, fall, drag, or of the other polarity).
    slow_candidates : blobs within :data:`tracker.windows.SLOW_STEP_PX` of one in the frame before (not
        localised: no BB in flight moves so little).
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
