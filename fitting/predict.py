"""Predicted path of a fitted shot out to a range, with a ±1σ band from the fit's covariance.

The band comes from sampling the parameter covariance (exit state, lift, C_D, decay; calibration included):
each sample is flown with :func:`fitting.flight.fly` in one vectorised call, and the spread of the
samples' height and speed at each downrange distance of the nominal path is the band. Where the data
could not determine the spin decay, the fit's assumed value is used (the fit's warnings say so).

Notes
-----
World frame: x downrange, y up, metres; times since the shot's first tracked point, s.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .fitfile import FitFile
from .flight import Trajectory
from .flyto import DEFAULT_SAMPLE_S, fly_to
from .observe import RowParams, flight_for
from .results import FittedModel, FlightFit

DEFAULT_RANGE_M = 50.0
DEFAULT_SAMPLES = 300
#: Distances at which the band is computed (then interpolated onto the path).
BAND_POINTS = 80
#: Longest flight predicted, s.
MAX_TIME_S = 10.0
#: Range given to the predictor for a fitted path over the tracked span, m: far beyond any field, so the
#: span's time ends the path first.
SPAN_RANGE_M = 1e3
#: Shortest tracked span a fitted path is drawn over, s (a shot of one point still gets a path).
MIN_SPAN_S = 1e-6
#: Points of a fitted path over the tracked span.
DEFAULT_SPAN_POINTS = 300


@dataclass(frozen=True, eq=False)
class PredictedPath:
    """A predicted path (SI).

    Attributes
    ----------
    label : the shot.
    t_s : (m,) times since the shot's first tracked point, s.
    x_m, y_m, speed_mps : (m,) nominal path.
    y_sigma_m : (m,) standard deviation of the height at each x of the nominal path over the samples, m.
    speed_sigma_mps : (m,) standard deviation of the speed at each x, m/s.
    reached : "range", "ground" or "time" (what ended the path).
    n_samples : parameter samples behind the band (0: no band).
    """

    label: str
    t_s: np.ndarray
    x_m: np.ndarray
    y_m: np.ndarray
    speed_mps: np.ndarray
    y_sigma_m: np.ndarray
    speed_sigma_mps: np.ndarray
    reached: str
    n_samples: int


def fitted_model_of(fit: FlightFit | FitFile | FittedModel) -> FittedModel:
    """The FittedModel of a fit result, a fit file or a FittedModel itself."""
    if isinstance(fit, FittedModel):
        return fit
    if isinstance(fit, FlightFit | FitFile):
        return fit.fitted_model()
    raise ValueError(f"fit: expected a FlightFit, FitFile or FittedModel, got {type(fit).__name__}")


def shot_rows(fm: FittedModel, thetas: np.ndarray, shot: int) -> RowParams:
    """Row parameters of one shot for each parameter vector in ``thetas`` (n, p)."""
    return fm.layout.shot_rows(thetas, shot)


def check_shot(fm: FittedModel, shot: int) -> None:
    if not (isinstance(shot, int | np.integer) and 0 <= shot < fm.n_shots):
        raise ValueError(f"shot: expected an index 0..{fm.n_shots - 1}, got {shot!r}")


def predict_path(
    fit: FlightFit | FitFile | FittedModel,
    *,
    shot: int = 0,
    range_m: float = DEFAULT_RANGE_M,
    ground_y_m: float | None = None,
    sample_s: float = DEFAULT_SAMPLE_S,
    n_samples: int = DEFAULT_SAMPLES,
    rng: int | np.random.Generator | None = None,
    max_time_s: float | None = None,
) -> PredictedPath:
    """Predicted path of one fitted shot to ``range_m`` downrange (or the ground), with a ±1σ band.

    Parameters
    ----------
    fit : the fit (result, file or FittedModel).
    shot : which shot (index).
    range_m : downrange distance to stop at, m (world x).
    ground_y_m : height of the ground in the world frame, m (None: no ground).
    sample_s : time between output points, s.
    n_samples : parameter samples for the band (0 for none).
    rng : seed or Generator for the samples.
    max_time_s : stop after this long (s since the first tracked point) if range and ground come later;
        e.g. the tracked span, for the fitted path over the measured points.
    """
    fm = fitted_model_of(fit)
    check_shot(fm, shot)
    if not (math.isfinite(range_m) and range_m > 0):
        raise ValueError(f"range_m must be positive, got {range_m!r}")
    if not (math.isfinite(sample_s) and sample_s > 0):
        raise ValueError(f"sample_s must be positive, got {sample_s!r}")
    if n_samples < 0:
        raise ValueError(f"n_samples must be >= 0, got {n_samples!r}")
    if max_time_s is not None and not (math.isfinite(max_time_s) and max_time_s > 0):
        raise ValueError(f"max_time_s must be positive, got {max_time_s!r}")
    thetas = (
        np.vstack([fm.theta[None, :], fm.sample_theta(n_samples, rng)]) if n_samples else fm.theta[None, :]
    )
    model, launch = flight_for(fm.spec, shot_rows(fm, thetas, shot))
    path = fly_to(
        model,
        launch,
        range_m=range_m,
        ground_y_m=ground_y_m,
        duration_s=max_time_s,
        sample_s=sample_s,
        max_time_s=MAX_TIME_S,
    )
    traj, reached = path.trajectory, path.reached
    t, x, y, speed = path.t_s, path.x_m, path.y_m, path.speed_mps
    y_sig = np.zeros_like(x)
    v_sig = np.zeros_like(x)
    if n_samples and x.size > 1:
        band_x = np.linspace(x[0], x[-1], min(BAND_POINTS, x.size))
        ys, vs = heights_at(traj, band_x)
        ys_sd, vs_sd = spread_over_rows(ys[1:]), spread_over_rows(vs[1:])
        y_sig = np.interp(x, band_x, ys_sd)
        v_sig = np.interp(x, band_x, vs_sd)
    return PredictedPath(fm.labels[shot], t, x, y, speed, y_sig, v_sig, reached, n_samples)


def tracked_span_s(fit: FlightFit | FitFile, shot: int) -> float:
    """Time from a shot's first tracked point to its last fitted point, s (at least :data:`MIN_SPAN_S`)."""
    if isinstance(fit, FlightFit):
        if not (isinstance(shot, int | np.integer) and 0 <= shot < len(fit.shots)):
            raise ValueError(f"shot: expected an index 0..{len(fit.shots) - 1}, got {shot!r}")
        s = fit.shots[shot]
        last, first = float(s.residual_t_s[-1]), float(s.t0_s)
    elif isinstance(fit, FitFile):
        if not (isinstance(shot, int | np.integer) and 0 <= shot < fit.n_shots):
            raise ValueError(f"shot: expected an index 0..{fit.n_shots - 1}, got {shot!r}")
        d = fit.shot(shot)
        last, first = float(d["residuals"]["t_s"][-1]), float(d["initial"]["t_s"])
    else:
        raise ValueError(f"fit: expected a FlightFit or FitFile, got {type(fit).__name__}")
    return max(last - first, MIN_SPAN_S)


def fitted_span_path(
    fit: FlightFit | FitFile,
    *,
    shot: int = 0,
    points: int = DEFAULT_SPAN_POINTS,
    n_samples: int = 0,
    rng: int | np.random.Generator | None = None,
) -> PredictedPath:
    """The fitted path of one shot over its tracked span (first to last fitted point), with a ±1σ band
    from ``n_samples`` parameter samples (0: none), on ``points`` equal time steps.

    Parameters
    ----------
    fit : the fit (result or file; the span comes from its residuals' times).
    shot : which shot (index).
    points : time steps over the span (≥ 1).
    n_samples, rng : as for :func:`predict_path`.
    """
    if not (isinstance(points, int) and points >= 1):
        raise ValueError(f"points must be a positive integer, got {points!r}")
    span = tracked_span_s(fit, shot)
    return predict_path(
        fit,
        shot=shot,
        range_m=SPAN_RANGE_M,
        max_time_s=span,
        sample_s=span / points,
        n_samples=n_samples,
        rng=rng,
    )


def heights_at(traj: Trajectory, x_m: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Height (m) and speed (m/s) of every row of ``traj`` where it crosses each downrange ``x_m``.

    Returns two (n_rows, k) arrays, NaN where a row never reaches that distance.
    """
    n = traj.state.shape[0]
    ys = np.full((n, len(x_m)), np.nan)
    vs = np.full((n, len(x_m)), np.nan)
    for j, xj in enumerate(x_m):
        tj = traj.time_at_downrange(float(xj))
        ok = np.isfinite(tj)
        if not ok.any():
            continue
        st = traj.sample(np.where(ok, tj, 0.0)[:, None])[:, 0, :]
        ys[ok, j] = st[ok, 1]
        vs[ok, j] = np.linalg.norm(st[ok, 3:6], axis=1)
    return ys, vs


def spread_over_rows(a: np.ndarray) -> np.ndarray:
    """Column standard deviation over the finite entries (0 where fewer than two)."""
    out = np.zeros(a.shape[1])
    good = np.isfinite(a).sum(axis=0) >= 2
    if good.any():
        out[good] = np.nanstd(a[:, good], axis=0, ddof=1)
    return out
