"""Prediction with uncertainty: a fitted shot fired from a muzzle height, flown to the ground.

The shot's fitted state (speed, lift coefficient C_L0, the shared C_D and spin decay) is launched from the
muzzle at (x, y) = (0, ``muzzle_height_m``) above level ground (y = 0) at a chosen elevation (default 0:
barrel level, parallel to the line of sight, which is the horizontal line through the muzzle). Figures of
the path:

- ground range and time of flight (where it comes down to y = 0);
- flat distance: how far the path stays within ±``band_m`` of the line of sight (from the muzzle on);
- maximum rise above the line of sight;
- speed and energy at a given distance;
- maximum range over elevation (:func:`max_range_over_elevation`).

Each figure's uncertainty is the standard deviation over parameter vectors sampled from the fit's
covariance (calibration included), all flown in one vectorised call; the value is the nominal path's.

Notes
-----
World frame of the prediction: x downrange from the muzzle, y up from the ground, metres; t since launch.
The fitted state is that of the shot's first tracked point, moved to the muzzle (its speed there is a
little below the muzzle speed: :mod:`fitting.muzzle`).
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass

import numpy as np

from .fitfile import FitFile
from .flight import Trajectory, fly
from .flyto import fly_shots_to
from .observe import RowParams, flight_for
from .predict import check_shot, fitted_model_of, heights_at, spread_over_rows
from .results import Estimate, FittedModel, FlightFit

#: Muzzle height above the ground, m: a shoulder-height shot.  # common practice, no published source
DEFAULT_MUZZLE_HEIGHT_M = 1.5
#: Half-height of the band around the line of sight, m: a torso-sized target's half height.
#: # common practice, no published source
DEFAULT_BAND_M = 0.15
DEFAULT_SAMPLES = 200
#: Time between path samples used for the figures, s (at 100 m/s 5 cm of range; crossings are then
#: interpolated linearly, far below 1 cm in error).
FIGURE_SAMPLE_S = 5e-4
#: The rows are flown this much longer than the nominal path takes to reach the ground.
TIME_MARGIN = 1.5
#: Elevations scanned for the maximum range, rad (−2° to 30° in 1° steps).
ELEVATION_SCAN_RAD = np.radians(np.arange(-2.0, 30.0 + 1e-9, 1.0))
#: Parameter samples behind the maximum range's error bar.
MAX_RANGE_SAMPLES = 20


@dataclass(frozen=True)
class PathFigures:
    """Figures of one path (SI); NaN where the path does not get there (e.g. never reaches ``distance``)."""

    ground_range_m: float
    time_of_flight_s: float
    flat_distance_m: float
    max_rise_m: float
    speed_at_mps: float
    energy_at_j: float


@dataclass(frozen=True, eq=False)
class ShotForecast:
    """The predicted path of one shot from a muzzle height, with its figures' uncertainties (SI).

    Attributes
    ----------
    label : the shot. muzzle_height_m, elevation_rad, band_m, distance_m : the question asked.
    t_s, x_m, y_m, speed_mps : (m,) the nominal path to the ground.
    y_sigma_m : (m,) SD of the height at each x of the nominal path over the samples.
    ground_range_m, time_of_flight_s, flat_distance_m, max_rise_m, speed_at_mps, energy_at_j : estimates
        (value: the nominal path; stderr: SD over the samples; None when the nominal path does not get there).
    n_samples : samples behind the error bars.
    """

    label: str
    muzzle_height_m: float
    elevation_rad: float
    band_m: float
    distance_m: float | None
    t_s: np.ndarray
    x_m: np.ndarray
    y_m: np.ndarray
    speed_mps: np.ndarray
    y_sigma_m: np.ndarray
    ground_range_m: Estimate
    time_of_flight_s: Estimate
    flat_distance_m: Estimate
    max_rise_m: Estimate
    speed_at_mps: Estimate
    energy_at_j: Estimate
    n_samples: int


def launch_rows(
    fm: FittedModel,
    thetas: np.ndarray,
    shot: int,
    *,
    muzzle_height_m: float,
    elevation_rad: float | np.ndarray,
) -> RowParams:
    """Rows of one shot's parameters (one per vector of ``thetas``), launched from (0, muzzle height)."""
    r = fm.layout.shot_rows(thetas, shot)
    n = r.speed_mps.size
    el = np.broadcast_to(np.asarray(elevation_rad, dtype=float), (n,)).copy()
    return RowParams(np.zeros(n), np.full(n, muzzle_height_m), r.speed_mps, el, r.lift_coefficient, r.drag_param, r.decay_param)  # fmt: skip


def path_figures(
    traj: Trajectory,
    *,
    muzzle_height_m: float,
    band_m: float,
    distance_m: float | None,
    mass_kg: float,
    sample_s: float = FIGURE_SAMPLE_S,
) -> list[PathFigures]:
    """The figures of every row of ``traj`` (launched at y = muzzle height, ground at y = 0)."""
    t_g = traj.time_at_height(0.0)
    t = np.arange(0.0, traj.t_s[-1], sample_s)
    st = traj.sample(t)  # (n, m, 7)
    t_d = traj.time_at_downrange(distance_m) if distance_m is not None else np.full(t_g.shape, np.nan)
    out = []
    for i in range(st.shape[0]):
        tg = float(t_g[i])
        if not math.isfinite(tg):
            nan = math.nan
            out.append(PathFigures(nan, nan, nan, nan, nan, nan))
            continue
        ground = _state_at(traj, i, tg)
        before = t < tg
        x, dev = st[i, before, 0], st[i, before, 1] - muzzle_height_m
        x = np.append(x, ground[0])
        dev = np.append(dev, ground[1] - muzzle_height_m)
        out_of_band = np.nonzero(np.abs(dev) > band_m)[0]
        if out_of_band.size == 0:
            flat = float(ground[0])
        else:
            j = int(out_of_band[0])
            level = band_m if dev[j] > 0 else -band_m
            w = (level - dev[j - 1]) / (dev[j] - dev[j - 1]) if j > 0 else 0.0
            flat = float(x[j - 1] + w * (x[j] - x[j - 1])) if j > 0 else float(x[0])
        td = float(t_d[i])
        if math.isfinite(td) and td <= tg:
            v = float(np.linalg.norm(_state_at(traj, i, td)[3:6]))
        else:
            v = math.nan
        out.append(
            PathFigures(float(ground[0]), tg, flat, float(max(0.0, np.max(dev))), v, 0.5 * mass_kg * v * v)
        )
    return out


def _state_at(traj: Trajectory, row: int, t_s: float) -> np.ndarray:
    return Trajectory(traj.t_s, traj.state[row : row + 1], traj.rate[row : row + 1]).sample(np.array([t_s]))[
        0, 0
    ]


def forecast_shot(
    fit: FlightFit | FitFile | FittedModel,
    *,
    shot: int = 0,
    muzzle_height_m: float = DEFAULT_MUZZLE_HEIGHT_M,
    elevation_rad: float = 0.0,
    band_m: float = DEFAULT_BAND_M,
    distance_m: float | None = None,
    n_samples: int = DEFAULT_SAMPLES,
    rng: int | np.random.Generator | None = None,
    sample_s: float = 1e-3,
) -> ShotForecast:
    """Predicted path of one fitted shot from ``muzzle_height_m`` (m) to the ground, with uncertainties.

    Parameters
    ----------
    fit : the fit (result, file or FittedModel). shot : which shot.
    muzzle_height_m : muzzle above the ground, m (> 0). elevation_rad : barrel elevation, rad.
    band_m : half-height of the band around the line of sight, m (> 0), for the flat distance.
    distance_m : where to give speed and energy, m downrange of the muzzle (None: not asked).
    n_samples : parameter samples for the error bars (0: none). rng : seed or Generator.
    sample_s : time between points of the returned path, s.
    """
    fm = fitted_model_of(fit)
    check_shot(fm, shot)
    for name, v in (("muzzle_height_m", muzzle_height_m), ("band_m", band_m)):
        if not (math.isfinite(v) and v > 0):
            raise ValueError(f"{name} must be positive, got {v!r}")
    if distance_m is not None and not (math.isfinite(distance_m) and distance_m > 0):
        raise ValueError(f"distance_m must be positive, got {distance_m!r}")
    if not (math.isfinite(elevation_rad) and abs(elevation_rad) < math.pi / 2):
        raise ValueError(f"elevation_rad must lie strictly between -π/2 and π/2, got {elevation_rad!r}")
    if n_samples < 0:
        raise ValueError(f"n_samples must be >= 0, got {n_samples!r}")
    thetas = (
        np.vstack([fm.theta[None, :], fm.sample_theta(n_samples, rng)]) if n_samples else fm.theta[None, :]
    )
    rows = launch_rows(fm, thetas, shot, muzzle_height_m=muzzle_height_m, elevation_rad=elevation_rad)
    nominal = fly_shots_to(fm.spec, _row(rows, 0), ground_y_m=0.0, sample_s=sample_s)
    model, launch = flight_for(fm.spec, rows)
    traj = fly(model, launch, TIME_MARGIN * float(nominal.t_s[-1]))
    figs = path_figures(traj, muzzle_height_m=muzzle_height_m, band_m=band_m, distance_m=distance_m, mass_kg=fm.spec.bb.mass_kg)  # fmt: skip
    y_sig = np.zeros_like(nominal.x_m)
    if n_samples:
        grid = np.linspace(0.0, float(nominal.x_m[-1]), 60)
        ys, _ = heights_at(traj, grid)
        y_sig = np.interp(nominal.x_m, grid, spread_over_rows(ys[1:]))

    def est(name: str) -> Estimate:
        values = np.array([getattr(f, name) for f in figs])
        v0 = float(values[0])
        if not math.isfinite(v0):
            return Estimate(None, None)
        rest = values[1:][np.isfinite(values[1:])]
        sd = float(np.std(rest, ddof=1)) if rest.size >= 2 else None
        return Estimate(v0, sd, sd, None)

    return ShotForecast(
        fm.labels[shot], float(muzzle_height_m), float(elevation_rad), float(band_m), distance_m,
        nominal.t_s, nominal.x_m, nominal.y_m, nominal.speed_mps, y_sig,
        est("ground_range_m"), est("time_of_flight_s"), est("flat_distance_m"), est("max_rise_m"),
        est("speed_at_mps"), est("energy_at_j"), n_samples,
    )  # fmt: skip


def max_range_over_elevation(
    fit: FlightFit | FitFile | FittedModel,
    *,
    shot: int = 0,
    muzzle_height_m: float = DEFAULT_MUZZLE_HEIGHT_M,
    elevations_rad: np.ndarray = ELEVATION_SCAN_RAD,
    n_samples: int = MAX_RANGE_SAMPLES,
    rng: int | np.random.Generator | None = None,
) -> tuple[Estimate, Estimate]:
    """The greatest ground range over the scanned elevations and the elevation that gives it (rad).

    The value is the nominal shot's; the stderr the SD over parameter samples (each at its own best
    elevation). Returns (range m, elevation rad).
    """
    fm = fitted_model_of(fit)
    check_shot(fm, shot)
    el = np.asarray(elevations_rad, dtype=float)
    if el.ndim != 1 or el.size < 3 or not np.all(np.abs(el) < math.pi / 2):
        raise ValueError("elevations_rad: expected at least three elevations strictly between -π/2 and π/2")
    thetas = (
        np.vstack([fm.theta[None, :], fm.sample_theta(n_samples, rng)]) if n_samples else fm.theta[None, :]
    )
    k = thetas.shape[0]
    rows = launch_rows(fm, np.repeat(thetas, el.size, axis=0), shot, muzzle_height_m=muzzle_height_m, elevation_rad=np.tile(el, k))  # fmt: skip
    high = fly_shots_to(fm.spec, _row(rows, int(np.argmax(el))), ground_y_m=0.0)
    model, launch = flight_for(fm.spec, rows)
    traj = fly(model, launch, TIME_MARGIN * float(high.t_s[-1]))
    t_g = traj.time_at_height(0.0)
    xg = np.array([_state_at(traj, i, t)[0] if math.isfinite(t) else np.nan for i, t in enumerate(t_g)])
    xg = xg.reshape(k, el.size)
    best = np.nanargmax(xg, axis=1)
    ranges = xg[np.arange(k), best]
    best_el = el[best]
    sd_r = float(np.std(ranges[1:], ddof=1)) if k > 2 else None
    sd_e = float(np.std(best_el[1:], ddof=1)) if k > 2 else None
    return Estimate(float(ranges[0]), sd_r, sd_r, None), Estimate(float(best_el[0]), sd_e, sd_e, None)


def _row(rows: RowParams, i: int) -> RowParams:
    """Row ``i`` alone."""
    return RowParams(
        **{f.name: np.asarray(getattr(rows, f.name))[i : i + 1] for f in dataclasses.fields(rows)}
    )


__all__ = [
    "DEFAULT_BAND_M",
    "DEFAULT_MUZZLE_HEIGHT_M",
    "PathFigures",
    "ShotForecast",
    "forecast_shot",
    "launch_rows",
    "max_range_over_elevation",
    "path_figures",
]
