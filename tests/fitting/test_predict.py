"""Predicted path: nominal path = the model's, band = linear propagation of the covariance, stops."""

from __future__ import annotations

import numpy as np
import pytest

from hopscope.fitting.air import Air
from hopscope.fitting.bb import BB
from hopscope.fitting.estimate import fit_shots
from hopscope.fitting.fitfile import fit_from_json, fit_to_json
from hopscope.fitting.flight import fly
from hopscope.fitting.observe import ModelSpec, flight_for, simulate_shot
from hopscope.fitting.predict import fitted_span_path, heights_at, predict_path, shot_rows, tracked_span_s

BB_025 = BB(2.5e-4)
AIR = Air.standard()
SPEC = ModelSpec(BB_025, AIR)
TRUTH = {
    "speed_mps": 100.0,
    "elevation_rad": 0.0,
    "lift_coefficient": 0.015,
    "drag_param": 0.45,
    "decay_param": 1 / 3,
}

#: Sampled band vs linear propagation: 400 samples give the σ to ~4 %; the model is nearly linear
#: over the band, so 15 % is a real check.
BAND_REL_TOL = 0.15
#: The predicted path against the same integration done by hand: interpolation round-off only, m.
SAME_PATH_TOL_M = 1e-9
#: A path cut at a time ends at that time to the bisection's precision, s.
END_TIME_TOL_S = 1e-12


@pytest.fixture(scope="module")
def fit():
    shot = simulate_shot(SPEC, t_s=np.arange(60) / 2000.0, sigma_m=5e-4, rng=3, **TRUTH)
    return fit_shots([shot], bb=BB_025, air=AIR)


def test_nominal_path_is_the_fitted_model(fit):
    p = predict_path(fit, range_m=30.0, n_samples=0)
    assert p.reached == "range" and p.x_m[-1] >= 30.0 > p.x_m[-2]
    fm = fit.fitted_model()
    rows = shot_rows(fm, fm.theta[None, :], 0)
    model, launch = flight_for(fm.spec, rows)
    ref = fly(model, launch, float(p.t_s[-1]) + 0.01).sample(p.t_s)[0]
    np.testing.assert_allclose(p.x_m, ref[:, 0], atol=SAME_PATH_TOL_M)
    np.testing.assert_allclose(p.y_m, ref[:, 1], atol=SAME_PATH_TOL_M)
    assert np.all(np.diff(p.speed_mps) < 0)  # drag slows the BB all the way
    assert np.all(p.y_sigma_m == 0)


def test_band_matches_linear_propagation(fit):
    x_check = np.array([10.0, 25.0])
    p = predict_path(fit, range_m=26.0, n_samples=400, rng=1)
    sampled = np.interp(x_check, p.x_m, p.y_sigma_m)
    # linear propagation (delta method): σ_y(x)² = g Cov gᵀ with g = ∂y(x)/∂θ by central differences
    fm = fit.fitted_model()
    free_idx = np.nonzero(fm.free)[0]
    steps = np.maximum(1e-6, 1e-5 * np.abs(fm.theta[free_idx]))
    thetas = [fm.theta]
    for i, h in zip(free_idx, steps, strict=True):
        for sgn in (1, -1):
            th = fm.theta.copy()
            th[i] += sgn * h
            thetas.append(th)
    rows = shot_rows(fm, np.array(thetas), 0)
    model, launch = flight_for(fm.spec, rows)
    ys, _ = heights_at(fly(model, launch, 1.0), x_check)
    g = (ys[1::2] - ys[2::2]) / (2 * steps[:, None])  # (p, k)
    linear = np.sqrt(np.einsum("pk,pq,qk->k", g, fm.covariance, g))
    np.testing.assert_allclose(sampled, linear, rtol=BAND_REL_TOL)
    assert sampled[1] > sampled[0] > 0


def test_ground_ends_the_path_and_file_gives_the_same_path(fit):
    p = predict_path(fit, range_m=80.0, ground_y_m=-1.0, n_samples=0)
    assert p.reached == "ground" and p.y_m[-1] <= -1.0 < p.y_m[-2]
    ff = fit_from_json(fit_to_json(fit), "fit.json")
    q = predict_path(ff, range_m=80.0, ground_y_m=-1.0, n_samples=0)
    np.testing.assert_array_equal(p.y_m, q.y_m)


def test_bad_arguments(fit):
    with pytest.raises(ValueError, match="shot: expected an index 0..0"):
        predict_path(fit, shot=3)
    with pytest.raises(ValueError, match="range_m must be positive"):
        predict_path(fit, range_m=-1.0)
    with pytest.raises(ValueError, match="fit: expected"):
        predict_path("fit.json")  # type: ignore[arg-type]


def test_max_time_ends_the_path_at_that_time_on_the_same_curve(fit):
    full = predict_path(fit, range_m=40.0, n_samples=0, sample_s=1e-4)
    cut = predict_path(fit, range_m=40.0, n_samples=0, sample_s=1e-4, max_time_s=0.0123)
    assert cut.reached == "time" and cut.t_s[-1] == pytest.approx(0.0123, abs=END_TIME_TOL_S)
    n = cut.t_s.size - 1  # the common grid points (the last one is the exact end)
    np.testing.assert_allclose(cut.x_m[:n], full.x_m[:n], atol=SAME_PATH_TOL_M)
    np.testing.assert_allclose(cut.y_m[:n], full.y_m[:n], atol=SAME_PATH_TOL_M)
    with pytest.raises(ValueError, match="max_time_s"):
        predict_path(fit, max_time_s=0.0)


def test_span_path_covers_the_tracked_points_from_result_and_file_alike(fit):
    tracked = float(fit.shots[0].residual_t_s[-1] - fit.shots[0].t0_s)  # 59 frames at 2000 frames/s
    assert tracked_span_s(fit, 0) == pytest.approx(59 / 2000.0, abs=END_TIME_TOL_S)
    p = fitted_span_path(fit, points=50)
    assert p.reached == "time" and p.t_s[-1] == pytest.approx(tracked, abs=END_TIME_TOL_S)
    assert p.t_s.size == 51 and p.n_samples == 0
    ff = fit_from_json(fit_to_json(fit), "fit.json")
    assert tracked_span_s(ff, 0) == pytest.approx(tracked, abs=END_TIME_TOL_S)
    np.testing.assert_allclose(fitted_span_path(ff, points=50).y_m, p.y_m, atol=SAME_PATH_TOL_M)
    banded = fitted_span_path(fit, points=50, n_samples=50, rng=1)
    assert banded.n_samples == 50 and np.all(banded.y_sigma_m[1:] > 0)
    with pytest.raises(ValueError, match="points must be a positive integer"):
        fitted_span_path(fit, points=0)
    with pytest.raises(ValueError, match="shot: expected an index 0..0"):
        tracked_span_s(fit, 2)
