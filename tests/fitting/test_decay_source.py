"""The shared spin-decay estimate of a fit: trajectory, flicker, both or assumed, with its source named."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from hopscope.fitting.air import Air
from hopscope.fitting.bb import BB
from hopscope.fitting.decay_source import AGREE_Z, decay_source_block
from hopscope.fitting.estimate import fit_shots
from hopscope.fitting.fitfile import fit_from_json, fit_to_dict, fit_to_json
from hopscope.fitting.observe import ModelSpec, simulate_shot
from hopscope.fitting.spin import add_spin_measured, measure_shot_spin

BB_025 = BB(2.5e-4)
AIR = Air.standard()
#: Inverse-variance weighting done by hand vs the block: round-off only.
WEIGHTED_REL_TOL = 1e-12
TWO_PI = 2.0 * math.pi


def _decay(lam: float, sigma: float, per: str = "time") -> dict:
    return {
        "per": per,
        "reference": 0.0,
        "rate0_radps": {"value": 6000.0, "stderr": 10.0},
        "decay_constant": {"value": lam, "stderr": sigma},
        "scale": {"value": 1.0 / lam, "stderr": sigma / lam**2},
        "n_windows": 4,
        "reduced_chi2": 1.0,
        "reason": None,
    }


def test_trajectory_and_flicker_are_weighted_by_their_variances():
    tau = {"value": 2.0, "stderr": 0.4}  # λ = 0.5 ± 0.1 1/s
    block, warns = decay_source_block(
        trajectory_time_s=tau, fixed_value=None, parameter_name="spin_decay_rate",
        measured=[("a#0", _decay(0.6, 0.05)), ("b#0", None)],
    )  # fmt: skip
    w = np.array([1 / 0.1**2, 1 / 0.05**2])
    expected = float(np.sum(w * [0.5, 0.6]) / w.sum())
    assert block["source"] == "combined" and not warns
    assert block["rate_per_s"]["value"] == pytest.approx(expected, rel=WEIGHTED_REL_TOL)
    assert block["rate_per_s"]["stderr"] == pytest.approx(1 / math.sqrt(w.sum()), rel=WEIGHTED_REL_TOL)
    assert block["time_s"]["value"] == pytest.approx(1 / expected, rel=WEIGHTED_REL_TOL)
    assert [p["used"] for p in block["parts"]] == [True, True, False]
    assert block["parts"][2]["why"] == "no decay fit"
    assert "keep the trajectory fit's decay (its own fitted decay)" in block["note"]


def test_an_undetermined_trajectory_leaves_the_flicker_and_a_disagreeing_one_is_dropped_with_a_warning():
    block, warns = decay_source_block(
        trajectory_time_s={"value": None, "stderr": None}, fixed_value=1 / 3, parameter_name="spin_decay_rate",
        measured=[("a#0", _decay(2.0, 0.2))],
    )  # fmt: skip
    assert block["source"] == "measured" and block["rate_per_s"]["value"] == 2.0 and not warns
    assert "spin_decay_rate fixed at 0.333" in block["note"]
    far = 0.5 + (AGREE_Z + 1) * math.hypot(0.1, 0.05)
    block, warns = decay_source_block(
        trajectory_time_s={"value": 2.0, "stderr": 0.4}, fixed_value=None, parameter_name="spin_decay_rate",
        measured=[("a#0", _decay(far, 0.05))],
    )  # fmt: skip
    assert block["source"] == "measured" and block["rate_per_s"]["value"] == far
    assert not block["parts"][0]["used"] and "disagrees" in block["parts"][0]["why"]
    assert len(warns) == 1 and "the flicker's (a measured spin) is used" in warns[0]


def test_per_distance_and_unresolved_decays():
    block, _ = decay_source_block(
        trajectory_time_s=None, fixed_value=1 / 3, parameter_name="spin_decay_rate",
        measured=[("a#0", _decay(0.01, 0.002, per="distance"))],
    )  # fmt: skip
    assert block["source"] == "assumed" and block["rate_per_s"]["value"] is None
    assert "per distance" in block["parts"][0]["why"] and "assumes spin_decay_rate = 0.333" in block["note"]
    block, _ = decay_source_block(
        trajectory_time_s=None, fixed_value=None, parameter_name="spin_decay_rate",
        measured=[("a#0", _decay(0.1, 0.2))],
    )  # fmt: skip
    assert block["source"] == "measured" and block["time_s"]["value"] is None
    assert "no decay time is given" in block["note"]


def test_fit_json_names_the_source_before_and_after_the_flicker_is_added():
    spec = ModelSpec(BB_025, AIR)
    truth = dict(speed_mps=100.0, elevation_rad=0.0, lift_coefficient=0.2, drag_param=0.45, decay_param=0.5)
    shot = simulate_shot(spec, t_s=np.arange(40) / 2000.0, sigma_m=5e-4, rng=1, label="t.csv#0", **truth)
    fit = fit_shots([shot], bb=BB_025, air=AIR)  # a 20 ms close-up: decay fixed at the default
    before = fit_to_dict(fit)["aero"]["spin_decay"]
    assert before["source"] == "assumed" and before["parts"] == []
    rng = np.random.default_rng(5)
    t = np.arange(400) / 10000.0
    rate = TWO_PI * 900.0 * np.exp(-t / 0.05)
    phase = np.concatenate([[0.0], np.cumsum(0.5 * (rate[1:] + rate[:-1]) * np.diff(t))])
    b = 1.0 + 0.3 * np.cos(phase) + 0.01 * rng.standard_normal(t.size)
    spin = measure_shot_spin(t, b)
    assert spin.decay is not None and spin.decay.scale is not None
    doc = add_spin_measured(json.loads(fit_to_json(fit)), {"t.csv#0": spin})
    after = doc["aero"]["spin_decay"]
    assert after["source"] == "measured"
    assert after["rate_per_s"]["value"] == pytest.approx(spin.decay.decay_constant, rel=WEIGHTED_REL_TOL)
    fit_from_json(json.dumps(doc), "fit.json")  # still a valid fit file
