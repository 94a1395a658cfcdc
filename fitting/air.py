"""Air properties: moist-air density (CIPM-2007), viscosity (Sutherland), gravity.

All functions take SI inputs (K, Pa, fraction 0..1). Conversion from °C, hPa and % happens at the edges
(see :mod:`fitting.units`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from hopscope.shared.constants import (
    CELSIUS_ZERO_K,
    CIPM_GAS_CONSTANT,
    DEFAULT_CO2_MOLE_FRACTION,
    MOLAR_MASS_WATER_KG,
    STANDARD_GRAVITY_MPS2,
    SUTHERLAND_C1,
    SUTHERLAND_S_K,
    WGS84_E2,
    WGS84_GAMMA_E,
    WGS84_K,
)

# CIPM-2007 coefficients. Source: Picard, Davis, Gläser & Fujii (2008), "Revised formula for the density of
# moist air (CIPM-2007)", Metrologia 45:149-155, Table 1 (saturation vapour pressure, enhancement factor,
# compressibility factor).
_PSV_A = 1.2378847e-5
_PSV_B = -1.9121316e-2
_PSV_C = 33.93711047
_PSV_D = -6.3431645e3
_F_ALPHA = 1.00062
_F_BETA = 3.14e-8
_F_GAMMA = 5.6e-7
_Z_A0 = 1.58123e-6
_Z_A1 = -2.9331e-8
_Z_A2 = 1.1043e-10
_Z_B0 = 5.707e-6
_Z_B1 = -2.051e-8
_Z_C0 = 1.9898e-4
_Z_C1 = -2.376e-6
_Z_D = 1.83e-11
_Z_E = -0.765e-8


def _check_conditions(temperature_k: float, pressure_pa: float, relative_humidity: float) -> None:
    for name, value in (
        ("temperature_k", temperature_k),
        ("pressure_pa", pressure_pa),
        ("relative_humidity", relative_humidity),
    ):
        if not math.isfinite(value):
            raise ValueError(f"{name} must be a finite number, got {value!r}")
    if not 200.0 <= temperature_k <= 350.0:
        raise ValueError(f"temperature_k must lie in 200..350 K, got {temperature_k:g}")
    if not 1e4 <= pressure_pa <= 2e5:
        raise ValueError(f"pressure_pa must lie in 1e4..2e5 Pa, got {pressure_pa:g}")
    if not 0.0 <= relative_humidity <= 1.0:
        raise ValueError(f"relative_humidity must lie in 0..1, got {relative_humidity:g}")


def saturation_vapour_pressure(temperature_k: float) -> float:
    """Saturation vapour pressure of water over a plane surface, Pa.

    References
    ----------
    Picard et al. (2008), Metrologia 45:149, eq. A1.2 (Davis 1992 form).
    """
    t = temperature_k
    return math.exp(_PSV_A * t * t + _PSV_B * t + _PSV_C + _PSV_D / t)


def moist_air_density(
    temperature_k: float,
    pressure_pa: float,
    relative_humidity: float,
    *,
    co2_mole_fraction: float = DEFAULT_CO2_MOLE_FRACTION,
) -> float:
    """Density of moist air, kg/m³, by the CIPM-2007 formula.

    Parameters
    ----------
    temperature_k : air temperature, K.
    pressure_pa : absolute pressure, Pa.
    relative_humidity : relative humidity as a fraction, 0..1.
    co2_mole_fraction : mole fraction of CO2 (dimensionless).

    References
    ----------
    Picard, Davis, Gläser & Fujii (2008), "Revised formula for the density of moist air (CIPM-2007)",
    Metrologia 45:149-155, eqs. 1, A1.1-A1.4.
    """
    _check_conditions(temperature_k, pressure_pa, relative_humidity)
    t_c = temperature_k - CELSIUS_ZERO_K
    p = pressure_pa
    big_t = temperature_k
    f = _F_ALPHA + _F_BETA * p + _F_GAMMA * t_c * t_c
    x_v = relative_humidity * f * saturation_vapour_pressure(big_t) / p
    z = (
        1.0
        - (p / big_t)
        * (
            _Z_A0
            + _Z_A1 * t_c
            + _Z_A2 * t_c * t_c
            + (_Z_B0 + _Z_B1 * t_c) * x_v
            + (_Z_C0 + _Z_C1 * t_c) * x_v * x_v
        )
        + (p * p) / (big_t * big_t) * (_Z_D + _Z_E * x_v * x_v)
    )
    m_a = (28.96546 + 12.011 * (co2_mole_fraction - 0.0004)) * 1e-3
    m_v = MOLAR_MASS_WATER_KG
    return p * m_a / (z * CIPM_GAS_CONSTANT * big_t) * (1.0 - x_v * (1.0 - m_v / m_a))


def sutherland_viscosity(temperature_k: float) -> float:
    """Dynamic viscosity of air, Pa·s, by Sutherland's law mu = C1 T^1.5 / (T + S).

    References
    ----------
    Sutherland (1893), Phil. Mag. 36:507; constants C1 = 1.458e-6 Pa·s·K^-1/2, S = 110.4 K as in the
    U.S. Standard Atmosphere (1976), eq. 51.
    """
    if not (math.isfinite(temperature_k) and temperature_k > 0):
        raise ValueError(f"temperature_k must be a positive finite number, got {temperature_k!r}")
    return SUTHERLAND_C1 * temperature_k**1.5 / (temperature_k + SUTHERLAND_S_K)


def latitude_gravity(latitude_deg: float, height_m: float = 0.0) -> float:
    """Normal gravity on the WGS84 ellipsoid, m/s², by Somigliana's formula, with the free-air height term.

    References
    ----------
    NIMA TR8350.2 (2000), World Geodetic System 1984, eq. 4-1 (Somigliana) and the first-order free-air
    correction -3.086e-6 s^-2 · h.
    """
    if not (math.isfinite(latitude_deg) and -90.0 <= latitude_deg <= 90.0):
        raise ValueError(f"latitude_deg must lie in -90..90, got {latitude_deg!r}")
    s2 = math.sin(math.radians(latitude_deg)) ** 2
    g0 = WGS84_GAMMA_E * (1.0 + WGS84_K * s2) / math.sqrt(1.0 - WGS84_E2 * s2)
    return g0 - 3.086e-6 * height_m


@dataclass(frozen=True)
class Air:
    """The air a BB flies through (SI units).

    Attributes
    ----------
    temperature_k : K.
    pressure_pa : Pa.
    relative_humidity : fraction 0..1.
    density_kgm3 : kg/m³ (CIPM-2007 unless given explicitly).
    viscosity_pas : Pa·s (Sutherland unless given explicitly).
    """

    temperature_k: float
    pressure_pa: float
    relative_humidity: float
    density_kgm3: float
    viscosity_pas: float

    @classmethod
    def from_conditions(cls, temperature_k: float, pressure_pa: float, relative_humidity: float) -> Air:
        """Air with density from CIPM-2007 and viscosity from Sutherland's law."""
        rho = moist_air_density(temperature_k, pressure_pa, relative_humidity)
        mu = sutherland_viscosity(temperature_k)
        return cls(temperature_k, pressure_pa, relative_humidity, rho, mu)

    @classmethod
    def standard(cls) -> Air:
        """Air at 20 °C, 1013.25 hPa, 50 % RH (the project's default conditions)."""
        from hopscope.shared.constants import (
            DEFAULT_HUMIDITY_PCT,
            DEFAULT_PRESSURE_HPA,
            DEFAULT_TEMPERATURE_C,
        )

        return cls.from_conditions(
            DEFAULT_TEMPERATURE_C + CELSIUS_ZERO_K, DEFAULT_PRESSURE_HPA * 100.0, DEFAULT_HUMIDITY_PCT / 100.0
        )


__all__ = [
    "STANDARD_GRAVITY_MPS2",
    "Air",
    "latitude_gravity",
    "moist_air_density",
    "saturation_vapour_pressure",
    "sutherland_viscosity",
]
