"""Physical constants and project defaults, each with its unit and source.

Every constant used by the flight physics lives here, once.
"""

from __future__ import annotations

#: Standard acceleration of gravity, m/s². Source: 3rd CGPM (1901), exact by definition.
STANDARD_GRAVITY_MPS2 = 9.80665

#: Median absolute deviation → standard deviation for Gaussian noise, σ = MAD / Φ⁻¹(3/4) = 1.4826 · MAD.
#: Source: Hampel (1974), J. Am. Stat. Assoc. 69:383; Rousseeuw & Croux (1993), J. Am. Stat. Assoc. 88:1273.
MAD_TO_SIGMA = 1.4826

#: Molar gas constant, J/(mol·K), the value used inside the CIPM-2007 formula.
#: Source: Picard, Davis, Gläser & Fujii (2008), Metrologia 45:149, Table 1.
CIPM_GAS_CONSTANT = 8.314472

#: Molar mass of water, kg/mol. Source: Picard et al. (2008), Table 1.
MOLAR_MASS_WATER_KG = 18.01528e-3

#: Mole fraction of CO2 assumed in laboratory air (the CIPM-2007 reference value).
DEFAULT_CO2_MOLE_FRACTION = 0.0004

#: Zero of the Celsius scale, K (exact).
CELSIUS_ZERO_K = 273.15

#: Sutherland's law for air: reference viscosity constant (Pa·s·K^-1/2) and Sutherland temperature (K).
#: Source: the classic air fit mu = C1 T^1.5 / (T + S) as tabulated in the U.S. Standard Atmosphere (1976),
#: eq. 51, C1 = 1.458e-6, S = 110.4 K (read in several public implementations that cite eq. 51; the
#: document itself not read).
SUTHERLAND_C1 = 1.458e-6
SUTHERLAND_S_K = 110.4

#: ICAO standard atmosphere at sea level: temperature K, pressure Pa, density kg/m³.
#: Source: ICAO Doc 7488 (1993).  # from memory (the same values appear in public ISA implementations)
ISA_SEA_LEVEL_T_K = 288.15
ISA_SEA_LEVEL_P_PA = 101325.0
ISA_SEA_LEVEL_RHO_KGM3 = 1.2250

#: WGS84 normal gravity (Somigliana) constants: equatorial gravity m/s², k, first eccentricity squared.
#: Source: NIMA TR8350.2 (2000), "Department of Defense World Geodetic System 1984", eq. 4-1; the values
#: read in several independent public implementations of it (the document itself not read).
WGS84_GAMMA_E = 9.7803253359
WGS84_K = 0.00193185265241
WGS84_E2 = 0.00669437999013

#: Default 6 mm-class BB diameter, m.  # common practice, no published source
DEFAULT_BB_DIAMETER_M = 5.95e-3

#: Default air for the command line when the user gives none: 20 °C, 1013.25 hPa, 50 % RH.
#: (Reasonable indoor conditions; the report says when defaults were used.)
DEFAULT_TEMPERATURE_C = 20.0
DEFAULT_PRESSURE_HPA = 1013.25
DEFAULT_HUMIDITY_PCT = 50.0

#: Speeds accepted anywhere as a plausible BB speed, m/s (exclusive bounds).
MIN_PLAUSIBLE_SPEED_MPS = 0.0
MAX_PLAUSIBLE_SPEED_MPS = 300.0
