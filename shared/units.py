"""Unit conversions for the edges (command line, files, report). Inside, everything is SI.

One function per conversion, so that a factor is written once.
"""

from __future__ import annotations

import math

from .constants import CELSIUS_ZERO_K

#: International foot, m (exact, 1959 international yard and pound agreement).
FOOT_M = 0.3048


def mps_to_fps(v_mps: float) -> float:
    """Speed in m/s to feet per second."""
    return v_mps / FOOT_M


def fps_to_mps(v_fps: float) -> float:
    """Speed in feet per second to m/s."""
    return v_fps * FOOT_M


def grams_to_kg(m_g: float) -> float:
    return m_g * 1e-3


def kg_to_grams(m_kg: float) -> float:
    return m_kg * 1e3


def mm_to_m(x_mm: float) -> float:
    return x_mm * 1e-3


def m_to_mm(x_m: float) -> float:
    return x_m * 1e3


def celsius_to_kelvin(t_c: float) -> float:
    return t_c + CELSIUS_ZERO_K


def kelvin_to_celsius(t_k: float) -> float:
    return t_k - CELSIUS_ZERO_K


def hpa_to_pa(p_hpa: float) -> float:
    return p_hpa * 100.0


def pa_to_hpa(p_pa: float) -> float:
    return p_pa / 100.0


def percent_to_fraction(x_pct: float) -> float:
    return x_pct / 100.0


def radps_to_rpm(w_radps: float) -> float:
    return w_radps * 60.0 / (2.0 * math.pi)


def rpm_to_radps(w_rpm: float) -> float:
    return w_rpm * 2.0 * math.pi / 60.0


def deg_to_rad(a_deg: float) -> float:
    return math.radians(a_deg)


def rad_to_deg(a_rad: float) -> float:
    return math.degrees(a_rad)


def ms_to_s(t_ms: float) -> float:
    return t_ms * 1e-3


def s_to_ms(t_s: float) -> float:
    return t_s * 1e3


def fraction_to_percent(x: float) -> float:
    return x * 100.0
