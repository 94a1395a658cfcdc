"""Plausibility of a fit: warnings when C_D, C_L or speed fall outside what a 6 mm BB can do.

Each warning names the likely cause. How the usual set-up errors move the numbers (from the model:
the path fixes the accelerations q·C_D·u² and q·C_L·u², q = ½ρA/m):

- a wrong **BB mass** m scales C_D and C_L by the same factor (q ∝ 1/m), and the energy too;
- a wrong **square size** (grid scale s) scales every length, so speed by s and C_D, C_L by 1/s;
- a wrong **frame rate** (clock factor f) scales speed by f; C_D (a ratio of a length to a length) is
  untouched, but gravity is not rescaled, so the lift absorbs the error: a wrong clock shows as
  implausible lift.

References
----------
Smooth-sphere drag about 0.40 at Re 1e4 and 0.47-0.50 at Re 5e4-1e5: tables of Lapple and Schlichting as
reproduced by Morsi & Alexander (1972), *J. Fluid Mech.* 55:193.
"""

from __future__ import annotations

from .fitfile import FitFile
from .laws import SaturatingLift
from .results import FlightFit

#: Smooth-sphere C_D at BB Reynolds numbers (≈1.5e4-7e4): Morsi & Alexander (1972), tables (see above).
SPHERE_CD_LOW = 0.40
SPHERE_CD_HIGH = 0.50
#: Plausible C_D band for a BB: the smooth-sphere values widened for spin drag and surface finish.
#: # common practice, no published source
PLAUSIBLE_CD = (0.30, 0.80)
#: Largest plausible |C_L|: the ceiling of the published saturating lift form (fitting.laws.SaturatingLift).
PLAUSIBLE_CL_MAX = float(SaturatingLift().cl_max)
#: A C_L below this (topspin) is implausible from a hop-up.  # common practice, no published source
PLAUSIBLE_CL_MIN = -0.05
#: Plausible muzzle-region speeds of a 6 mm BB from an airsoft replica, m/s.
#: # common practice, no published source
PLAUSIBLE_SPEED_MPS = (30.0, 200.0)


def plausibility_warnings(fit: FlightFit | FitFile) -> tuple[str, ...]:
    """One warning per implausible quantity (C_D shared; C_L and speed per shot), naming the likely cause."""
    if isinstance(fit, FlightFit):
        cd = fit.drag_coefficient.value
        shots = [(s.label, s.lift_coefficient.value, s.speed_mps.value) for s in fit.shots]
    elif isinstance(fit, FitFile):
        cd = fit.value("aero", "drag_coefficient")
        shots = [
            (
                fit.labels[i],
                fit.value("shots", i, "lift_coefficient"),
                fit.value("shots", i, "initial", "speed_mps"),
            )
            for i in range(fit.n_shots)
        ]
    else:
        raise ValueError(f"fit: expected a FlightFit or FitFile, got {type(fit).__name__}")
    out = []
    lo, hi = PLAUSIBLE_CD
    if cd is not None and not lo <= cd <= hi:
        out.append(
            f"C_D = {cd:.3g} is outside what a 6 mm BB can have ({lo:g}-{hi:g}; a smooth sphere has "
            f"{SPHERE_CD_LOW:g}-{SPHERE_CD_HIGH:g}): check the BB mass (C_D scales with it) and the grid's "
            "square size (C_D scales inversely with the scale)"
        )
    v_lo, v_hi = PLAUSIBLE_SPEED_MPS
    for label, cl, v in shots:
        if v is not None and not v_lo <= v <= v_hi:
            out.append(
                f"shot {label!r}: speed {v:.4g} m/s is outside {v_lo:g}-{v_hi:g} m/s: check the frame rate "
                "(speed scales with it; slow-motion files often carry playback timing) and the square size"
            )
        if cl is not None and not PLAUSIBLE_CL_MIN <= cl <= PLAUSIBLE_CL_MAX:
            out.append(
                f"shot {label!r}: C_L = {cl:.3g} is outside {PLAUSIBLE_CL_MIN:g}-{PLAUSIBLE_CL_MAX:.2f}: check "
                "the frame rate (a wrong clock turns gravity into apparent lift), the board's level and "
                "the BB mass"
            )
    return tuple(out)


__all__ = ["PLAUSIBLE_CD", "PLAUSIBLE_CL_MAX", "PLAUSIBLE_SPEED_MPS", "plausibility_warnings"]
