"""Field rules of the scene spec: each part declares what a valid value is beside its default.

``x: float = positive(1.0)`` in a part's dataclass declares the default and the rule; :class:`SpecPart` checks
every rule on construction and names "<part> <field>" in the one-line message. Finite-number checks use
:func:`hopscope.shared.parse.is_finite_number` (bools are not numbers).
"""

from __future__ import annotations

import dataclasses
from collections.abc import Callable
from dataclasses import field
from typing import Any, ClassVar

from hopscope.shared.parse import is_finite_number


def check_finite(name: str, value: float) -> None:
    if not is_finite_number(value):
        raise ValueError(f"{name} must be a finite number, got {value!r}")


def check_positive(name: str, value: float) -> None:
    check_finite(name, value)
    if value <= 0:
        raise ValueError(f"{name} must be positive, got {value!r}")


def check_at_least_zero(name: str, value: float) -> None:
    check_finite(name, value)
    if value < 0:
        raise ValueError(f"{name} must be >= 0, got {value!r}")


def check_fraction(name: str, value: float, closed: bool = True) -> None:
    """``value`` in 0..1 (``closed=False``: below 1)."""
    check_finite(name, value)
    if not (0 <= value <= 1 if closed else 0 <= value < 1):
        raise ValueError(f"{name} must lie in 0..1, got {value!r}")


def check_integer(name: str, value: int, lo: int, hi: int) -> None:
    if not (isinstance(value, int) and not isinstance(value, bool) and lo <= value <= hi):
        raise ValueError(f"{name} must be an integer {lo}..{hi}, got {value!r}")


def check_choice(name: str, value: str, choices: tuple[str, ...]) -> None:
    if value not in choices:
        raise ValueError(f"{name} must be one of {choices}, got {value!r}")


def check_vector(name: str, value: tuple[float, ...], n: int) -> None:
    if len(value) != n:
        raise ValueError(f"{name} must have {n} components, got {len(value)}")
    for i, v in enumerate(value):
        check_finite(f"{name}[{i}]", v)


# Field declarations with their rule: ``x: float = positive(1.0)`` declares the default and what a valid
# value is; :class:`SpecPart` checks every rule on construction, naming "<part> <field>" in the message.


def _rule(default: Any, check: Callable[..., None], *args: Any) -> Any:
    return field(default=default, metadata={"check": (check, args)})


def finite(default: float) -> Any:
    """A finite number."""
    return _rule(default, check_finite)


def positive(default: float) -> Any:
    """A finite number > 0."""
    return _rule(default, check_positive)


def at_least_zero(default: float) -> Any:
    """A finite number >= 0."""
    return _rule(default, check_at_least_zero)


def fraction(default: float, *, closed: bool = True) -> Any:
    """A number in 0..1 (``closed=False``: below 1)."""
    return _rule(default, check_fraction, closed)


def one_of(default: str, choices: tuple[str, ...]) -> Any:
    """One of ``choices``."""
    return _rule(default, check_choice, choices)


def integer(default: int, lo: int, hi: int) -> Any:
    """An integer in lo..hi."""
    return _rule(default, check_integer, lo, hi)


def vector(default: tuple[float, ...], n: int) -> Any:
    """``n`` finite numbers."""
    return _rule(default, check_vector, n)


class SpecPart:
    """Base of the spec's parts: checks each field's rule on construction (``_part`` names the part)."""

    _part: ClassVar[str] = "scene"

    def __post_init__(self) -> None:
        for f in dataclasses.fields(self):  # type: ignore[arg-type]
            rule = f.metadata.get("check")
            if rule is not None:
                check, args = rule
                check(f"{self._part} {f.name}", getattr(self, f.name), *args)
