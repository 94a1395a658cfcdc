"""The C_D bound the geometry allows (``calibrate``'s summary): one board placement costs more than three."""

from __future__ import annotations

import math
import re

import pytest
from test_plane import BOARD, _close_setup

from hopscope.calibration.build import make_rig, rig_figures
from hopscope.calibration.dragbound import drag_bound, reference_drag_per_m
from hopscope.summaries import drag_bound_row

#: Ensemble members of the rigs compared (the bound's own relative noise is about 1/sqrt(2K) = 14 %).
MEMBERS = 24
#: Three placements along the close lane's 2.7 m field (m), against the one at the centre.
THREE_OFFSETS_M = (-0.7, 0.0, 0.7)
#: One placement must cost at least this factor more than three (measured: 0.69 % against 0.16 %).
ONE_OVER_THREE_MIN = 2.0
#: k = ρ C_D A / (2 m) of the reference BB, by hand: 1.204 · 0.4 · π (5.95 mm)² / 4 / (2 · 0.25 g).
HAND_K_PER_M = 1.204 * 0.4 * math.pi * 5.95e-3**2 / 4 / (2 * 0.25e-3)
K_RTOL = 1e-12


def _printed_percent(rig) -> tuple[float, str]:
    label, text = drag_bound_row(rig_figures(rig).drag_bound)
    assert label == "C_D bound from geometry"
    m = re.match(r"±([\d.]+) % \(1σ, a 0\.25 g BB across the ([\d.]+) m field\): ", text)
    assert m, text
    return float(m.group(1)), text


@pytest.fixture(scope="module")
def rigs():
    out = {}
    for name, offsets in (("one", (0.0,)), ("three", THREE_OFFSETS_M)):
        _, views, lens, placements, rng = _close_setup(seed=11, offsets=offsets)
        out[name] = make_rig(views, lens, placements, BOARD, ensemble_size=MEMBERS, rng=rng)
    return out


def test_reference_drag_per_metre_is_the_hand_value():
    assert reference_drag_per_m() == pytest.approx(HAND_K_PER_M, rel=K_RTOL)


def test_one_placement_prints_a_larger_bound_than_three(rigs):
    one, one_text = _printed_percent(rigs["one"])
    three, three_text = _printed_percent(rigs["three"])
    assert one > ONE_OVER_THREE_MIN * three > 0, (one_text, three_text)
    assert "one board placement" in one_text and "more places along the field" in one_text
    assert three_text.endswith("3 placements; more along the field lower it further")


def test_bound_is_the_members_curvature_as_drag(rigs):
    # the members' scale curvature alone, turned into C_D (−2c/k), is the larger part for one board
    b = drag_bound(rigs["one"])
    assert b.n_placements == 1 and b.members == MEMBERS
    curvature_part = 2 * b.curvature_rms_per_m / b.reference_k_per_m
    assert curvature_part > b.scale_rms
    # the bound is the RMS of −2c/k − b over the members: between the difference and the sum of the two RMS
    assert abs(curvature_part - b.scale_rms) <= b.cd_relative <= curvature_part + b.scale_rms


def test_no_ensemble_says_so(rigs):
    _, views, lens, placements, rng = _close_setup(seed=11)
    rig = make_rig(views, lens, placements, BOARD, ensemble_size=0, rng=rng)
    assert math.isnan(drag_bound(rig).cd_relative)
    assert drag_bound_row(rig_figures(rig).drag_bound) == (
        "C_D bound from geometry",
        "not estimated (no ensemble)",
    )
