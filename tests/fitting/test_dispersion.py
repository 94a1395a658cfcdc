"""Effective range: Monte Carlo against the normal-distribution closed form, spread bookkeeping, errors."""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest
from scipy.stats import norm

from hopscope.fitting.air import Air
from hopscope.fitting.bb import BB
from hopscope.fitting.dispersion import effective_range, shot_spread
from hopscope.fitting.estimate import FittedModel, parameter_names
from hopscope.fitting.flight import fly
from hopscope.fitting.observe import ModelSpec, flight_for
from hopscope.fitting.predict import heights_at, shot_rows

SPEC = ModelSpec(BB(2.5e-4), Air.standard())
SIGMA_EL_RAD = 0.004
#: Monte Carlo (4000 shots) against the closed form: the 90 % point of the fraction moves ~1 % with
#: 4000 shots; 4 % is a real check.
RANGE_REL_TOL = 0.04
#: Covariance bookkeeping is exact arithmetic: round-off only.
BOOKKEEPING_REL_TOL = 1e-9


def _model(elevations, speeds=None, cov_scale=0.0):
    n = len(elevations)
    theta = []
    for i, el in enumerate(elevations):
        v = 100.0 if speeds is None else speeds[i]
        theta += [0.0, 0.0, v, el, 0.015]
    theta += [0.45, 1 / 3]
    p = 5 * n + 2
    cov = np.eye(p) * cov_scale
    return FittedModel(SPEC, parameter_names(SPEC, n), np.array(theta), np.ones(p, dtype=bool), cov,
                       tuple(f"s{i}" for i in range(n)), np.zeros(n))  # fmt: skip


def _exact_elevations(n, sigma, seed=0):
    z = np.random.default_rng(seed).standard_normal(n)
    return (z - z.mean()) / z.std(ddof=1) * sigma


def test_elevation_spread_matches_the_normal_closed_form():
    fm = _model(_exact_elevations(50, SIGMA_EL_RAD))
    res = effective_range(
        fm,
        n_shots=4000,
        include_parameter_uncertainty=False,
        max_range_m=60.0,
        rng=2,
        muzzle_height_m=None,
        n_bootstrap=0,
    )  # fmt: skip  (the closed form has no ground)
    # closed form: heights at x spread normally with σ_y(x) = |∂y/∂θ|(x)·σ_θ; 90 % inside ±D/2 when
    # σ_y = (D/2)/z_0.95 (z from scipy.stats.norm)
    x = np.linspace(1.0, 60.0, 400)
    h = 1e-6
    th = np.tile(fm.theta, (2, 1))
    th[0, 3] += h
    th[1, 3] -= h
    model, launch = flight_for(SPEC, shot_rows(fm, th, 0))
    ys, _ = heights_at(fly(model, launch, 2.0), x)
    sigma_y = np.abs(ys[0] - ys[1]) / (2 * h) * SIGMA_EL_RAD
    target = 0.15 / norm.ppf(0.95)
    x_exact = float(np.interp(target, sigma_y, x))
    assert res.effective_range_m == pytest.approx(x_exact, rel=RANGE_REL_TOL)
    assert res.state_cov[1, 1] == pytest.approx(SIGMA_EL_RAD**2, rel=BOOKKEEPING_REL_TOL)
    assert np.all(np.diff(res.spread_sd_m[np.isfinite(res.spread_sd_m)]) > 0)


def test_measurement_noise_is_not_counted_as_spread():
    # shots that agree within their own error bars: no real spread left, the group stays in the target
    fm = _model(_exact_elevations(10, 1e-4), cov_scale=1e-6)
    mean, cov = shot_spread(fm)
    assert np.allclose(cov, 0.0)
    res = effective_range(fm, include_parameter_uncertainty=False, max_range_m=40.0, rng=1)
    assert res.effective_range_m is None and "beyond 40 m" in res.reason


def test_parameter_uncertainty_gives_a_stderr():
    fm = _model(_exact_elevations(20, SIGMA_EL_RAD), cov_scale=1e-8)
    res = effective_range(fm, n_shots=2000, max_range_m=60.0, rng=3)
    assert res.effective_range_stderr_m is not None and res.effective_range_stderr_m > 0
    assert res.n_shots == 2000 and res.n_fitted_shots == 20


def test_one_shot_cannot_give_a_spread():
    res = effective_range(_model([0.0]), rng=0)
    assert res.effective_range_m is None and "at least two fitted shots" in res.reason


@pytest.mark.parametrize(
    ("kw", "match"),
    [
        ({"target_diameter_m": 0.0}, "target_diameter_m must be positive"),
        ({"hit_fraction": 1.0}, "hit_fraction must lie strictly between 0 and 1"),
        ({"n_shots": 10}, "n_shots must be at least 100"),
    ],
)
def test_bad_arguments(kw, match):
    with pytest.raises(ValueError, match=match):
        effective_range(_model([0.0, 0.001]), **kw)


def test_calibration_error_shared_by_the_shots_is_not_subtracted_from_their_spread():
    # Shots mapped with one rig share its error: it moves them together and does not widen the group, so
    # only the measurement-noise part of each shot's covariance comes off the between-shot scatter.
    base = _model(_exact_elevations(20, SIGMA_EL_RAD), cov_scale=0.25 * SIGMA_EL_RAD**2)
    noisy = shot_spread(base)[1][1, 1]
    all_calibration = replace(base, covariance_calibration=base.covariance.copy())
    assert noisy == pytest.approx(0.75 * SIGMA_EL_RAD**2, rel=BOOKKEEPING_REL_TOL)
    assert shot_spread(all_calibration)[1][1, 1] == pytest.approx(SIGMA_EL_RAD**2, rel=BOOKKEEPING_REL_TOL)


#: The bootstrap standard error against the SD of ranges recomputed from resampled shot sets: both are
#: SDs of about 20 draws (each uncertain by ~16 %), so they agree to about 50 % at 2σ.
BOOTSTRAP_REL_TOL = 0.5
#: The curve ends no earlier than this before the group's mean shot reaches the ground, m.
GROUND_END_TOL_M = 3.0


@pytest.mark.slow
def test_stderr_agrees_with_the_spread_over_resampled_shot_sets():
    elevations = _exact_elevations(5, SIGMA_EL_RAD, seed=4)
    res = effective_range(_model(elevations), include_parameter_uncertainty=False, max_range_m=60.0,
                          muzzle_height_m=None, rng=5)  # fmt: skip
    gen = np.random.default_rng(6)
    ranges = []
    while len(ranges) < 20:
        pick = gen.integers(0, 5, 5)
        if len(set(pick.tolist())) < 2:
            continue
        r = effective_range(_model(elevations[pick]), include_parameter_uncertainty=False, max_range_m=60.0,
                            muzzle_height_m=None, n_bootstrap=0, n_shots=1000, rng=7)  # fmt: skip
        ranges.append(r.effective_range_m)
    assert res.effective_range_stderr_m == pytest.approx(np.std(ranges, ddof=1), rel=BOOTSTRAP_REL_TOL)
    assert res.effective_range_stderr_m > 0.05 * res.effective_range_m  # five shots pin the spread loosely
    assert res.bootstrap_ranges_m.size == 20


def test_curves_end_at_the_ground():
    fm = _model(_exact_elevations(10, SIGMA_EL_RAD) - 0.02)  # fired about 1° down
    res = effective_range(fm, include_parameter_uncertainty=False, muzzle_height_m=0.5, n_bootstrap=0, rng=8)
    mean_rows = shot_rows(fm, fm.theta[None, :], 0)
    mean_rows = replace(
        mean_rows, elevation_rad=np.array([float(np.mean(fm.theta[fm.layout.slot("elevation_rad")]))])
    )
    model, launch = flight_for(SPEC, mean_rows)
    traj = fly(model, launch, 2.0)
    t_g = float(traj.time_at_height(-0.5)[0])
    x_ground = float(traj.sample(np.array([[t_g]]))[0, 0, 0])
    # the curve ends where the last shot comes down: past the mean shot's ground, well before 80 m
    assert x_ground - GROUND_END_TOL_M <= res.x_m[-1] < 0.5 * 80.0
    assert res.fraction_inside[-1] < 0.5 and res.effective_range_m <= res.x_m[-1]
    assert any("reach the ground" in n for n in res.notes)


def test_speeds_far_apart_are_not_one_group_and_duplicates_are_flagged():
    quick = {"n_bootstrap": 0, "n_shots": 200, "max_range_m": 30.0, "include_parameter_uncertainty": False}
    res = effective_range(_model([0.0, 0.001, 0.002], speeds=[70.0, 95.0, 120.0]), rng=9, **quick)
    assert any("may not be one group" in w for w in res.warnings)
    dup = _model([0.001, 0.001, 0.002], cov_scale=1e-8)
    res = effective_range(dup, rng=9, **quick)
    assert any("'s0' and 's1' are the same shot" in w for w in res.warnings)
    assert not any("may not be one group" in w for w in res.warnings)
