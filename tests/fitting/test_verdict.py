"""The hop verdict: lift-to-weight ratio and its classification."""

from __future__ import annotations

import math

import pytest

from fitting.air import Air
from fitting.bb import BB
from fitting.verdict import OVER_HOP_ABOVE, UNDER_HOP_BELOW, judge_hop, lift_to_weight

RATIO_RTOL = 1e-12


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
