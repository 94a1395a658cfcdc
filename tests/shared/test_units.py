"""Unit conversions at the edges against their defining values, and round trips."""

from __future__ import annotations

import math

import pytest
from hypothesis import given
from hypothesis import strategies as st

from hopscope.shared import units

ROUND_TRIP_RTOL = 1e-12

finite = st.floats(min_value=-1e6, max_value=1e6, allow_nan=False, allow_infinity=False)


def test_defining_values():
    # International yard and pound agreement (1959): 1 ft = 0.3048 m exactly.
    assert units.fps_to_mps(1000.0) == pytest.approx(304.8, rel=1e-15)
    assert units.mps_to_fps(100.0) == pytest.approx(328.0839895013123, rel=1e-15)
    # Celsius zero is 273.15 K by definition (SI Brochure, 9th ed., 2019, sec. 2.3.1).
    assert units.celsius_to_kelvin(0.0) == 273.15
    assert units.kelvin_to_celsius(293.15) == pytest.approx(20.0, abs=1e-12)
    # 1 hPa = 100 Pa, 1 g = 1e-3 kg, 1 mm = 1e-3 m (SI prefixes).
    assert units.hpa_to_pa(1013.25) == pytest.approx(101325.0, rel=1e-15)
    assert units.grams_to_kg(0.25) == pytest.approx(2.5e-4, rel=1e-15)
    assert units.mm_to_m(5.95) == pytest.approx(5.95e-3, rel=1e-15)
    assert units.percent_to_fraction(50.0) == 0.5
    # 1 rpm = 2π/60 rad/s.
    assert units.rpm_to_radps(60.0) == pytest.approx(2 * math.pi, rel=1e-15)
    assert units.deg_to_rad(180.0) == pytest.approx(math.pi, rel=1e-15)


@pytest.mark.parametrize(
    ("there", "back"),
    [
        (units.mps_to_fps, units.fps_to_mps),
        (units.grams_to_kg, units.kg_to_grams),
        (units.mm_to_m, units.m_to_mm),
        (units.celsius_to_kelvin, units.kelvin_to_celsius),
        (units.hpa_to_pa, units.pa_to_hpa),
        (units.radps_to_rpm, units.rpm_to_radps),
        (units.deg_to_rad, units.rad_to_deg),
    ],
)
@given(x=finite)
def test_round_trips(there, back, x):
    assert back(there(x)) == pytest.approx(x, rel=ROUND_TRIP_RTOL, abs=1e-9)
