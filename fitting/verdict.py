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
from .flyto import fly_to
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
