"""Muzzle state, the BB tolerance in the error bars, and the energy limit verdict."""

from __future__ import annotations

import dataclasses
import functools
import math

import numpy as np
import pytest

from hopscope.fitting.air import Air
from hopscope.fitting.bb import BB, DEFAULT_MASS_REL_SIGMA, BBTolerance
from hopscope.fitting.bbshare import apply_bb_tolerance
from hopscope.fitting.decisionfile import add_decisions
from hopscope.fitting.energy_limit import judge_energy_limit
from hopscope.fitting.estimate import fit_shots
from hopscope.fitting.fitfile import fit_from_json, fit_to_dict, fit_to_json
from hopscope.fitting.muzzle import group_stat, muzzle_state
from hopscope.fitting.observe import ModelSpec, simulate_shot

BB_025 = BB(2.5e-4)
AIR = Air.standard()
SPEC = ModelSpec(BB_025, AIR)
MUZZLE_SPEED_MPS = (100.0, 98.0, 102.0)
CD = 0.45
CL0 = 0.15
#: The track begins this far downrange of the muzzle (x = 0), m.
GAP_M = 1.6
FPS = 2000.0

#: Noise-free data: the muzzle speed is recovered to this (m/s): fit, backward RK4 and interpolation.
MUZZLE_SPEED_TOL_MPS = 1e-3
#: The extreme spread is a difference of two recovered speeds.
EXTREME_SPREAD_TOL_MPS = 2 * MUZZLE_SPEED_TOL_MPS
#: Consistency of two computations of the same number (relative).
SAME_REL_TOL = 1e-9
#: A refit with the BB's mass or diameter changed moves C_D and C_L by the predicted factor to this.
SCALING_REL_TOL = 1e-5
#: The linearised muzzle-speed error bar against the Monte-Carlo spread of refits (relative): the spread
#: of 40 draws is itself uncertain by about 1/√80 ≈ 11 %, so 35 % is a 3σ bound.
MC_SPREAD_REL_TOL = 0.35


def _shot(speed: float, rng=None, sigma=2e-4, label="s"):
    """A track whose path passes the muzzle (x = 0) at ``speed``, with points from GAP_M on."""
    t = np.arange(0.0, 0.12, 1.0 / FPS)
    full = simulate_shot(
        SPEC, t_s=t, speed_mps=speed, elevation_rad=0.005, lift_coefficient=CL0, drag_param=CD,
        decay_param=1.0 / 3.0, sigma_m=sigma, rng=rng, label=label,
    )  # fmt: skip
    keep = full.x_m >= GAP_M
    return dataclasses.replace(full, t_s=full.t_s[keep], x_m=full.x_m[keep], y_m=full.y_m[keep], sigma_m=full.sigma_m[keep])  # fmt: skip


@functools.cache
def _group_fit(rng_seed: int | None = None):
    shots = [
        _shot(v, rng=None if rng_seed is None else rng_seed + i, label=f"s{i}")
        for i, v in enumerate(MUZZLE_SPEED_MPS)
    ]
    return fit_shots(shots, bb=BB_025, air=AIR)


def test_noise_free_group_gives_the_muzzle_speed_back():
    fit = _group_fit()
    mz = muzzle_state(fit, muzzle_x_m=0.0)
    for s, v in zip(mz.shots, MUZZLE_SPEED_MPS, strict=True):
        assert s.speed_mps.value == pytest.approx(v, abs=MUZZLE_SPEED_TOL_MPS)
        # the first tracked point is slower: the extrapolation matters
        assert fit.shots[int(s.label[1:])].speed_mps.value < v - 1.0
        assert s.energy_j.value == pytest.approx(
            0.5 * BB_025.mass_kg * s.speed_mps.value**2, rel=SAME_REL_TOL
        )
    g = mz.speed_mps
    assert g.mean.value == pytest.approx(np.mean(MUZZLE_SPEED_MPS), abs=MUZZLE_SPEED_TOL_MPS)
    assert g.sd == pytest.approx(np.std(MUZZLE_SPEED_MPS, ddof=1), abs=MUZZLE_SPEED_TOL_MPS)
    assert g.extreme_spread == pytest.approx(4.0, abs=EXTREME_SPREAD_TOL_MPS)


def test_energy_error_bar_carries_the_mass_share():
    mz = muzzle_state(_group_fit(rng_seed=3), muzzle_x_m=0.0)
    for s in mz.shots:
        e = s.energy_j
        assert e.stderr_bb == pytest.approx(DEFAULT_MASS_REL_SIGMA * e.value, rel=SAME_REL_TOL)
        noise_part = BB_025.mass_kg * s.speed_mps.value * s.speed_mps.stderr_noise
        assert e.stderr_noise == pytest.approx(noise_part, rel=SAME_REL_TOL)
        assert e.stderr**2 == pytest.approx(e.stderr_noise**2 + e.stderr_calibration**2 + e.stderr_bb**2, rel=SAME_REL_TOL)  # fmt: skip
        assert 0 < e.bb_share < 1


def test_muzzle_at_the_first_point_is_the_fitted_first_point():
    fit = _group_fit(rng_seed=3)
    mz = muzzle_state(fit)
    for s, f in zip(mz.shots, fit.shots, strict=True):
        assert s.speed_mps.value == pytest.approx(f.speed_mps.value, rel=SAME_REL_TOL)
        assert s.speed_mps.stderr == pytest.approx(f.speed_mps.stderr, rel=SAME_REL_TOL)


def test_muzzle_downrange_of_the_track_is_rejected():
    with pytest.raises(ValueError, match=r"muzzle_x_m: 5 m lies downrange of the first tracked point"):
        muzzle_state(_group_fit(), muzzle_x_m=5.0)
    with pytest.raises(ValueError, match="muzzle_x_m must be finite"):
        muzzle_state(_group_fit(), muzzle_x_m=math.nan)


@pytest.mark.slow
def test_linearised_muzzle_error_bar_matches_refits():
    speeds, stderrs = [], []
    for seed in range(40):
        fit = fit_shots([_shot(100.0, rng=100 + seed, sigma=1e-3)], bb=BB_025, air=AIR)
        s = muzzle_state(fit, muzzle_x_m=0.0).shots[0].speed_mps
        speeds.append(s.value)
        stderrs.append(s.stderr_noise)
    assert np.std(speeds, ddof=1) == pytest.approx(np.mean(stderrs), rel=MC_SPREAD_REL_TOL)
    assert abs(np.mean(speeds) - 100.0) < 3 * np.mean(stderrs) / math.sqrt(len(speeds))


def test_mass_and_diameter_scale_cd_and_cl_as_the_tolerance_says():
    shots = [_shot(100.0, label="a")]
    base = fit_shots(shots, bb=BB_025, air=AIR)
    heavy = fit_shots(shots, bb=BB(1.02 * BB_025.mass_kg), air=AIR)
    wide = fit_shots(shots, bb=BB(BB_025.mass_kg, 1.01 * BB_025.diameter_m), air=AIR)
    assert heavy.drag_coefficient.value / base.drag_coefficient.value == pytest.approx(
        1.02, rel=SCALING_REL_TOL
    )
    assert heavy.shots[0].lift_coefficient.value / base.shots[0].lift_coefficient.value == pytest.approx(1.02, rel=SCALING_REL_TOL)  # fmt: skip
    assert wide.drag_coefficient.value / base.drag_coefficient.value == pytest.approx(1 / 1.01**2, rel=SCALING_REL_TOL)  # fmt: skip
    tol = BBTolerance(0.02 * BB_025.mass_kg, 0.01 * BB_025.diameter_m)
    widened = apply_bb_tolerance(base, tol)
    cd = widened.drag_coefficient
    assert cd.stderr_bb == pytest.approx(cd.value * math.hypot(0.02, 0.02), rel=SAME_REL_TOL)
    assert cd.stderr == pytest.approx(
        math.hypot(base.drag_coefficient.stderr, cd.stderr_bb), rel=SAME_REL_TOL
    )
    assert cd.stderr > 10 * base.drag_coefficient.stderr  # the mass tolerance dominates a clean fit's C_D
    assert widened.shots[0].speed_mps == base.shots[0].speed_mps  # speed does not depend on the BB
    with pytest.raises(ValueError, match="already in its error bars"):
        apply_bb_tolerance(widened)


def test_fit_json_carries_tolerance_muzzle_group_and_limit():
    fit = apply_bb_tolerance(_group_fit(rng_seed=5))
    mz = muzzle_state(fit, muzzle_x_m=0.0)
    lim = judge_energy_limit(mz, 1.6)
    doc = add_decisions(fit_to_dict(fit), muzzle=mz, energy_limit=lim)
    assert doc["bb"]["tolerance_origin"] == "default"
    assert doc["aero"]["drag_coefficient"]["bb_share"] > 0
    m0 = doc["shots"][0]["muzzle"]
    assert m0["x_m"] == 0.0 and m0["speed_mps"]["value"] == mz.shots[0].speed_mps.value
    assert doc["group"]["energy_j"]["extreme_spread"] == mz.energy_j.extreme_spread
    el = doc["energy_limit"]
    assert el["verdict"] == "below" and el["limit_j"] == 1.6 and el["mean"]["verdict"] == "below"
    assert el["margin_j"]["value"] == pytest.approx(
        1.6 - max(s.energy_j.value for s in mz.shots), rel=SAME_REL_TOL
    )
    assert "chronograph" in el["caution"]
    back = fit_from_json(fit_to_json(fit), "fit.json")
    assert back.data["aero"]["drag_coefficient"]["stderr_bb"] == pytest.approx(fit.drag_coefficient.stderr_bb)


@pytest.mark.parametrize(
    ("limit_factor", "verdict"),
    [(1 / 1.05, "above"), (1 / 1.02, "within"), (1.0, "within"), (1.02, "within"), (1.05, "below")],
)
def test_energy_limit_verdict_near_the_limit(limit_factor, verdict):
    mz = muzzle_state(_group_fit(rng_seed=7), muzzle_x_m=0.0)
    top = max(s.energy_j.value for s in mz.shots)
    lim = judge_energy_limit(mz, top * limit_factor)
    assert lim.verdict == verdict
    assert lim.highest.label == max(mz.shots, key=lambda s: s.energy_j.value).label
    # the mass tolerance is in the margin
    assert lim.margin_j.stderr_bb == pytest.approx(DEFAULT_MASS_REL_SIGMA * top, rel=SAME_REL_TOL)
    assert lim.highest.margin_sigma == pytest.approx(
        lim.margin_j.value / lim.margin_j.stderr, rel=SAME_REL_TOL
    )


def test_mean_verdict_is_judged_on_the_mean():
    mz = muzzle_state(_group_fit(rng_seed=7), muzzle_x_m=0.0)
    mean = mz.energy_j.mean.value
    top = max(s.energy_j.value for s in mz.shots)
    lim = judge_energy_limit(mz, 0.5 * (mean + top))  # between: the top shot is closer
    assert lim.mean.energy_j.value == mean
    assert lim.mean.margin_j.value == pytest.approx(0.5 * (top - mean), rel=SAME_REL_TOL)


def test_energy_limit_rejects_bad_limits():
    mz = muzzle_state(_group_fit(), muzzle_x_m=0.0)
    for bad in (0.0, -1.0, math.inf, math.nan):
        with pytest.raises(ValueError, match="limit_j must be a positive number of joules"):
            judge_energy_limit(mz, bad)


def test_group_stat_of_plain_numbers():
    g = group_stat([1.0, 2.0, 4.0])
    assert g.mean.value == pytest.approx(7 / 3, rel=SAME_REL_TOL)
    assert g.sd == pytest.approx(np.std([1.0, 2.0, 4.0], ddof=1), rel=SAME_REL_TOL)
    assert g.mean.stderr == pytest.approx(g.sd / math.sqrt(3), rel=SAME_REL_TOL)
    assert g.extreme_spread == 3.0 and g.n == 3
    with pytest.raises(ValueError, match="finite numbers"):
        group_stat([1.0, math.nan])
