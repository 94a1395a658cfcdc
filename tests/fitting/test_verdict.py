"""The hop verdict: lift-to-weight ratio and its classification."""

from __future__ import annotations

import math

import numpy as np
import pytest

from hopscope.fitting.air import Air
from hopscope.fitting.bb import BB
from hopscope.fitting.estimate import fit_shots
from hopscope.fitting.observe import ModelSpec, simulate_shot
from hopscope.fitting.verdict import OVER_HOP_ABOVE, UNDER_HOP_BELOW, judge_hop, lift_profile, lift_to_weight

RATIO_RTOL = 1e-12
#: The lift profile's first ratio against the direct formula at the fitted first point.
FIRST_RATIO_REL_TOL = 1e-6


def test_lift_to_weight_matches_hand_computation():
    air = Air.standard()
    bb = BB(2.5e-4, 5.95e-3)
    by_hand = 0.5 * air.density_kgm3 * (math.pi * 5.95e-3**2 / 4) * 0.2 * 95.0**2 / (2.5e-4 * 9.80665)
    assert lift_to_weight(0.2, 95.0, bb=bb, air=air) == pytest.approx(by_hand, rel=RATIO_RTOL)


@pytest.mark.parametrize(
    ("ratio", "category"),
    [
        (0.4, "under-hopped"),
        (1.0, "flat"),
        (1.6, "over-hopped"),
        (UNDER_HOP_BELOW - 1e-3, "under-hopped"),
        (OVER_HOP_ABOVE + 1e-3, "over-hopped"),
    ],
)
def test_categories(ratio, category):
    assert judge_hop(ratio, 0.01).category == category


def test_too_uncertain_is_undetermined():
    assert judge_hop(1.0, 0.5).category == "undetermined"


def test_non_finite_is_rejected():
    with pytest.raises(ValueError, match="finite"):
        judge_hop(float("nan"), 0.1)


def test_lift_profile_starts_at_the_fitted_ratio_and_fades():
    # At the first point the profile must equal ½ρA·C_L0·u₀²/(mg) from the fitted numbers; under the linear
    # law L/W ∝ ω·u, so with speed and spin both decaying it falls monotonically along the path.
    spec = ModelSpec(BB(2.5e-4), Air.standard())
    shot = simulate_shot(spec, t_s=np.linspace(0.0, 0.03, 40), speed_mps=95.0, elevation_rad=0.004,
                         lift_coefficient=0.02, drag_param=0.42, decay_param=0.5, sigma_m=2e-4, rng=3)  # fmt: skip
    fit = fit_shots([shot], bb=spec.bb, air=spec.air)
    prof = lift_profile(fit, range_m=30.0)
    s = fit.shots[0]
    first = lift_to_weight(s.lift_coefficient.value, s.speed_mps.value, bb=spec.bb, air=spec.air)
    assert prof.ratio[0] == pytest.approx(first, rel=FIRST_RATIO_REL_TOL)
    assert np.all(np.diff(prof.ratio) < 0) and prof.x_m[-1] <= 30.0
