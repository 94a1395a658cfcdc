"""The hop verdict: is the hop-up giving too little, about right, or too much backspin?

A trajectory fixes the lift force, so the natural measure is the lift-to-weight ratio at the first tracked
point, L/W = ½ ρ A C_L u² / (m g): about 1 means the BB flies flat at first; well below 1 it drops early;
well above 1 it climbs. The thresholds below are the project's own reading of what technicians call
under-hopped, flat and over-hopped.  # common practice, no published source
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from hopscope.shared.constants import STANDARD_GRAVITY_MPS2

from .air import Air
from .bb import BB
from .flight import fly
from .flyto import fly_to, time_to_range
from .forecast import DEFAULT_BAND_M, DEFAULT_MUZZLE_HEIGHT_M, launch_rows
from .observe import flight_for
from .predict import check_shot, fitted_model_of, shot_rows

#: Lift-to-weight below this: too little hop (the BB drops early).  # common practice, no published source
UNDER_HOP_BELOW = 0.80
#: Lift-to-weight above this: too much hop (the BB climbs).  # common practice, no published source
OVER_HOP_ABOVE = 1.15


def lift_to_weight(
    lift_coefficient: float,
    speed_mps: float,
    *,
    bb: BB,
    air: Air,
    gravity_mps2: float = STANDARD_GRAVITY_MPS2,
) -> float:
    """Magnus lift over weight, ½ ρ A C_L u² / (m g) (dimensionless)."""
    return bb.q_per_m(air.density_kgm3) * lift_coefficient * speed_mps**2 / gravity_mps2


@dataclass(frozen=True)
class HopVerdict:
    """Verdict on the hop setting.

    Attributes
    ----------
    category : "under-hopped", "flat" or "over-hopped"; "undetermined" when the ratio is too uncertain to say.
    ratio : lift-to-weight ratio at the first tracked point.
    ratio_stderr : its 1σ uncertainty.
    headline, detail : text for people.
    """

    category: str
    ratio: float
    ratio_stderr: float
    headline: str
    detail: str


def judge_hop(ratio: float, ratio_stderr: float) -> HopVerdict:
    """Classify a lift-to-weight ratio (with its 1σ) into a hop verdict."""
    if not (math.isfinite(ratio) and math.isfinite(ratio_stderr) and ratio_stderr >= 0):
        raise ValueError(
            f"lift-to-weight ratio and its stderr must be finite, got {ratio!r} ± {ratio_stderr!r}"
        )
    band = f"lift/weight = {ratio:.2f} ± {ratio_stderr:.2f} at the first tracked point"
    if (
        ratio_stderr > 0.5 * (OVER_HOP_ABOVE - UNDER_HOP_BELOW)
        and UNDER_HOP_BELOW - ratio_stderr < ratio < OVER_HOP_ABOVE + ratio_stderr
    ):
        return HopVerdict(
            "undetermined",
            ratio,
            ratio_stderr,
            "Hop setting undetermined",
            f"{band}; the measurement is too uncertain to judge — track a longer stretch of flight.",
        )
    if ratio < UNDER_HOP_BELOW:
        return HopVerdict(
            "under-hopped",
            ratio,
            ratio_stderr,
            "Under-hopped",
            f"{band}; the BB drops early — more hop (backspin) would flatten it.",
        )
    if ratio > OVER_HOP_ABOVE:
        return HopVerdict(
            "over-hopped",
            ratio,
            ratio_stderr,
            "Over-hopped",
            f"{band}; the BB climbs — less hop would flatten it and keep speed for range.",
        )
    return HopVerdict(
        "flat", ratio, ratio_stderr, "Flat", f"{band}; lift about balances weight near the muzzle."
    )


@dataclass(frozen=True, eq=False)
class LiftProfile:
    """Speed and lift-to-weight ratio along a fitted shot's nominal path (SI).

    Attributes
    ----------
    x_m : (m,) downrange distance, m. speed_mps : (m,) speed, m/s. lift_coefficient : (m,) C_L.
    ratio : (m,) Magnus lift over weight.
    """

    x_m: np.ndarray
    speed_mps: np.ndarray
    lift_coefficient: np.ndarray
    ratio: np.ndarray


def lift_profile(fit, *, shot: int = 0, range_m: float = 50.0, points: int = 200) -> LiftProfile:
    """Lift-to-weight ratio and speed along the nominal path of one fitted shot out to ``range_m``.

    ``fit`` is a FlightFit, FitFile or FittedModel. The lift coefficient at each point is the lift law at
    the spin ratio S = r ω / u of the integrated state.
    """
    fm = fitted_model_of(fit)
    check_shot(fm, shot)
    if not (math.isfinite(range_m) and range_m > 0):
        raise ValueError(f"range_m must be positive, got {range_m!r}")
    model, launch = flight_for(fm.spec, shot_rows(fm, fm.theta[None, :], shot))
    path = fly_to(model, launch, range_m=range_m)
    t = np.linspace(0.0, path.t_s[-1], points)
    st = path.trajectory.sample(t)[0]
    keep = st[:, 0] <= range_m
    st = st[keep]
    u_vec = st[:, 3:6] - np.asarray(model.wind_mps)
    u = np.linalg.norm(u_vec, axis=1)
    s = model.bb.radius_m * st[:, 6] / u
    cl = np.asarray(model.lift.coefficient(s), dtype=float) * np.ones_like(u)
    ratio = model.bb.q_per_m(model.air.density_kgm3) * cl * u**2 / model.gravity_mps2
    return LiftProfile(st[:, 0], np.linalg.norm(st[:, 3:6], axis=1), cl, ratio)


# ---------------------------------------------------------------------------------------------- from the path

#: Engagement range over which the path is judged, m.  # common practice, no published source
DEFAULT_ENGAGEMENT_M = 30.0
#: Samples of the fit's covariance behind the verdict's probabilities.
DEFAULT_VERDICT_SAMPLES = 100
#: Time between path samples when judging, s (at 100 m/s 5 cm of range; exits are interpolated).
JUDGE_SAMPLE_S = 5e-4
#: Below this probability for the nominal path's category the verdict is "undetermined".
MIN_VERDICT_PROBABILITY = 0.5

PATH_CATEGORIES = ("under-hopped", "flat", "over-hopped")
ADJUSTER = {
    "under-hopped": "turn the hop-up adjuster toward more hop",
    "flat": "leave the hop-up adjuster where it is",
    "over-hopped": "turn the hop-up adjuster toward less hop",
    "undetermined": "track a longer stretch of flight before turning the adjuster",
}


@dataclass(frozen=True)
class PathVerdict:
    """The hop verdict read off the predicted path, flown level from a muzzle height.

    Attributes
    ----------
    label : the shot (or ``"group"``). category : "under-hopped" (the path leaves the band below the line
        of sight within the engagement range), "over-hopped" (above), "flat" (stays inside), or
        "undetermined" (no category has probability ≥ :data:`MIN_VERDICT_PROBABILITY` over the samples).
    exit_m : where the nominal path leaves the band, m downrange (None: it stays inside).
    probabilities : fraction of the parameter samples in each of :data:`PATH_CATEGORIES`.
    adjuster : which way to turn the hop-up adjuster. engagement_m, band_m, muzzle_height_m : the convention.
    headline, detail : text for people.
    """

    label: str
    category: str
    exit_m: float | None
    probabilities: dict[str, float]
    adjuster: str
    engagement_m: float
    band_m: float
    muzzle_height_m: float
    headline: str
    detail: str


def classify_path(
    x_m: np.ndarray, dev_m: np.ndarray, *, engagement_m: float, band_m: float
) -> tuple[str, float | None]:
    """Category of one path (x downrange, dev = height − line of sight, m) and where it leaves the band."""
    x = np.asarray(x_m, dtype=float)
    dev = np.asarray(dev_m, dtype=float)
    out = np.nonzero((np.abs(dev) > band_m) & (x <= engagement_m))[0]
    if out.size == 0:
        return "flat", None
    j = int(out[0])
    level = band_m if dev[j] > 0 else -band_m
    if j == 0:
        exit_x = float(x[0])
    else:
        w = (level - dev[j - 1]) / (dev[j] - dev[j - 1])
        exit_x = float(x[j - 1] + w * (x[j] - x[j - 1]))
    return ("over-hopped" if dev[j] > 0 else "under-hopped"), exit_x


def _categories(
    fm, thetas: np.ndarray, shot: int, *, muzzle_height_m: float, engagement_m: float, band_m: float
) -> list[tuple[str, float | None]]:
    rows = launch_rows(fm, thetas, shot, muzzle_height_m=muzzle_height_m, elevation_rad=0.0)
    model, launch = flight_for(fm.spec, rows)
    traj = fly(model, launch, time_to_range(model, launch, engagement_m))
    t = np.arange(0.0, traj.t_s[-1], JUDGE_SAMPLE_S)
    st = traj.sample(t)
    out = []
    for i in range(st.shape[0]):
        x, y = st[i, :, 0], st[i, :, 1]
        # the ground ends the path: below the ground counts as below the band
        y = np.where(np.maximum.accumulate(y <= 0.0), -np.inf, y)
        out.append(classify_path(x, y - muzzle_height_m, engagement_m=engagement_m, band_m=band_m))
    return out


def _verdict(label, cats, *, engagement_m, band_m, muzzle_height_m) -> PathVerdict:
    nominal, exit_m = cats[0]
    rest = [c for c, _ in cats[1:]] or [nominal]
    probs = {c: rest.count(c) / len(rest) for c in PATH_CATEGORIES}
    category = nominal if probs[nominal] >= MIN_VERDICT_PROBABILITY else "undetermined"
    where = "" if exit_m is None else f", leaving it at {exit_m:.1f} m"
    conv = f"flown level from {muzzle_height_m:g} m, judged within ±{band_m:g} m of the line of sight to {engagement_m:g} m"
    heads = {
        "under-hopped": "Under-hopped: the path drops out of the band",
        "over-hopped": "Over-hopped: the path climbs out of the band",
        "flat": "Flat: the path stays in the band",
        "undetermined": "Hop setting undetermined",
    }
    detail = (
        f"{conv}{where} (probability {probs[nominal]:.0%} over the fit's uncertainty); {ADJUSTER[category]}"
    )
    return PathVerdict(
        label, category, exit_m, probs, ADJUSTER[category], engagement_m, band_m, muzzle_height_m,
        heads[category], detail,
    )  # fmt: skip


def judge_hop_path(
    fit,
    *,
    shot: int = 0,
    engagement_m: float = DEFAULT_ENGAGEMENT_M,
    band_m: float | None = None,
    muzzle_height_m: float | None = None,
    n_samples: int = DEFAULT_VERDICT_SAMPLES,
    rng: int | np.random.Generator | None = None,
) -> PathVerdict:
    """Hop verdict of one fitted shot from its predicted path (see :class:`PathVerdict`).

    Defaults: band ±:data:`fitting.forecast.DEFAULT_BAND_M`, muzzle height
    :data:`fitting.forecast.DEFAULT_MUZZLE_HEIGHT_M`.
    """
    band = DEFAULT_BAND_M if band_m is None else band_m
    height = DEFAULT_MUZZLE_HEIGHT_M if muzzle_height_m is None else muzzle_height_m
    fm = fitted_model_of(fit)
    check_shot(fm, shot)
    _check_convention(engagement_m, band, height)
    thetas = (
        np.vstack([fm.theta[None, :], fm.sample_theta(n_samples, rng)]) if n_samples else fm.theta[None, :]
    )
    cats = _categories(fm, thetas, shot, muzzle_height_m=height, engagement_m=engagement_m, band_m=band)
    return _verdict(fm.labels[shot], cats, engagement_m=engagement_m, band_m=band, muzzle_height_m=height)


def judge_group_hop_path(
    fit,
    *,
    engagement_m: float = DEFAULT_ENGAGEMENT_M,
    band_m: float | None = None,
    muzzle_height_m: float | None = None,
    n_samples: int = DEFAULT_VERDICT_SAMPLES,
    rng: int | np.random.Generator | None = None,
) -> tuple[PathVerdict, tuple[PathVerdict, ...]]:
    """The group's verdict (its mean shot: the mean of the shots' own parameters) and each shot's."""
    band = DEFAULT_BAND_M if band_m is None else band_m
    height = DEFAULT_MUZZLE_HEIGHT_M if muzzle_height_m is None else muzzle_height_m
    fm = fitted_model_of(fit)
    _check_convention(engagement_m, band, height)
    gen = np.random.default_rng(rng)
    per_shot = tuple(
        judge_hop_path(fm, shot=i, engagement_m=engagement_m, band_m=band, muzzle_height_m=height,
                       n_samples=n_samples, rng=gen)
        for i in range(fm.n_shots)
    )  # fmt: skip
    lay = fm.layout
    thetas = (
        np.vstack([fm.theta[None, :], fm.sample_theta(n_samples, gen)]) if n_samples else fm.theta[None, :]
    )
    own = thetas[:, lay.own_block].reshape(thetas.shape[0], fm.n_shots, -1).mean(axis=1)
    thetas[:, lay.own(0)] = own
    cats = _categories(fm, thetas, 0, muzzle_height_m=height, engagement_m=engagement_m, band_m=band)
    group = _verdict("group", cats, engagement_m=engagement_m, band_m=band, muzzle_height_m=height)
    return group, per_shot


def _check_convention(engagement_m: float, band_m: float, muzzle_height_m: float) -> None:
    for name, v in (("engagement_m", engagement_m), ("band_m", band_m), ("muzzle_height_m", muzzle_height_m)):
        if not (math.isfinite(v) and v > 0):
            raise ValueError(f"{name} must be positive, got {v!r}")
