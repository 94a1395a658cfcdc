"""The BB's mass and diameter tolerance in the error bars of a fit (C_D, C_L, torque slope, energy).

See :class:`fitting.bb.BBTolerance` for why each quantity scales as it does. Each widened estimate keeps
its noise and calibration parts and gains ``stderr_bb``, its own share:
σ² = σ_noise² + σ_calibration² + σ_bb².
"""

from __future__ import annotations

import dataclasses
import math
from typing import overload

from .bb import BBTolerance
from .results import Estimate, FlightFit


@overload
def with_bb_share(est: Estimate, rel_sigma: float) -> Estimate: ...
@overload
def with_bb_share(est: None, rel_sigma: float) -> None: ...
def with_bb_share(est: Estimate | None, rel_sigma: float) -> Estimate | None:
    """``est`` with a BB share |value|·rel_sigma added in quadrature (unchanged when it has no stderr)."""
    if est is None or est.value is None or est.stderr is None or not math.isfinite(est.stderr):
        return est
    bb = abs(est.value) * rel_sigma
    return dataclasses.replace(est, stderr=math.hypot(est.stderr, bb), stderr_bb=bb)


def apply_bb_tolerance(fit: FlightFit, tolerance: BBTolerance | None = None) -> FlightFit:
    """The fit with the BB tolerance (default :meth:`BBTolerance.default_for`) in C_D, C_L, the sphere
    law's scale and the aerodynamic torque slope, per shot and shared.

    Speeds, positions, elevations and the spin decay time are not affected; nor is ``covariance`` (the
    predicted path does not depend on the BB's mass or diameter). Applying it twice raises ``ValueError``.
    """
    if fit.bb_tolerance is not None:
        raise ValueError("fit: the BB tolerance is already in its error bars")
    tol = BBTolerance.default_for(fit.spec.bb) if tolerance is None else tolerance
    rel = tol.aero_rel(fit.spec.bb)
    shots = tuple(
        dataclasses.replace(
            s,
            lift_coefficient=with_bb_share(s.lift_coefficient, rel),
            drag_coefficient=with_bb_share(s.drag_coefficient, rel),
        )
        for s in fit.shots
    )
    decay = fit.spin_decay_parameter
    if fit.spec.decay == "aerodynamic":
        decay = with_bb_share(decay, rel)
    return dataclasses.replace(
        fit,
        shots=shots,
        drag_coefficient=with_bb_share(fit.drag_coefficient, rel),
        drag_scale=with_bb_share(fit.drag_scale, rel),
        spin_decay_parameter=decay,
        bb_tolerance=tol,
    )


__all__ = ["apply_bb_tolerance", "with_bb_share"]
