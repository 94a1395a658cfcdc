"""Atomic output: write to a temporary file beside the target, rename on success, remove on failure.

Every file the app writes goes through :func:`atomic_path` or :func:`write_text_atomic`, so an error
never leaves a half-written file behind.
"""

from __future__ import annotations

import contextlib
import os
import tempfile
from collections.abc import Iterator
from pathlib import Path


@contextlib.contextmanager
def atomic_path(final: str | os.PathLike[str]) -> Iterator[Path]:
    """Yield a temporary path in the target's folder; on success rename it to ``final``.

    The temporary name keeps the final suffix (so writers that choose a format by suffix still work).
    On any exception the temporary file is removed and the exception propagates.
    """
    final = Path(final)
    parent = final.parent if str(final.parent) else Path(".")
    if not parent.is_dir():
        raise FileNotFoundError(f"{final}: output folder {parent} does not exist")
    fd, tmp_name = tempfile.mkstemp(prefix=f".{final.stem}.", suffix=f".partial{final.suffix}", dir=parent)
    os.close(fd)
    tmp = Path(tmp_name)
    # mkstemp creates 0600; give the file the permissions a plain open() would (0666 minus the umask)
    umask = os.umask(0)
    os.umask(umask)
    os.chmod(tmp, 0o666 & ~umask)
    try:
        yield tmp
        os.replace(tmp, final)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            tmp.unlink()
        raise


def write_text_atomic(final: str | os.PathLike[str], text: str) -> None:
    """Write ``text`` (UTF-8) to ``final`` atomically."""
    with atomic_path(final) as tmp:
        tmp.write_text(text, encoding="utf-8")


def write_bytes_atomic(final: str | os.PathLike[str], data: bytes) -> None:
    """Write ``data`` to ``final`` atomically."""
    with atomic_path(final) as tmp:
        tmp.write_bytes(data)
