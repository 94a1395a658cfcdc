"""Markings, aliases and the priors that choose between them.

How a BB is marked fixes the flicker cycles per turn (:data:`MARKINGS`); a flicker sampled below twice its
frequency is seen folded, so every spin rate in a plausible band that gives the observed flicker is a
candidate (:func:`alias_frequencies`), and one is picked only with a stated prior (:class:`SpinPrior`: the
spin implied by the fitted lift under a named lift law, :func:`spin_prior_from_lift`). The exposure's
smoothing of a flicker is :func:`exposure_attenuation`. SI: Hz, rad/s. Part of :mod:`fitting.spin`.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np

from hopscope.shared.parse import is_finite_number

from .laws import LinearLift, SaturatingLift

#: A prior picks an alias only when the best candidate is this many times more likely than the next one.
#: # common practice, no published source
PRIOR_ODDS_MIN = 100.0
#: ... and lies within this many combined standard deviations of the prior.
PRIOR_MATCH_Z = 3.0
#: Relative uncertainty allowed for a published lift relation applied to a BB (a 6 mm plastic sphere is not
#: the ball the relation was measured on).  # common practice, no published source
DEFAULT_LIFT_LAW_REL_SIGMA = 0.25


# ---------------------------------------------------------------------------------------------- markings


@dataclass(frozen=True)
class Marking:
    """How a BB is marked and seen, and how many flicker cycles one turn of the ball makes.

    Attributes
    ----------
    name : key in :data:`MARKINGS`.
    cycles_per_turn : flicker cycles per revolution (0: this marking does not flicker).
    description : the geometry in words.
    """

    name: str
    cycles_per_turn: int
    description: str


#: The markings the estimator knows. A BB's backspin axis is perpendicular to the flight plane, so a camera
#: looking square at the flight plane (the project's set-up) looks along the spin axis.
#:
#: Thinking it through for a ball half dark (the dividing great circle contains the spin axis):
#:
#: - axis toward the camera: the camera sees a disk, half dark, whose dividing line turns once per turn.
#:   Under light along the line of sight the total brightness does not change at all; under light from one
#:   side (from above, as usual) the bright half is lit best once per turn: one cycle per turn.
#: - axis in the image plane: the bright hemisphere faces the camera once per turn (all bright, then half,
#:   then all dark, then half): one cycle per turn.
#:
#: Two cycles per turn come from a marking that looks the same after half a turn: a dark stripe along a
#: great circle through the axis (axis in the image plane: the stripe is seen as a dark band across the
#: middle of the disk twice per turn, when its plane holds the line of sight, and edge-on at the limb in
#: between; axis toward the camera: a dark diameter that turns, lit from one side), or two opposite
#: quarters dark. A ball half dark across its equator (dividing circle perpendicular to the axis)
#: seen along the axis does not flicker at all. A strongly non-sinusoidal flicker also has a second harmonic;
#: the periodogram's highest peak is the fundamental unless the marking is nearly symmetric under a half
#: turn, which is what the stripe markings say.
MARKINGS: dict[str, Marking] = {
    "half-axis-toward-camera": Marking(
        "half-axis-toward-camera",
        1,
        "half dark (dividing circle through the spin axis), axis along the line of sight, lit from one side",
    ),
    "half-axis-in-image": Marking(
        "half-axis-in-image",
        1,
        "half dark (dividing circle through the spin axis), axis in the image plane",
    ),
    "stripe-axis-toward-camera": Marking(
        "stripe-axis-toward-camera",
        2,
        "dark stripe along a great circle through the spin axis, axis along the line of sight, lit from one side",
    ),
    "stripe-axis-in-image": Marking(
        "stripe-axis-in-image",
        2,
        "dark stripe along a great circle through the spin axis, axis in the image plane",
    ),
    "none": Marking("none", 0, "unmarked BB: its brightness does not follow the spin"),
}

#: Default marking: a half-dark BB seen by a camera square to the flight plane, so along the backspin
#: axis, lit from above (the project's set-up and the ``lane-spin`` scene): one flicker cycle per turn.
DEFAULT_MARKING = "half-axis-toward-camera"


def marking_named(name: str) -> Marking:
    """The :class:`Marking` called ``name``; ``ValueError`` naming the choices for any other."""
    if name not in MARKINGS:
        raise ValueError(f"marking: unknown marking {name!r}; choose one of {sorted(MARKINGS)}")
    return MARKINGS[name]


# ---------------------------------------------------------------------------------------------- results


# ---------------------------------------------------------------------------------------------- priors


@dataclass(frozen=True)
class SpinPrior:
    """What is known about the spin rate before the flicker is read, to choose between aliases.

    Attributes
    ----------
    rate_radps : expected spin rate, rad/s (> 0).
    stderr_radps : its 1σ uncertainty, rad/s (> 0).
    source : where it comes from, in words (shown in the result's ``method``).
    """

    rate_radps: float
    stderr_radps: float
    source: str

    def __post_init__(self) -> None:
        for name in ("rate_radps", "stderr_radps"):
            value = getattr(self, name)
            if not (math.isfinite(value) and value > 0):
                raise ValueError(f"prior {name} must be positive and finite, got {value!r}")
        if not self.source:
            raise ValueError("prior source must name where the prior comes from")


# ---------------------------------------------------------------------------------------------- aliases


def exposure_attenuation(frequency_hz, exposure_s: float) -> np.ndarray:
    """|sinc(f·T_e)|: how much integrating over the exposure T_e (s) shrinks a flicker at f (Hz).

    A sinusoid averaged over a window of length T_e centred on the sample time keeps its phase and is
    scaled by sin(π f T_e)/(π f T_e) (the Fourier transform of a box; numpy's normalised sinc).
    """
    return np.abs(np.sinc(np.asarray(frequency_hz, dtype=float) * exposure_s))


def alias_frequencies(flicker_hz: float, sample_rate_hz: float, f_lo_hz: float, f_hi_hz: float) -> np.ndarray:
    """Every true frequency in [f_lo, f_hi] (Hz) that uniform sampling at ``sample_rate_hz`` shows as
    ``flicker_hz``: f_obs + k·f_s (k ≥ 0) and k·f_s − f_obs (k ≥ 1), ascending."""
    k_max = int(math.ceil((f_hi_hz + flicker_hz) / sample_rate_hz)) + 1
    k = np.arange(0, k_max + 1)
    cand = np.concatenate([flicker_hz + k * sample_rate_hz, k[1:] * sample_rate_hz - flicker_hz])
    cand = cand[(cand >= f_lo_hz) & (cand <= f_hi_hz)]
    return np.unique(cand)


# ---------------------------------------------------------------------------------------------- estimator


def pick_with_prior(rates: np.ndarray, sigma: float, prior: SpinPrior) -> tuple[int | None, str]:
    """Index of the candidate ``rates`` (rad/s, each with 1σ ``sigma``) the prior picks, or None with why:
    within :data:`PRIOR_MATCH_Z` combined σ of the prior and :data:`PRIOR_ODDS_MIN` times likelier than
    the next candidate."""
    z = np.abs(rates - prior.rate_radps) / math.hypot(sigma, prior.stderr_radps)
    order = np.argsort(z)
    best = int(order[0])
    if z[best] > PRIOR_MATCH_Z:
        return None, (
            f"the prior {prior.rate_radps:.4g} ± {prior.stderr_radps:.2g} rad/s ({prior.source}) matches no "
            f"candidate within {PRIOR_MATCH_Z:g} σ"
        )
    if rates.size > 1:
        second = int(order[1])
        log_odds = 0.5 * (z[second] ** 2 - z[best] ** 2)
        if log_odds < math.log(PRIOR_ODDS_MIN):
            return None, (
                f"the prior {prior.rate_radps:.4g} ± {prior.stderr_radps:.2g} rad/s ({prior.source}) does not "
                f"separate the candidates {rates[best]:.4g} and {rates[second]:.4g} rad/s"
            )
    return best, ""


def spin_prior_from_lift(
    lift_coefficient: float,
    lift_stderr: float,
    *,
    speed_mps: float,
    radius_m: float,
    law: LinearLift | SaturatingLift | None = None,
    law_rel_sigma: float = DEFAULT_LIFT_LAW_REL_SIGMA,
    source: str | None = None,
) -> SpinPrior:
    """The spin implied by a fitted lift coefficient under a lift law C_L(S), as a prior for the aliases.

    ω = S · u / r with S = law⁻¹(C_L). Its 1σ combines the lift coefficient's standard error (propagated
    through the law) with ``law_rel_sigma`` · ω, the allowance for the law itself.

    Parameters
    ----------
    lift_coefficient, lift_stderr : fitted C_L at the time of the rate (dimensionless) and its 1σ.
    speed_mps : air speed at that time, m/s.
    radius_m : BB radius, m.
    law : a lift law of :mod:`fitting.laws`; default the published saturating form
        C_L = 1.12 S / (0.583 + 2.333 S) (:class:`SaturatingLift` with its defaults).
    law_rel_sigma : relative uncertainty allowed for the law (default
        :data:`DEFAULT_LIFT_LAW_REL_SIGMA`).
    source : text naming the prior (default: the law and the fitted value).
    """
    law = SaturatingLift() if law is None else law
    for name, value in (
        ("lift_coefficient", lift_coefficient),
        ("speed_mps", speed_mps),
        ("radius_m", radius_m),
    ):
        if not (math.isfinite(value) and value > 0):
            raise ValueError(f"{name} must be positive and finite, got {value!r}")
    if not (math.isfinite(lift_stderr) and lift_stderr >= 0):
        raise ValueError(f"lift_stderr must be finite and >= 0, got {lift_stderr!r}")
    if not (math.isfinite(law_rel_sigma) and law_rel_sigma >= 0):
        raise ValueError(f"law_rel_sigma must be finite and >= 0, got {law_rel_sigma!r}")
    s = float(law.spin_ratio_for(lift_coefficient))
    h = 1e-6 * lift_coefficient
    ds_dcl = (
        float(law.spin_ratio_for(lift_coefficient + h)) - float(law.spin_ratio_for(lift_coefficient - h))
    ) / (2 * h)
    rate = s * speed_mps / radius_m
    sigma = math.hypot(abs(ds_dcl) * lift_stderr * speed_mps / radius_m, law_rel_sigma * rate)
    if source is None:
        source = f"fitted C_L {lift_coefficient:.3g} ± {lift_stderr:.2g} under the {law.name} lift law" + (
            " C_L = 1.12 S / (0.583 + 2.333 S)" if isinstance(law, SaturatingLift) else ""
        )
    return SpinPrior(rate, sigma if sigma > 0 else 1e-9 * rate, source)


def spin_prior_for_fit_shot(shot: Mapping[str, Any], *, radius_m: float) -> SpinPrior | None:
    """The alias prior for one shot of a fit's document (``fit.json`` ``shots[i]``): the spin its fitted
    lift coefficient at the first point implies under the published saturating relation
    C_L = 1.12 S / (0.583 + 2.333 S) (:func:`spin_prior_from_lift` with its defaults), at the fitted speed
    there. None when the fit gives no positive lift coefficient or speed, or the lift is beyond the law."""
    try:
        cl = shot["lift_coefficient"]
        speed = shot["initial"]["speed_mps"]["value"]
        cl_value, cl_stderr = cl["value"], cl["stderr"]
    except (KeyError, TypeError):
        return None
    if not (is_finite_number(cl_value) and is_finite_number(speed) and cl_value > 0 and speed > 0):
        return None
    stderr = float(cl_stderr) if is_finite_number(cl_stderr) else 0.0
    try:
        return spin_prior_from_lift(float(cl_value), stderr, speed_mps=float(speed), radius_m=radius_m)
    except ValueError:  # C_L beyond the saturating law's reach
        return None


__all__ = [
    "DEFAULT_LIFT_LAW_REL_SIGMA",
    "DEFAULT_MARKING",
    "MARKINGS",
    "PRIOR_MATCH_Z",
    "PRIOR_ODDS_MIN",
    "Marking",
    "SpinPrior",
    "alias_frequencies",
    "exposure_attenuation",
    "marking_named",
    "pick_with_prior",
    "spin_prior_for_fit_shot",
    "spin_prior_from_lift",
]
