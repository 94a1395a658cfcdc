"""Prediction with uncertainty from a muzzle height, and the hop verdict read off the path."""

from __future__ import annotations

import functools
import math

import numpy as np
import pytest

from hopscope.fitting.air import Air
from hopscope.fitting.bb import BB
from hopscope.fitting.estimate import fit_shots
from hopscope.fitting.flight import fly
from hopscope.fitting.forecast import forecast_shot, launch_rows, max_range_over_elevation
from hopscope.fitting.observe import ModelSpec, flight_for, simulate_shot
from hopscope.fitting.verdict import classify_path, judge_group_hop_path, judge_hop_path

BB_025 = BB(2.5e-4)
AIR = Air.standard()
SPEC = ModelSpec(BB_025, AIR)
#: C_L0 of a 0.25 g BB at 95 m/s whose lift is well below, about at, and well above its weight's need
#: (lift = weight at C_L ≈ g/(q·u²) ≈ 0.016; lift fades as the BB slows, so flat needs somewhat more).
LIFTS = {"under-hopped": 0.005, "flat": 0.022, "over-hopped": 0.04}
HEIGHT_M = 1.5
BAND_M = 0.15
ENGAGEMENT_M = 30.0
#: The figures against a direct dense simulation (the brief's 1 cm).
FIGURE_TOL_M = 0.01
#: Dense reference: RK4 step and sampling, s.
DENSE_STEP_S = 1e-4
DENSE_SAMPLE_S = 1e-5
#: Speed at a distance against the dense simulation, m/s.
SPEED_TOL_MPS = 1e-3
#: The path's last point lies on the ground (set exactly at the crossing), m.
GROUND_Y_TOL_M = 1e-9

#: The same path computed two ways (relative).
SAME_REL_TOL = 1e-6


@functools.cache
def _fit(cl: float, n_shots: int = 1):
    shots = [
        simulate_shot(SPEC, t_s=np.arange(300) / 2000.0, speed_mps=95.0 + i, elevation_rad=0.002,
                      lift_coefficient=cl, drag_param=0.45, decay_param=1 / 3, sigma_m=3e-4, rng=10 + i,
                      label=f"s{i}")
        for i in range(n_shots)
    ]  # fmt: skip
    return fit_shots(shots, bb=BB_025, air=AIR)


def _dense_path(fit):
    """The nominal shot flown level from the muzzle height with a fine step, sampled densely."""
    fm = fit.fitted_model()
    rows = launch_rows(fm, fm.theta[None, :], 0, muzzle_height_m=HEIGHT_M, elevation_rad=0.0)
    model, launch = flight_for(SPEC, rows)
    traj = fly(model, launch, 3.0, step_s=DENSE_STEP_S)
    t_g = float(traj.time_at_height(0.0)[0])
    t = np.arange(0.0, t_g, DENSE_SAMPLE_S)
    st = traj.sample(t)[0]
    speed = np.linalg.norm(st[:, 3:6], axis=1)
    return st[:, 0], st[:, 1] - HEIGHT_M, float(traj.sample(np.array([[t_g]]))[0, 0, 0]), speed


@pytest.mark.slow
@pytest.mark.parametrize("category", list(LIFTS))
def test_flat_distance_and_max_rise_agree_with_a_dense_simulation(category):
    fit = _fit(LIFTS[category])
    fc = forecast_shot(fit, muzzle_height_m=HEIGHT_M, band_m=BAND_M, distance_m=20.0, n_samples=40, rng=1)
    x, dev, ground_x, speed = _dense_path(fit)
    out = np.nonzero(np.abs(dev) > BAND_M)[0]
    flat = ground_x if out.size == 0 else x[out[0]]
    assert fc.flat_distance_m.value == pytest.approx(flat, abs=FIGURE_TOL_M)
    assert fc.max_rise_m.value == pytest.approx(max(0.0, float(np.max(dev))), abs=FIGURE_TOL_M)
    assert fc.ground_range_m.value == pytest.approx(ground_x, abs=FIGURE_TOL_M)
    assert fc.x_m[-1] == pytest.approx(ground_x, abs=FIGURE_TOL_M) and fc.y_m[-1] == pytest.approx(
        0.0, abs=GROUND_Y_TOL_M
    )
    assert fc.speed_at_mps.value == pytest.approx(float(np.interp(20.0, x, speed)), abs=SPEED_TOL_MPS)
    assert fc.energy_at_j.value == pytest.approx(
        0.5 * BB_025.mass_kg * fc.speed_at_mps.value**2, rel=SAME_REL_TOL
    )
    for e in (fc.flat_distance_m, fc.ground_range_m, fc.time_of_flight_s, fc.speed_at_mps):
        assert e.stderr is not None and 0 < e.stderr < 0.1 * abs(e.value)


def test_no_samples_no_error_bars():
    fc = forecast_shot(_fit(LIFTS["flat"]), n_samples=0)
    assert fc.ground_range_m.value is not None and fc.ground_range_m.stderr is None
    assert np.all(fc.y_sigma_m == 0)


def test_max_range_over_elevation_is_the_best_of_the_scan():
    fit = _fit(LIFTS["flat"])
    best, elevation = max_range_over_elevation(fit, n_samples=6, rng=2)
    level = forecast_shot(fit, n_samples=0).ground_range_m.value
    at_best = forecast_shot(fit, n_samples=0, elevation_rad=elevation.value).ground_range_m.value
    assert best.value >= level
    assert at_best == pytest.approx(best.value, rel=SAME_REL_TOL)
    assert best.stderr is not None and best.stderr > 0


@pytest.mark.slow
@pytest.mark.parametrize("category", list(LIFTS))
def test_verdict_agrees_with_the_path(category):
    fit = _fit(LIFTS[category])
    v = judge_hop_path(fit, engagement_m=ENGAGEMENT_M, band_m=BAND_M, muzzle_height_m=HEIGHT_M, rng=3)
    x, dev, _, _ = _dense_path(fit)
    on_path, exit_m = classify_path(x, dev, engagement_m=ENGAGEMENT_M, band_m=BAND_M)
    assert v.category == on_path == category
    if exit_m is None:
        assert v.exit_m is None
    else:
        assert v.exit_m == pytest.approx(exit_m, abs=FIGURE_TOL_M)
    assert v.probabilities[category] >= 0.5
    word = {"under-hopped": "more hop", "flat": "leave", "over-hopped": "less hop"}[category]
    assert word in v.adjuster and word in v.detail


def test_group_verdict_and_per_shot_verdicts():
    fit = _fit(LIFTS["over-hopped"], n_shots=3)
    group, shots = judge_group_hop_path(fit, n_samples=20, rng=4)
    assert group.label == "group" and group.category == "over-hopped"
    assert [s.label for s in shots] == ["s0", "s1", "s2"]
    assert all(s.category == "over-hopped" for s in shots)


def test_classify_path_exit_is_interpolated():
    x = np.array([0.0, 1.0, 2.0, 3.0])
    assert classify_path(x, np.array([0.0, 0.1, 0.3, 0.5]), engagement_m=3.0, band_m=0.2) == (
        "over-hopped",
        1.5,
    )
    assert classify_path(x, np.array([0.0, -0.1, -0.3, -0.5]), engagement_m=3.0, band_m=0.2) == (
        "under-hopped",
        1.5,
    )
    assert classify_path(x, np.array([0.0, 0.1, 0.1, 0.5]), engagement_m=2.5, band_m=0.2) == ("flat", None)


def test_bad_questions_are_rejected():
    fit = _fit(LIFTS["flat"])
    with pytest.raises(ValueError, match="muzzle_height_m must be positive"):
        forecast_shot(fit, muzzle_height_m=0.0)
    with pytest.raises(ValueError, match="band_m must be positive"):
        judge_hop_path(fit, band_m=-1.0)
    with pytest.raises(ValueError, match="distance_m must be positive"):
        forecast_shot(fit, distance_m=math.nan)
