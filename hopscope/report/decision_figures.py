"""Figures of the report's decision sections (matplotlib, Agg), drawn from the stages' results.

The prediction figure shows every shot's predicted path from the muzzle height to the ground, its ±1σ
band over the fit's covariance, the band about the line of sight the hop verdict judges, and the
engagement range. SI arrays in; centimetres and metres only on the axes.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from hopscope.fitting.forecast import ShotForecast

from .figures import BAND, MUTED, POINTS, SHOT_COLOURS, _figure, _png


def forecast_figure(
    forecasts: Sequence[ShotForecast], *, band_m: float, engagement_m: float, title: str = ""
) -> bytes:
    """Predicted paths to the ground relative to the line of sight (cm), with the band and the range."""
    fig, ax = _figure(height_in=3.6, title=title)
    for i, f in enumerate(forecasts):
        c = SHOT_COLOURS[i % len(SHOT_COLOURS)]
        dev = 100.0 * (np.asarray(f.y_m) - f.muzzle_height_m)
        sig = 100.0 * np.asarray(f.y_sigma_m)
        ax.fill_between(f.x_m, dev - sig, dev + sig, color=BAND, alpha=0.35, linewidth=0)
        ax.plot(f.x_m, dev, color=c, linewidth=1.3, label=f"{f.label}")
    for level in (band_m, -band_m):
        ax.axhline(100.0 * level, color=MUTED, linewidth=0.9, linestyle="--")
    ax.axhline(0.0, color=MUTED, linewidth=0.7, linestyle=":")
    ax.axvline(
        engagement_m,
        color=POINTS,
        linewidth=1.1,
        linestyle="--",
        label=f"engagement range {engagement_m:g} m",
    )
    lo = -100.0 * 3 * band_m
    hi = 100.0 * 3 * band_m
    ax.set_ylim(lo, hi)
    ax.set_xlabel("downrange from the muzzle (m)")
    ax.set_ylabel("height above the line of sight (cm)")
    ax.legend(fontsize=8, frameon=False, ncol=2)
    return _png(fig)


__all__ = ["forecast_figure"]
