"""Air properties against outside references: CoolProp, ICAO standard atmosphere, a CIPM-2007 worked value."""

from __future__ import annotations

import math

import numpy as np
import pytest
from CoolProp.CoolProp import PropsSI
from CoolProp.HumidAirProp import HAPropsSI

from hopscope.fitting.air import (
    Air,
    latitude_gravity,
    moist_air_density,
    saturation_vapour_pressure,
    sutherland_viscosity,
)
from hopscope.shared.constants import (
    ISA_SEA_LEVEL_P_PA,
    ISA_SEA_LEVEL_RHO_KGM3,
    ISA_SEA_LEVEL_T_K,
    STANDARD_GRAVITY_MPS2,
    WGS84_K,
)
from hopscope.shared.units import celsius_to_kelvin, hpa_to_pa, percent_to_fraction

DENSITY_VS_COOLPROP_RTOL = 2e-4
VISCOSITY_VS_COOLPROP_RTOL = 5e-3
ISA_DENSITY_RTOL = 5e-4  # ISA density is given to 5 digits; CIPM-2007 dry air differs from ISA's ideal gas
WGS84_K_RTOL = 1e-8  # k = ratio − 1 loses ~3 digits: inputs rounded to 1e-10 give ~5e-9 on k
WORKED_VALUE_RTOL = 1e-5  # printed to 6 significant digits
SATURATION_VS_COOLPROP_RTOL = 1e-3

MMHG_PA = 101325.0 / 760.0  # exact by definition of the conventional millimetre of mercury
#: Somigliana gravity at the equator and pole against its published constants (printed to 10 digits).
GRAVITY_PUBLISHED_TOL_MPS2 = 1e-8
#: Symmetric formula: the two poles agree to round-off.
ROUNDOFF_TOL_MPS2 = 1e-12
#: Latitude-45° gravity lies within this of standard gravity (which was defined near 45°).
STANDARD_GRAVITY_45_TOL_MPS2 = 2e-3


@pytest.mark.parametrize("t_c", np.linspace(0.0, 35.0, 8))
def test_density_matches_coolprop_humid_air(t_c):
    # Reference: CoolProp HumidAirProp (Bell, Wronski, Quoilin & Lemort 2014, Ind. Eng. Chem. Res. 53:2498),
    # density = 1 / HAPropsSI('Vha', ...), specific volume per kg of humid air.
    t_k = celsius_to_kelvin(t_c)
    for p_hpa in (900.0, 950.0, 1013.25, 1050.0):
        for rh_pct in (0.0, 25.0, 50.0, 75.0, 100.0):
            p = hpa_to_pa(p_hpa)
            rh = percent_to_fraction(rh_pct)
            ours = moist_air_density(t_k, p, rh)
            ref = 1.0 / HAPropsSI("Vha", "T", t_k, "P", p, "R", rh)
            assert ours == pytest.approx(ref, rel=DENSITY_VS_COOLPROP_RTOL), (t_c, p_hpa, rh_pct)


def test_dry_air_at_isa_sea_level():
    # ICAO (1993), Manual of the ICAO Standard Atmosphere, Doc 7488/3: 288.15 K, 101325 Pa, 1.2250 kg/m³
    # (from memory).
    rho = moist_air_density(ISA_SEA_LEVEL_T_K, ISA_SEA_LEVEL_P_PA, 0.0)
    assert rho == pytest.approx(ISA_SEA_LEVEL_RHO_KGM3, rel=ISA_DENSITY_RTOL)


def test_cipm_2007_worked_values():
    # Worked CIPM-2007 values as printed in S. V. Gupta, *Mass Metrology* (Springer 2012), appendix p. 205:
    # 10 °C, 730 mmHg, 40 % RH -> 1.19569e-3 g/cm³. Read in the test suite of the CRAN package masscor,
    # which cites the book (the book itself not read). The CIPM-2007 paper's own check value (Picard et al. 2008) could not
    # be found to read, so it is not used here.
    rho = moist_air_density(celsius_to_kelvin(10.0), 730.0 * MMHG_PA, 0.40)
    assert rho == pytest.approx(1.19569, rel=WORKED_VALUE_RTOL)


def test_humidity_lowers_density():
    # Physics of the CIPM-2007 formula (Picard et al. 2008, eq. 1): water vapour (M_v < M_a) displaces air.
    dry = moist_air_density(303.15, 101325.0, 0.0)
    wet = moist_air_density(303.15, 101325.0, 1.0)
    assert wet < dry * (1 - 1e-2)  # at 30 °C saturation lowers density by ~1.6 %


@pytest.mark.parametrize("t_c", [0.0, 10.0, 20.0, 30.0, 35.0])
def test_saturation_vapour_pressure_matches_coolprop(t_c):
    # Reference: CoolProp water (IAPWS-95, Wagner & Pruss 2002) saturation pressure.
    t_k = celsius_to_kelvin(t_c)
    ref = PropsSI("P", "T", t_k, "Q", 0, "Water")
    assert saturation_vapour_pressure(t_k) == pytest.approx(ref, rel=SATURATION_VS_COOLPROP_RTOL)


@pytest.mark.parametrize("t_c", np.linspace(0.0, 35.0, 8))
def test_viscosity_matches_coolprop_air(t_c):
    # Reference: CoolProp pseudo-pure air viscosity (Lemmon & Jacobsen 2004, Int. J. Thermophys. 25:21).
    t_k = celsius_to_kelvin(t_c)
    for p in (90000.0, 101325.0, 105000.0):
        ref = PropsSI("V", "T", t_k, "P", p, "Air")
        assert sutherland_viscosity(t_k) == pytest.approx(ref, rel=VISCOSITY_VS_COOLPROP_RTOL)


def test_latitude_gravity_reference_points():
    # WGS84 normal gravity (NIMA TR8350.2, 2000, eq. 4-1): equator 9.7803253359, pole 9.8321849378 m/s²,
    # semi-axes a = 6378137 m, b = 6356752.3142 m (read in several public implementations of TR8350.2).
    # Somigliana's k must equal b·γ_p / (a·γ_e) − 1; 45° lies close to standard gravity (3rd CGPM 1901).
    assert WGS84_K == pytest.approx(
        6356752.3142 * 9.8321849378 / (6378137.0 * 9.7803253359) - 1.0, rel=WGS84_K_RTOL
    )
    assert latitude_gravity(0.0) == pytest.approx(9.7803253359, abs=GRAVITY_PUBLISHED_TOL_MPS2)
    assert latitude_gravity(90.0) == pytest.approx(9.8321849378, abs=GRAVITY_PUBLISHED_TOL_MPS2)
    assert latitude_gravity(-90.0) == pytest.approx(latitude_gravity(90.0), abs=ROUNDOFF_TOL_MPS2)
    assert latitude_gravity(45.0) == pytest.approx(STANDARD_GRAVITY_MPS2, abs=STANDARD_GRAVITY_45_TOL_MPS2)
    assert latitude_gravity(45.0, 1000.0) == pytest.approx(
        latitude_gravity(45.0) - 3.086e-3, abs=GRAVITY_PUBLISHED_TOL_MPS2
    )


def test_air_from_conditions_and_standard():
    air = Air.from_conditions(293.15, 101325.0, 0.5)
    assert air.density_kgm3 == moist_air_density(293.15, 101325.0, 0.5)
    assert air.viscosity_pas == sutherland_viscosity(293.15)
    std = Air.standard()
    assert std.temperature_k == pytest.approx(293.15)
    assert std.pressure_pa == pytest.approx(101325.0)
    assert std.relative_humidity == pytest.approx(0.5)


@pytest.mark.parametrize(
    ("args", "match"),
    [
        ((math.nan, 101325.0, 0.5), "temperature_k must be a finite"),
        ((293.15, math.inf, 0.5), "pressure_pa must be a finite"),
        ((293.15, 101325.0, math.nan), "relative_humidity must be a finite"),
        ((100.0, 101325.0, 0.5), "temperature_k must lie in"),
        ((293.15, 10.0, 0.5), "pressure_pa must lie in"),
        ((293.15, 101325.0, 1.5), "relative_humidity must lie in 0..1"),
        ((293.15, 101325.0, -0.1), "relative_humidity must lie in 0..1"),
    ],
)
def test_density_rejects_bad_conditions(args, match):
    with pytest.raises(ValueError, match=match):
        moist_air_density(*args)


def test_viscosity_and_gravity_reject_bad_input():
    with pytest.raises(ValueError, match="temperature_k must be a positive finite"):
        sutherland_viscosity(-1.0)
    with pytest.raises(ValueError, match="latitude_deg must lie in -90..90"):
        latitude_gravity(91.0)
    with pytest.raises(ValueError, match="latitude_deg must lie in -90..90"):
        latitude_gravity(math.nan)
