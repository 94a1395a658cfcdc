"""Video reading with real time: per-frame container timestamps, streamed luma frames, row times, checks.

The one owner of "frames become seconds" for every stage (the tracker's clips, the calibration's drop
clip and lens-view videos). Frames are decoded one at a time with PyAV and handed out as the luma (Y)
plane, without a colour conversion, so memory does not grow with the clip's length. Time is the
container's presentation timestamp of each frame (``pts × time_base``) minus the first frame's, which
handles variable frame rate files; ``fps_override`` replaces it by ``index / fps``. A point seen on row v
of a rolling-shutter frame was exposed (v / rows)·readout later than the frame's top row
(:func:`point_times_s`, the only place that offset is applied).

Conventions: images are (row, col) arrays; pixel (u, v) = (col, row) with the centre of the top-left pixel
at (0, 0); times in seconds since the clip's first frame.
"""

from __future__ import annotations

import math
import os
from collections.abc import Iterator, Mapping
from dataclasses import dataclass, field
from pathlib import Path

import av
import numpy as np

#: Frame rates the tracker accepts, Hz. Below 1 Hz nothing can be tracked; above 2 MHz is beyond any
#: camera a user could point at a BB.  # common practice, no published source
FRAME_RATE_RANGE_HZ = (1.0, 2.0e6)

#: Metadata keys that carry a phone's capture rate when the file's timestamps are playback time (Android
#: slow motion writes ``com.android.capture.fps``).  # from memory
CAPTURE_RATE_KEYS = ("com.android.capture.fps", "capture_fps", "com.apple.quicktime.capture.fps")

#: The capture-rate metadata must exceed the timestamp rate by this factor to suggest playback timing.
SLOWMO_RATE_RATIO = 1.5

#: A clip may decode fewer frames than its container announces by this fraction (plus one frame) before it
#: counts as truncated.  # common practice, no published source
TRUNCATION_TOLERANCE = 0.02

#: File name endings read as video clips (lower case).
VIDEO_SUFFIXES = (".mp4", ".mov", ".avi", ".mkv", ".m4v", ".webm", ".mts", ".m2ts", ".wmv", ".mpg", ".mpeg")

#: Pixel formats whose first plane is 8-bit luma, read without conversion.
_LUMA_PLANE_FORMATS = frozenset(
    {
        "yuv420p",
        "yuvj420p",
        "yuv422p",
        "yuvj422p",
        "yuv444p",
        "yuvj444p",
        "yuv440p",
        "nv12",
        "nv21",
        "gray",
        "yuv411p",
    }
)


@dataclass(frozen=True)
class VideoInfo:
    """What the container says about a clip.

    Attributes
    ----------
    path : str
        The file as given.
    width, height : int
        Frame size, px.
    codec : str
        Codec name (FFmpeg's).
    pix_fmt : str
        Pixel format of the decoded frames.
    n_frames : int or None
        Frame count announced by the container (None when it does not say).
    duration_s : float or None
        Duration announced by the container, s (None when it does not say).
    time_base_s : float or None
        Resolution of the stream's timestamps, s (Matroska: 1 ms; MP4: often 1/90000 s or finer).
    average_rate_hz : float or None
        The container's average frame rate, Hz (an average: wrong for variable frame rate files).
    capture_rate_hz : float or None
        Capture rate found in the metadata (phone slow motion), Hz.
    metadata : mapping
        Container and stream metadata (stream keys win).
    """

    path: str
    width: int
    height: int
    codec: str
    pix_fmt: str
    n_frames: int | None
    average_rate_hz: float | None
    capture_rate_hz: float | None
    duration_s: float | None = None
    time_base_s: float | None = None
    metadata: Mapping[str, str] = field(default_factory=dict)


@dataclass(frozen=True)
class VideoFrame:
    """One decoded frame.

    Attributes
    ----------
    index : int
        0-based frame index in presentation order.
    t_s : float
        Frame time, s since the first frame (container timestamps, or ``index / fps`` when overridden).
    luma : ndarray, (height, width), uint8
        The luma plane (read-only; may be a view into the decoder's buffer, valid while referenced).
    """

    index: int
    t_s: float
    luma: np.ndarray


def _open(path: str | os.PathLike[str]) -> av.container.InputContainer:
    p = Path(path)
    if not p.exists():
        raise FileNotFoundError(f"{p}: no such video file")
    if p.is_dir():
        raise IsADirectoryError(f"{p}: is a folder, not a video file")
    if p.stat().st_size == 0:
        raise ValueError(f"{p}: video file is empty")
    try:
        container = av.open(str(p), mode="r")
    except av.error.EOFError:
        raise ValueError(f"{p}: video has no frames (the file ends after its header)") from None
    except av.error.FFmpegError as exc:
        raise ValueError(f"{p}: not a readable video ({_ffmpeg_reason(exc)})") from None
    if not container.streams.video:
        container.close()
        raise ValueError(f"{p}: contains no video stream")
    return container


def _ffmpeg_reason(exc: BaseException) -> str:
    text = getattr(exc, "strerror", None) or str(exc)
    return " ".join(str(text).split()) or type(exc).__name__


def _rate(value: object) -> float | None:
    try:
        r = float(value)  # type: ignore[arg-type]
    except (TypeError, ValueError, ZeroDivisionError):
        return None
    return r if math.isfinite(r) and r > 0 else None


def probe_video(path: str | os.PathLike[str]) -> VideoInfo:
    """Read a clip's container information without decoding it.

    Raises
    ------
    OSError
        The file is missing.
    ValueError
        The file is empty, not a video, or has no video stream (one line naming the file).
    """
    container = _open(path)
    try:
        return _info(container, str(path))
    finally:
        container.close()


def _info(container: av.container.InputContainer, path: str) -> VideoInfo:
    stream = container.streams.video[0]
    meta = {str(k): str(v) for k, v in (container.metadata or {}).items()}
    meta.update({str(k): str(v) for k, v in (stream.metadata or {}).items()})
    capture = None
    for key in CAPTURE_RATE_KEYS:
        for k, v in meta.items():
            if k.lower() == key:
                capture = _rate(v)
    ctx = stream.codec_context
    width, height = int(ctx.width or 0), int(ctx.height or 0)
    if width <= 0 or height <= 0:
        raise ValueError(f"{path}: video stream has no frame size (corrupt header?)")
    return VideoInfo(
        path=path,
        width=width,
        height=height,
        codec=str(ctx.name),
        pix_fmt=str(ctx.pix_fmt),
        n_frames=int(stream.frames) if stream.frames else None,
        average_rate_hz=_rate(stream.average_rate),
        capture_rate_hz=capture,
        duration_s=_duration(container, stream),
        time_base_s=float(stream.time_base) if stream.time_base else None,
        metadata=meta,
    )


def _duration(container: av.container.InputContainer, stream: av.video.stream.VideoStream) -> float | None:
    if stream.duration and stream.time_base:
        d = float(stream.duration * stream.time_base)
    elif container.duration:
        d = container.duration / 1e6
    else:
        return None
    return d if math.isfinite(d) and d > 0 else None


def check_frame_rate(fps: float, what: str = "--fps") -> float:
    """Validate a frame rate in Hz; raise a one-line ValueError naming ``what`` when it is ≤ 0 or absurd."""
    lo, hi = FRAME_RATE_RANGE_HZ
    if not (isinstance(fps, int | float) and math.isfinite(fps)):
        raise ValueError(f"{what}: frame rate must be a finite number, got {fps!r}")
    if fps <= 0:
        raise ValueError(f"{what}: frame rate must be positive, got {fps:g}")
    if not lo <= fps <= hi:
        raise ValueError(f"{what}: frame rate {fps:g} Hz is outside the plausible range {lo:g}..{hi:g} Hz")
    return float(fps)


def _luma(frame: av.VideoFrame) -> np.ndarray:
    arr: np.ndarray
    if frame.format.name in _LUMA_PLANE_FORMATS:
        plane = frame.planes[0]
        arr = np.frombuffer(memoryview(plane), np.uint8).reshape(frame.height, plane.line_size)[
            :, : frame.width
        ]
    else:
        arr = frame.to_ndarray(format="gray")
    arr.setflags(write=False)
    return arr


def iter_frames(
    path: str | os.PathLike[str],
    *,
    fps_override: float | None = None,
    fps_option: str = "--fps",
    check_length: bool = True,
) -> Iterator[VideoFrame]:
    """Stream a clip's frames as luma arrays with real times.

    Parameters
    ----------
    path : path of the video.
    fps_override : float, optional
        Frame rate, Hz: times become ``index / fps_override`` instead of the container timestamps.
    fps_option : the command-line option that gives the frame rate, named in error messages.
    check_length : raise when the clip decodes clearly fewer frames than its container announces.

    Yields
    ------
    VideoFrame
        In presentation order; only the frames the caller keeps stay in memory.

    Raises
    ------
    OSError, ValueError
        Missing, empty or unreadable file; a frame without a timestamp or with a timestamp that does not
        increase (without an override); a stream that breaks off early (corrupt or truncated). One line,
        naming the file.
    """
    if fps_override is not None:
        check_frame_rate(fps_override, fps_option)
    container = _open(path)
    try:
        info = _info(container, str(path))
        stream = container.streams.video[0]
        t0: float | None = None
        last_t = -math.inf
        index = -1
        try:
            for frame in container.decode(stream):
                index += 1
                if fps_override is not None:
                    t = index / fps_override
                else:
                    ft = frame.time
                    if ft is None:
                        raise ValueError(
                            f"{path}: frame {index} has no timestamp; give the frame rate with {fps_option}"
                        )
                    if t0 is None:
                        t0 = float(ft)
                    t = float(ft) - t0
                    if t <= last_t:
                        raise ValueError(
                            f"{path}: timestamps do not increase at frame {index} "
                            f"({t:.6f} s after {last_t:.6f} s); give the frame rate with {fps_option}"
                        )
                last_t = t
                yield VideoFrame(index=index, t_s=t, luma=_luma(frame))
        except av.error.FFmpegError as exc:
            raise ValueError(
                f"{path}: video is corrupt or truncated (decoding failed after {index + 1} frames: "
                f"{_ffmpeg_reason(exc)})"
            ) from None
        n = index + 1
        if n == 0:
            raise ValueError(f"{path}: video has no decodable frames")
        if not check_length:
            return
        if info.n_frames and n < info.n_frames * (1 - TRUNCATION_TOLERANCE) - 1:
            raise ValueError(
                f"{path}: video is truncated or corrupt (decoded {n} of the {info.n_frames} frames the container announces)"
            )
        if not info.n_frames and info.duration_s and t0 is not None and n > 1:
            span = last_t
            period = span / (n - 1)
            if span + period < info.duration_s * (1 - TRUNCATION_TOLERANCE) - period:
                raise ValueError(
                    f"{path}: video is truncated or corrupt (frames end at {span + period:.4g} s of the "
                    f"{info.duration_s:.4g} s the container announces)"
                )
    finally:
        container.close()


def frame_times(path: str | os.PathLike[str]) -> np.ndarray:
    """Container times of all frames, s since the first frame (decodes the clip; for checks and tests)."""
    return np.array([f.t_s for f in iter_frames(path)])


def timing_warnings(info: VideoInfo, times_s: np.ndarray, *, fps_override: float | None) -> list[str]:
    """Warnings about a clip's timing: timestamps that look like playback time, irregular frame spacing.

    Parameters
    ----------
    info : the container information.
    times_s : frame times as read (s), at least the first few frames.
    fps_override : the user's override (Hz), or None.

    Notes
    -----
    Phone slow motion often stores playback timing (e.g. 30 fps) and the capture rate in metadata; real
    time is then pts_time × playback/capture. With an override no warning about the container is given.
    """
    out: list[str] = []
    if fps_override is not None:
        return out
    rate = timestamp_rate_hz(times_s)
    if info.capture_rate_hz and rate and info.capture_rate_hz > SLOWMO_RATE_RATIO * rate:
        out.append(
            f"{info.path}: timestamps run at {rate:.4g} fps but the metadata says the capture rate was "
            f"{info.capture_rate_hz:.4g} fps: the timestamps may be playback time (phone slow motion); "
            f"if so rerun with --fps {info.capture_rate_hz:.6g}"
        )
    return out


def regularise_times(times_s: np.ndarray, time_base_s: float | None) -> tuple[np.ndarray, str | None]:
    """Undo the rounding of a constant-rate clip's timestamps to a coarse time base.

    When every timestamp lies within half a time-base step of an evenly spaced sequence t₀ + k·Δt (Δt a
    whole or N·1000/1001 frame rate that fits, else the least-squares slope), the clip is constant-rate and the spread is rounding (Matroska stores times in
    milliseconds: ±0.5 ms is 12 % of a 240 fps frame period). The evenly spaced times are returned with a
    note; otherwise the times are returned unchanged with None.
    """
    t = np.asarray(times_s, dtype=float)
    if t.size < 3 or not time_base_s or time_base_s <= 0:
        return t, None
    k = np.arange(t.size)
    dt = float(np.median(np.diff(t)))
    if time_base_s < 1e-3 * dt:
        return t, None  # timestamps fine enough already
    half = 0.5 * time_base_s * (1 + 1e-6) + 1e-12
    slope, _ = np.polyfit(k, t, 1)
    # prefer a whole frame rate, or an NTSC-style one (N·1000/1001), when it fits within the rounding
    rates = [float(round(1 / slope)), round(1 / slope * 1.001) / 1.001, 1 / slope]
    for rate in rates:
        b = 1.0 / rate
        dev = t - b * k
        a = 0.5 * (dev.max() + dev.min())
        if np.max(np.abs(dev - a)) <= half:
            slope = b
            break
    else:
        return t, None
    if np.max(np.abs(t - slope * k)) <= 1e-3 * dt:
        return t, None  # on the grid already: the rounding does not matter
    return slope * k, (
        f"container timestamps are rounded to {time_base_s * 1e3:.3g} ms; the frames are evenly spaced at "
        f"{1 / slope:.6g} fps within that rounding, so evenly spaced times are used"
    )


def timestamp_rate_hz(times_s: np.ndarray) -> float | None:
    """Frame rate implied by the timestamps: 1 / median frame interval, Hz (None for < 2 frames)."""
    t = np.asarray(times_s, dtype=float)
    if t.size < 2:
        return None
    dt = float(np.median(np.diff(t)))
    return 1.0 / dt if dt > 0 else None


def frame_count(path: str | os.PathLike[str]) -> int:
    """Frames in a clip: the container's count when it announces one, else counted by decoding."""
    info = probe_video(path)
    if info.n_frames:
        return info.n_frames
    return sum(1 for _ in iter_frames(path, check_length=False))


def row_offsets_s(v_px: np.ndarray, rows: int, readout_s: float) -> np.ndarray:
    """Rolling-shutter time offset of image rows, s: row v is exposed (v / rows)·readout after the top row.

    Parameters
    ----------
    v_px : (N,) row coordinates v of points, px (pixel centres at integers; fractional rows allowed).
    rows : frame height, px.
    readout_s : readout time from the top row to the bottom row, s (0 for a global shutter).

    References
    ----------
    Liang, C.-K., Chang, L.-W. & Chen, H. H. (2008). Analysis and compensation of rolling shutter effect.
    IEEE Trans. Image Processing 17(8):1323–1330 (from memory; each row's exposure starts one line time after the
    previous row's).
    """
    if rows <= 0:
        raise ValueError(f"rows: expected a positive frame height, got {rows!r}")
    if not (math.isfinite(readout_s) and readout_s >= 0):
        raise ValueError(f"readout: expected a finite readout time >= 0 s, got {readout_s!r}")
    return np.asarray(v_px, dtype=float) * (readout_s / rows)


def point_times_s(
    frame_t_s: np.ndarray,
    v_px: np.ndarray,
    rows: int,
    readout_s: float,
    exposure_s: float | None = None,
) -> np.ndarray:
    """Time at which each point was seen, s: its frame's time plus its row's rolling-shutter offset
    (:func:`row_offsets_s`), plus half the exposure when it is known (the mid-exposure time).

    Parameters
    ----------
    frame_t_s : (N,) times of the points' frames, s since the clip's first frame.
    v_px : (N,) the points' row coordinates v, px.
    rows : frame height, px.
    readout_s : rolling-shutter readout, top to bottom row, s.
    exposure_s : exposure time, s, or None when unknown (start-of-exposure times).
    """
    t = np.asarray(frame_t_s, dtype=float) + row_offsets_s(v_px, rows, readout_s)
    if exposure_s is not None:
        if not (math.isfinite(exposure_s) and exposure_s >= 0):
            raise ValueError(f"exposure: expected a finite exposure time >= 0 s, got {exposure_s!r}")
        t = t + 0.5 * exposure_s
    return t
