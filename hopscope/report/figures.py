"""Figures of the report, drawn with matplotlib (Agg) from plain arrays, returned as PNG bytes.

Colours and layout are the project's own. Every function takes SI arrays and converts only for labels.
"""

from __future__ import annotations

import io
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

INK = "#1d2a33"
ACCENT = "#2f6f5e"
BAND = "#9cc7b8"
POINTS = "#b0561f"
MUTED = "#8797a1"
SHOT_COLOURS = ("#2f6f5e", "#b0561f", "#3d5a99", "#8c4f8f", "#7a7a1f", "#1f7a7a")


@dataclass(frozen=True)
class ShotCurves:
    """What the figures need of one shot (SI): measured points, fitted path and its ±1σ band."""

    label: str
    t_s: np.ndarray
    x_m: np.ndarray
    y_m: np.ndarray
    sigma_m: np.ndarray
    residual_x_m: np.ndarray
    residual_y_m: np.ndarray
    fit_x_m: np.ndarray
    fit_y_m: np.ndarray
    fit_y_lo_m: np.ndarray
    fit_y_hi_m: np.ndarray


def _figure(width_in: float = 9.6, height_in: float = 3.8, title: str = ""):
    import matplotlib

    matplotlib.use("Agg", force=True)
    import matplotlib.pyplot as plt

    fig, ax = plt.subplots(figsize=(width_in, height_in), dpi=110)
    ax.grid(True, color="#e3e8eb", linewidth=0.8)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    if title:
        ax.set_title(title, loc="left", fontsize=11, color=INK)
    return fig, ax


def _png(fig) -> bytes:
    import matplotlib.pyplot as plt

    buf = io.BytesIO()
    fig.tight_layout()
    fig.savefig(buf, format="png")
    plt.close(fig)
    return buf.getvalue()


def plane_figure(shots: Sequence[ShotCurves], *, title: str = "") -> bytes:
    """Measured points on the flight plane with the fitted path and its ±1σ band (height in mm)."""
    fig, ax = _figure(title=title)
    for i, s in enumerate(shots):
        c = SHOT_COLOURS[i % len(SHOT_COLOURS)]
        ax.fill_between(s.fit_x_m, s.fit_y_lo_m * 1e3, s.fit_y_hi_m * 1e3, color=BAND, alpha=0.6, linewidth=0)
        ax.plot(s.fit_x_m, s.fit_y_m * 1e3, color=c, linewidth=1.4, label=f"{s.label}: fitted path")
        ax.errorbar(
            s.x_m,
            s.y_m * 1e3,
            yerr=s.sigma_m * 1e3,
            fmt="o",
            ms=2.5,
            color=POINTS,
            ecolor=MUTED,
            elinewidth=0.6,
            label=f"{s.label}: tracked",
        )
    ax.set_xlabel("downrange x (m)")
    ax.set_ylabel("height y (mm)")
    ax.legend(fontsize=8, loc="best", frameon=False)
    return _png(fig)


def residual_figure(shots: Sequence[ShotCurves], *, title: str = "") -> bytes:
    """Residuals (tracked − fitted) against time, in mm, with the points' ±1σ."""
    fig, ax = _figure(height_in=3.2, title=title)
    for i, s in enumerate(shots):
        c = SHOT_COLOURS[i % len(SHOT_COLOURS)]
        t_ms = (s.t_s - s.t_s[0]) * 1e3
        ax.plot(t_ms, s.residual_x_m * 1e3, "o", ms=2.5, color=c, alpha=0.55, label=f"{s.label}: along x")
        ax.plot(t_ms, s.residual_y_m * 1e3, "s", ms=2.5, color=c, label=f"{s.label}: along y")
        ax.fill_between(t_ms, -s.sigma_m * 1e3, s.sigma_m * 1e3, color="#eef2f4", zorder=0)
    ax.axhline(0.0, color=INK, linewidth=0.8)
    ax.set_xlabel("time since first tracked point (ms)")
    ax.set_ylabel("residual (mm)")
    ax.legend(fontsize=8, ncol=2, frameon=False)
    return _png(fig)


def speed_lift_figure(
    distance_m: np.ndarray, speed_mps: np.ndarray, lift_to_weight: np.ndarray, *, title: str = ""
) -> bytes:
    """Speed (m/s, top) and lift-to-weight ratio (bottom) against distance flown (m), for the first shot."""
    import matplotlib

    matplotlib.use("Agg", force=True)
    import matplotlib.pyplot as plt

    fig, (ax1, ax2) = plt.subplots(2, 1, figsize=(9.6, 4.4), dpi=110, sharex=True)
    for ax in (ax1, ax2):
        ax.grid(True, color="#e3e8eb", linewidth=0.8)
        for side in ("top", "right"):
            ax.spines[side].set_visible(False)
    if title:
        ax1.set_title(title, loc="left", fontsize=11, color=INK)
    ax1.plot(distance_m, speed_mps, color=ACCENT, linewidth=1.6)
    ax1.set_ylabel("speed (m/s)")
    ax2.plot(distance_m, lift_to_weight, color=POINTS, linewidth=1.6)
    ax2.axhline(1.0, color=MUTED, linewidth=0.8, linestyle=":")
    ax2.set_ylabel("lift / weight")
    ax2.set_xlabel("downrange x (m)")
    return _png(fig)


def range_figure(
    x_m: np.ndarray,
    y_m: np.ndarray,
    y_lo_m: np.ndarray,
    y_hi_m: np.ndarray,
    *,
    launch_height_m: float,
    title: str = "",
) -> bytes:
    """Predicted path out to range, with its ±1σ band, relative to the launch height (cm)."""
    fig, ax = _figure(height_in=3.4, title=title)
    rel = 100.0 * (np.asarray(y_m) - launch_height_m)
    ax.fill_between(
        x_m,
        100.0 * (y_lo_m - launch_height_m),
        100.0 * (y_hi_m - launch_height_m),
        color=BAND,
        alpha=0.6,
        linewidth=0,
        label="±1σ",
    )
    ax.plot(x_m, rel, color=ACCENT, linewidth=1.6, label="predicted path")
    ax.axhline(0.0, color=MUTED, linewidth=0.8, linestyle=":")
    ax.set_xlabel("downrange x (m)")
    ax.set_ylabel("height above first point (cm)")
    ax.legend(fontsize=8, frameon=False)
    return _png(fig)


def spread_figure(
    x_m: np.ndarray,
    fraction_inside: np.ndarray,
    *,
    hit_fraction: float,
    target_diameter_m: float,
    effective_range_m: float | None,
    title: str = "",
) -> bytes:
    """Fraction of simulated shots inside the target circle against distance, with the effective range."""
    fig, ax = _figure(height_in=3.2, title=title)
    ax.plot(x_m, 100.0 * np.asarray(fraction_inside), color=ACCENT, linewidth=1.6)
    ax.axhline(100.0 * hit_fraction, color=MUTED, linewidth=0.8, linestyle=":")
    if effective_range_m is not None:
        ax.axvline(
            effective_range_m,
            color=POINTS,
            linewidth=1.2,
            linestyle="--",
            label=f"effective range {effective_range_m:.1f} m",
        )
        ax.legend(fontsize=8, frameon=False)
    ax.set_ylim(0, 102)
    ax.set_xlabel("downrange x (m)")
    ax.set_ylabel(f"shots inside {100 * target_diameter_m:.0f} cm (%)")
    return _png(fig)
