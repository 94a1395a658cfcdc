"""Terminal output shared by all commands: warnings, summaries, progress bars, quiet libraries."""

from __future__ import annotations

import os
import sys
from collections.abc import Iterable, Iterator
from typing import TypeVar

T = TypeVar("T")


def quiet_libraries() -> None:
    """Keep FFmpeg's and OpenCV's own logging off the user's terminal (call before importing cv2/av)."""
    os.environ.setdefault("OPENCV_LOG_LEVEL", "ERROR")
    os.environ.setdefault("OPENCV_FFMPEG_LOGLEVEL", "-8")
    os.environ.setdefault("OPENCV_VIDEOIO_DEBUG", "0")
    try:  # pragma: no cover - depends on optional import order
        import av.logging

        av.logging.set_level(None)
    except Exception:
        pass


def warn(message: str) -> None:
    """One stderr line beginning ``warning:``."""
    print(f"warning: {message}", file=sys.stderr)


def progress(
    items: Iterable[T], *, total: int | None = None, desc: str = "", unit: str = "it"
) -> Iterator[T]:
    """A progress bar on stderr (only when stderr is a terminal, or HOPSCOPE_PROGRESS=1)."""
    from tqdm import tqdm

    enabled = sys.stderr.isatty() or os.environ.get("HOPSCOPE_PROGRESS") == "1"
    yield from tqdm(
        items, total=total, desc=desc, unit=unit, disable=not enabled, leave=False, file=sys.stderr
    )


def summary(title: str, rows: list[tuple[str, str]]) -> str:
    """A one-screen summary: a title line, then aligned ``label  value`` rows."""
    width = max((len(k) for k, _ in rows), default=0)
    lines = [title, "-" * max(len(title), 8)]
    lines += [f"  {k.ljust(width)}  {v}" for k, v in rows]
    return "\n".join(lines)
