"""Listing the input files a folder argument stands for (image views, video clips)."""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path


def folder_files(folder: Path, suffixes: Sequence[str], *, what: str, where: str) -> list[Path]:
    """The files in ``folder`` whose name ends in one of ``suffixes`` (lower-case, with the dot), sorted.

    Raises
    ------
    ValueError
        ``"{where}: the folder holds no {what} (.png, ...)"`` when there are none.
    """
    found = sorted(f for f in folder.iterdir() if f.is_file() and f.suffix.lower() in suffixes)
    if not found:
        raise ValueError(f"{where}: the folder holds no {what} ({', '.join(suffixes)})")
    return found
