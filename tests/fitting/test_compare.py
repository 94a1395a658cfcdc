"""A/B comparison (Welch's t on per-shot values) and the tuning assistant, on simulated groups."""

from __future__ import annotations

import functools
import json

import numpy as np
import pytest
import scipy.stats

from hopscope.fitting.air import Air
from hopscope.fitting.bb import BB
from hopscope.fitting.compare import compare_groups, flattest_lift_coefficient, summarize_group, tune, welch
from hopscope.fitting.decisionfile import comparison_to_dict
from hopscope.fitting.estimate import fit_shots
from hopscope.fitting.observe import ModelSpec, simulate_shot

BB_025 = BB(2.5e-4)
AIR = Air.standard()
SPEC = ModelSpec(BB_025, AIR)
N_SHOTS = 4
#: Shot-to-shot spread of C_L0 (relative) and of speed (m/s) within a group.
CL_SPREAD_REL = 0.04
SPEED_SPREAD_MPS = 1.0
BASE_CL = 0.020
#: A 25 % lift difference over 4 % spread gives a p value well below this.
CLEAR_P = 0.01
#: Agreement of the recommended setting with the one the line gives, in its standard errors.
SETTING_Z_TOL = 3.0
#: The C_L0 scan's grid step (0.02 × the balancing C_L ≈ 3e-4) is worth this much setting at a slope of 0.006.
SCAN_STEP_SETTING = 0.06
#: The target C_L0 read off a group's fit against another group's (their C_D and decay differ by noise).
TARGET_REL_TOL = 0.02
#: The fitted slope against the simulated one (4 % C_L spread over 12 shots and a 2-unit span).
SLOPE_REL_TOL = 0.3
#: The same number two ways (relative).
SAME_REL_TOL = 1e-9


@functools.cache
def _group(name: str, cl: float, seed: int, setting: float | None = None):
    gen = np.random.default_rng(seed)
    shots = []
    for i in range(N_SHOTS):
        shots.append(
            simulate_shot(
                SPEC, t_s=np.arange(150) / 2000.0, speed_mps=95.0 + SPEED_SPREAD_MPS * gen.standard_normal(),
                elevation_rad=0.0, lift_coefficient=cl * (1 + CL_SPREAD_REL * gen.standard_normal()),
                drag_param=0.45, decay_param=1 / 3, sigma_m=2e-4, rng=gen, label=f"{name}{i}",
            )
        )  # fmt: skip
    return summarize_group(name, fit_shots(shots, bb=BB_025, air=AIR), setting=setting)


def test_welch_matches_scipy_and_the_standard_error_formula():
    a, b = np.array([1.0, 2.0, 3.0, 4.0]), np.array([2.0, 4.0, 5.0])
    diff, se, p = welch(a, b)
    assert diff == pytest.approx(np.mean(b) - np.mean(a), rel=SAME_REL_TOL)
    assert se == pytest.approx(np.sqrt(np.var(a, ddof=1) / 4 + np.var(b, ddof=1) / 3), rel=SAME_REL_TOL)
    assert p == pytest.approx(scipy.stats.ttest_ind(a, b, equal_var=False).pvalue, rel=SAME_REL_TOL)
    assert welch(a, np.array([3.0]))[1:] == (None, None)


def test_a_25_percent_lift_difference_is_significant():
    a, b = _group("a", BASE_CL, 1), _group("b", 1.25 * BASE_CL, 2)
    cmp = compare_groups(a, b)
    lift = next(d for d in cmp.differences if d.quantity == "lift_coefficient")
    assert lift.significant and lift.p_value < CLEAR_P
    assert lift.value == pytest.approx(
        np.mean(b.values["lift_coefficient"]) - np.mean(a.values["lift_coefficient"])
    )
    assert lift.a == "a" and lift.b == "b" and lift.test == "Welch t"
    cd = next(d for d in cmp.differences if d.quantity == "drag_coefficient")
    assert not cd.significant  # one BB type, one C_D
    assert a.stats["speed_mps"].n == N_SHOTS


@pytest.mark.slow
def test_groups_from_one_distribution_are_rarely_called_different():
    calls = 0
    for seed in range(10):
        cmp = compare_groups(_group("a", BASE_CL, 100 + 2 * seed), _group("b", BASE_CL, 101 + 2 * seed))
        lift = next(d for d in cmp.differences if d.quantity == "lift_coefficient")
        calls += bool(lift.significant)
    assert calls <= 1


def test_tuning_recommends_the_setting_whose_lift_is_flattest():
    groups = [_group(f"s{k}", 0.010 + 0.006 * k, 20 + k, setting=float(k)) for k in range(3)]
    advice = tune(groups)
    assert advice.setting is not None, advice.reason
    target = flattest_lift_coefficient(groups[1].fit, speed_mps=95.0)
    assert advice.target_lift_coefficient == pytest.approx(target, rel=TARGET_REL_TOL)
    expected = (advice.target_lift_coefficient - 0.010) / 0.006
    assert abs(advice.setting.value - expected) < SETTING_Z_TOL * advice.setting.stderr + SCAN_STEP_SETTING
    assert advice.slope.value == pytest.approx(0.006, rel=SLOPE_REL_TOL)


def test_tuning_says_when_the_data_cannot_tell():
    groups = [_group(f"f{k}", BASE_CL, 40 + k, setting=float(k)) for k in range(3)]
    advice = tune(groups)
    assert advice.setting is None and "cannot tell" in advice.reason
    with pytest.raises(ValueError, match="three or more groups"):
        tune(groups[:2])


def test_compare_json_layout():
    a, b = _group("a", BASE_CL, 1), _group("b", 1.25 * BASE_CL, 2)
    cmp = compare_groups(a, b)
    doc = json.loads(json.dumps(comparison_to_dict([a, b], [cmp]), allow_nan=False))
    assert doc["schema"] == "hopscope.compare/1" and [g["name"] for g in doc["groups"]] == ["a", "b"]
    lift = next(d for d in doc["differences"] if d["quantity"] == "lift_coefficient")
    assert set(lift) >= {"quantity", "a", "b", "value", "stderr", "p_value", "significant"}
    assert lift["significant"] is True and doc["tuning"] is None
    assert len(doc["groups"][0]["values"]["speed_mps"]) == N_SHOTS
