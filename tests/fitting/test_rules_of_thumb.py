"""Rules of thumb of the airsoft trade as check values for the flight model (order of magnitude only).

Set-up shared by the checks (stated here because the rules do not state theirs): standard air (20 °C,
1013.25 hPa, 50 % RH), a 5.95 mm BB fired level from 1.5 m above flat ground, constant C_D 0.42, linear
lift with its spin decaying exponentially over τ = 2 s, and the hop set for a level start: lift equal to
the BB's weight at the muzzle. Range is the downrange distance where the BB reaches the ground.
Tolerances are as loose as the rules are.
"""

from __future__ import annotations

import numpy as np
import pytest

from hopscope.fitting.air import Air
from hopscope.fitting.bb import BB
from hopscope.fitting.flight import FlightModel, LaunchState, fly
from hopscope.fitting.laws import ConstantDrag, ExponentialDecay, LinearLift
from hopscope.shared.constants import STANDARD_GRAVITY_MPS2
from hopscope.shared.units import fps_to_mps

MUZZLE_HEIGHT_M = 1.5
DRAG_COEFFICIENT = 0.42
SPIN_DECAY_S = 2.0
FLIGHT_S = 10.0  # longer than any of these flights
#: "About 10 m": accepted if the model's difference lies within a factor of two of it.
RANGE_GAIN_BAND_M = (5.0, 20.0)


def ranges_m(mass_kg: float, speeds_mps) -> np.ndarray:
    """Range (m) of level, hopped-for-level shots of one BB mass at the given muzzle speeds (m/s)."""
    bb, air = BB(mass_kg), Air.standard()
    v = np.atleast_1d(np.asarray(speeds_mps, dtype=float))
    q = 0.5 * air.density_kgm3 * bb.area_m2
    cl0 = mass_kg * STANDARD_GRAVITY_MPS2 / (q * v**2)  # lift = weight at the muzzle
    model = FlightModel(
        bb, air, ConstantDrag(DRAG_COEFFICIENT), LinearLift(1.0), ExponentialDecay(SPIN_DECAY_S)
    )
    # linear law, k = 1: C_L = S = rω/u, so ω₀ = C_L0·u₀/r
    launch = LaunchState.from_speed(
        v, 0.0, spin_radps=cl0 * v / bb.radius_m, position_m=(0, MUZZLE_HEIGHT_M, 0)
    )
    traj = fly(model, launch, FLIGHT_S)
    t_ground = traj.time_at_height(0.0)
    assert np.all(np.isfinite(t_ground)), "a shot was still airborne after the integration span"
    return traj.sample(t_ground[:, None])[:, 0, 0]


def test_300_fps_and_500_fps_differ_in_range_by_about_10_m():
    # common practice, no published source: a 0.3 g BB at 300 fps and at 500 fps, each hopped for a level
    # flight, differ in range by "about 10 m"
    r300, r500 = ranges_m(3.0e-4, [fps_to_mps(300.0), fps_to_mps(500.0)])
    assert r500 > r300
    assert RANGE_GAIN_BAND_M[0] < r500 - r300 < RANGE_GAIN_BAND_M[1], (r300, r500)


@pytest.mark.parametrize("energy_j", [0.8, 1.0, 1.5])
def test_mass_changes_range_more_than_speed_does(energy_j):
    # common practice, no published source: at equal muzzle energy a heavier BB (here 0.40 g vs 0.20 g,
    # so √2 slower) carries further when hopped — the mass gains more range than the lost speed costs
    light, heavy = 2.0e-4, 4.0e-4
    v_light, v_heavy = np.sqrt(2 * energy_j / light), np.sqrt(2 * energy_j / heavy)
    r_light = ranges_m(light, v_light)[0]
    r_heavy = ranges_m(heavy, v_heavy)[0]
    # r_heavy − r_light = (mass gain at the heavy BB's speed) − (speed loss of the light BB): positive means
    # the mass effect is the larger
    assert r_heavy > r_light, (energy_j, r_light, r_heavy)
