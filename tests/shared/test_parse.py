"""The ground floor's number parsing: finite values pass, everything else names where it was found."""

from __future__ import annotations

import math

import pytest

from hopscope.shared.parse import finite_or_none, is_finite_number, json_finite, parse_finite, parse_int


def test_parse_finite_accepts_numbers_and_names_the_place_of_a_bad_one():
    assert parse_finite(" 1.5e-3 ", "f.csv: line 3: x_m") == pytest.approx(1.5e-3)
    with pytest.raises(ValueError, match=r"^f\.csv: line 3: x_m: not a number: 'abc'$"):
        parse_finite("abc", "f.csv: line 3: x_m")
    for bad in ("nan", "inf", "-Infinity"):
        with pytest.raises(ValueError, match=r"^where: non-finite value"):
            parse_finite(bad, "where")


def test_parse_int_refuses_fractions():
    assert parse_int("42", "w") == 42
    with pytest.raises(ValueError, match=r"^w: not an integer: '4.5'$"):
        parse_int("4.5", "w")


def test_json_numbers_refuse_bools_strings_and_non_finite():
    assert json_finite(3, "a.b") == 3.0
    for bad in (True, "1", None, math.nan, math.inf, [1]):
        assert not is_finite_number(bad)
        with pytest.raises(ValueError, match=r"^a\.b: expected a finite number, got"):
            json_finite(bad, "a.b")


def test_finite_or_none_maps_non_finite_to_none():
    assert finite_or_none(None) is None
    assert finite_or_none(math.nan) is None
    assert finite_or_none(2) == 2.0
