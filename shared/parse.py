"""Finite-number parsing for files and options: one place that turns text or JSON values into numbers.

Every reader in the project (``rig.json``, ``track.csv``, ``fit.json``, profiles, scene specs, command-line
options) rejects a value that is not a finite number with a message naming *where* it was found. ``where``
is the caller's context, for example ``"track.csv: line 12: x_m"`` or ``"--mass-g"``; the functions here add
only what is wrong.
"""

from __future__ import annotations

import math
from typing import Any


def parse_finite(text: str, where: str) -> float:
    """A finite float from text.

    Raises
    ------
    ValueError
        ``"{where}: not a number: '…'"`` or ``"{where}: non-finite value '…'"``.
    """
    try:
        value = float(text)
    except (TypeError, ValueError):
        raise ValueError(f"{where}: not a number: {str(text).strip()!r}") from None
    if not math.isfinite(value):
        raise ValueError(f"{where}: non-finite value {str(text).strip()!r}")
    return value


def parse_int(text: str, where: str) -> int:
    """An integer from text (no fraction, no exponent); raises ``"{where}: not an integer: '…'"``."""
    try:
        return int(text)
    except (TypeError, ValueError):
        raise ValueError(f"{where}: not an integer: {str(text).strip()!r}") from None


def is_finite_number(value: Any) -> bool:
    """True for an int or float (not a bool) that is finite: what a JSON reader accepts as a number."""
    return not isinstance(value, bool) and isinstance(value, int | float) and math.isfinite(value)


def json_finite(value: Any, where: str) -> float:
    """A finite number from a decoded JSON value; raises ``"{where}: expected a finite number, got …"``."""
    if not is_finite_number(value):
        raise ValueError(f"{where}: expected a finite number, got {value!r}")
    return float(value)


def finite_or_none(value: Any) -> float | None:
    """``float(value)`` when it is finite, else ``None`` (how writers put 'no value' into JSON)."""
    if value is None:
        return None
    v = float(value)
    return v if math.isfinite(v) else None
