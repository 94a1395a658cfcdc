"""Playback-timed copies of a clip: the same frames, stored with the timestamps of a slower playback rate.

Slow-motion phones often store a clip captured at, say, 240 frames/s with container timestamps for
playback at 30 frames/s, so that it plays slowly; the capture rate then lives only in the maker's metadata,
or nowhere. :func:`write_playback_timed_copy` makes such a file from any rendered clip by remuxing: the
compressed frames are copied bit for bit and only the stream's time base changes (PyAV), so frame k of the
copy decodes to exactly frame k of the source and carries the time k / playback_fps.

Notes
-----
The truth of the copy is the source's: true time = container time × playback_fps / capture_fps.
"""

from __future__ import annotations

from dataclasses import dataclass
from fractions import Fraction
from pathlib import Path

import av

from hopscope.shared.fileio import atomic_path


@dataclass(frozen=True)
class PlaybackTimedClip:
    """A playback-timed copy: its path, the capture and playback frame rates (1/s) and their ratio."""

    path: Path
    capture_fps: float
    playback_fps: float

    @property
    def time_scale(self) -> float:
        """True seconds per container second (capture_fps / playback_fps is how much slower it plays)."""
        return self.playback_fps / self.capture_fps


def write_playback_timed_copy(
    source: str | Path, out_path: str | Path, *, playback_fps: float, capture_fps: float | None = None
) -> PlaybackTimedClip:
    """Copy the video stream of ``source`` to ``out_path`` with timestamps for ``playback_fps``.

    Parameters
    ----------
    source : a clip whose container timestamps are the capture times (a rendered ``flight.mp4``).
    out_path : the copy (same container format; written atomically).
    playback_fps : frame rate the copy's timestamps say, 1/s (e.g. 30 for a 240 fps capture).
    capture_fps : the source's frame rate, 1/s (default: the stream's average rate).

    Returns
    -------
    PlaybackTimedClip
    """
    src = Path(source)
    if not (isinstance(playback_fps, int | float) and playback_fps > 0):
        raise ValueError(f"playback_fps must be a positive number, got {playback_fps!r}")
    try:
        container = av.open(str(src))
    except (OSError, av.FFmpegError) as exc:
        raise OSError(f"{src}: cannot open video ({exc})") from exc
    with container:
        if not container.streams.video:
            raise ValueError(f"{src}: no video stream")
        stream = container.streams.video[0]
        capture = float(capture_fps) if capture_fps is not None else float(stream.average_rate or 0)
        if not capture > 0:
            raise ValueError(f"{src}: the stream has no frame rate; give capture_fps")
        scale = Fraction(capture).limit_denominator(1_000_000) / Fraction(playback_fps).limit_denominator(
            1_000_000
        )
        in_tb = stream.time_base
        if in_tb is None:
            raise ValueError(f"{src}: the stream has no time base")
        out_tb = in_tb * scale
        dst = Path(out_path)
        with atomic_path(dst) as tmp:
            with av.open(str(tmp), "w", format=container.format.name.split(",")[0]) as out:
                ostream = out.add_stream_from_template(stream)
                ostream.time_base = out_tb
                for packet in container.demux(stream):
                    if packet.dts is None:  # the demuxer's final flush packet
                        continue
                    packet.stream = ostream
                    packet.time_base = out_tb
                    out.mux(packet)
    return PlaybackTimedClip(dst, capture, float(playback_fps))
