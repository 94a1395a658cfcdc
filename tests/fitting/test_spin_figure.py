"""No spin figure under the linear law; under the saturating law, one from its published C_L(S), labelled."""

from __future__ import annotations

import numpy as np
import pytest

from hopscope.fitting.air import Air
from hopscope.fitting.bb import BB
from hopscope.fitting.estimate import fit_shots
from hopscope.fitting.fitfile import fit_to_dict
from hopscope.fitting.laws import SaturatingLift
from hopscope.fitting.observe import ModelSpec, simulate_shot

BB_025 = BB(2.5e-4)
AIR = Air.standard()
#: The spin figure against the inverted published relation at the fitted C_L0 and speed (relative).
SAME_REL_TOL = 1e-6


def _track(lift: str):
    spec = ModelSpec(BB_025, AIR, lift=lift)
    return simulate_shot(spec, t_s=np.arange(200) / 2000.0, speed_mps=95.0, elevation_rad=0.0,
                         lift_coefficient=0.02, drag_param=0.45, decay_param=0.3, sigma_m=2e-4, rng=1)  # fmt: skip


def test_linear_law_gives_no_spin_figure():
    fit = fit_shots([_track("linear")], bb=BB_025, air=AIR)
    assert fit.shots[0].spin_radps_model.value is None
    d = fit_to_dict(fit)
    assert d["shots"][0]["spin_radps_model"]["value"] is None
    assert "no spin figure" in d["model"]["spin_note"]


def test_saturating_law_spin_is_the_published_relation_inverted_and_labelled():
    fit = fit_shots([_track("saturating")], bb=BB_025, air=AIR, lift="saturating")
    s = fit.shots[0]
    law = SaturatingLift()
    cl, u = s.lift_coefficient.value, s.speed_mps.value
    spin_ratio = law.s_half * cl / (law.cl_max - abs(cl))
    assert s.spin_radps_model.value == pytest.approx(spin_ratio * u / BB_025.radius_m, rel=SAME_REL_TOL)
    note = fit_to_dict(fit)["model"]["spin_note"]
    assert "assumption" in note and "1.12" in note and "0.583" in note
