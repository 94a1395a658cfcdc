"""Estimation: self-reproduction, an independent estimator, the Fisher-information check, joint fits,
decay identifiability, calibration covariance, outliers, priors, laws and non-convergence."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.optimize import approx_fprime, least_squares

from hopscope.fitting.air import Air
from hopscope.fitting.bb import BB
from hopscope.fitting.estimate import ChronoPrior, FitProblem, fit_shots
from hopscope.fitting.guess import DEFAULT_SPIN_DECAY_TIME_S
from hopscope.fitting.observe import ModelSpec, ShotData, simulate_shot

BB_025 = BB(2.5e-4)
AIR = Air.standard()
SPEC = ModelSpec(BB_025, AIR)
TRUTH = {
    "speed_mps": 100.0,
    "elevation_rad": 0.01,
    "lift_coefficient": 0.2,
    "drag_param": 0.45,
    "decay_param": 1.0,
}

#: Noise-free data from the model must give the parameters back to this relative accuracy.
REPRODUCE_REL_TOL = 1e-6
#: scipy's least_squares on the same residual must agree with lmfit within this fraction of a σ.
INDEPENDENT_TOL_SIGMA = 1e-3
#: The batched Jacobian against scipy's forward differences (their truncation error is ~1e-6 relative).
JAC_REL_TOL = 1e-4
#: Fitted values lie within this many of their reported σ of the truth (single realisations).
Z_TOL = 4.0
#: The calibration share of a linear model equals the propagated offsets to linearisation accuracy.
LINEAR_PROPAGATION_REL_TOL = 1e-6
#: A scale error's share of the speed: the model is slightly nonlinear in the scale over the track.
SCALE_SHARE_REL_TOL = 0.02
#: Speed recovered with a tight chronograph prior at the first point, and at the muzzle (m/s).
TIGHT_PRIOR_TOL_MPS = 0.03
MUZZLE_PRIOR_TOL_MPS = 0.05
#: A fixed decay parameter comes back unchanged to the solver's tolerance (relative).
FIXED_DECAY_REL_TOL = 1e-4
#: The error-bar scale from 4× too small σ: √(reduced χ²) of one realisation.
STDERR_SCALE_REL_TOL = 0.25


def close_track(rng=None, sigma=5e-4, n=40, fps=2000.0, **kw):
    return simulate_shot(SPEC, t_s=np.arange(n) / fps, sigma_m=sigma, rng=rng, **{**TRUTH, **kw})


def long_track(rng=None, sigma=1e-3, **kw):
    return simulate_shot(SPEC, t_s=np.arange(400) / 1000.0, sigma_m=sigma, rng=rng, **{**TRUTH, **kw})


def test_noise_free_long_track_reproduces_every_parameter():
    fit = fit_shots([long_track(x0_m=0.25, y0_m=0.1)], bb=BB_025, air=AIR)
    s = fit.shots[0]
    assert fit.converged, fit.reason
    for est, truth in (
        (s.speed_mps, 100.0),
        (s.elevation_rad, 0.01),
        (s.lift_coefficient, 0.2),
        (fit.drag_coefficient, 0.45),
        (fit.spin_decay_time_s, 1.0),
        (s.x0_m, 0.25),
        (s.y0_m, 0.1),
    ):
        assert est.value == pytest.approx(truth, rel=REPRODUCE_REL_TOL)


def test_noise_free_close_track_reproduces_and_flags_the_decay():
    fit = fit_shots([close_track(decay_param=1 / DEFAULT_SPIN_DECAY_TIME_S)], bb=BB_025, air=AIR)
    s = fit.shots[0]
    assert s.speed_mps.value == pytest.approx(100.0, rel=REPRODUCE_REL_TOL)
    assert fit.drag_coefficient.value == pytest.approx(0.45, rel=REPRODUCE_REL_TOL)
    assert s.lift_coefficient.value == pytest.approx(0.2, rel=REPRODUCE_REL_TOL)
    # 20 ms of flight cannot see a 3 s decay: null with a warning, fixed at the stated default
    assert fit.spin_decay_time_s.value is None
    assert fit.decay_fixed_value == pytest.approx(1 / DEFAULT_SPIN_DECAY_TIME_S)
    assert any("spin decay not determined" in w for w in fit.warnings)


def test_lmfit_agrees_with_scipy_least_squares_on_the_same_residual():
    # independent estimator: scipy.optimize.least_squares (TRF, Branch, Coleman & Li 1999) with its own
    # finite-difference Jacobian ('3-point'), on the identical residual function
    shot = long_track(rng=11)
    fit = fit_shots([shot], bb=BB_025, air=AIR, loss="linear")
    names = fit.free_names
    lo = np.array([-np.inf] * len(names))
    problem = FitProblem([shot], fit.spec, fit.parameter_values, fit.free, lo - 0, -lo)
    start = fit.parameter_values[fit.free] * (1 + 1e-3)
    ref = least_squares(problem.residual, start, jac="3-point", method="lm", xtol=1e-14, ftol=1e-14)
    err = np.sqrt(np.diag(fit.covariance))
    np.testing.assert_array_less(np.abs(ref.x - fit.parameter_values[fit.free]) / err, INDEPENDENT_TOL_SIGMA)
    # and the batched central-difference Jacobian agrees with scipy's forward differences at the solution
    eps = 1e-7 * np.maximum(np.abs(ref.x), 1e-2)
    j_ref = approx_fprime(ref.x, problem.residual, eps)
    np.testing.assert_allclose(
        problem.jacobian(ref.x), j_ref, rtol=JAC_REL_TOL, atol=JAC_REL_TOL * np.abs(j_ref).max()
    )


def test_noisy_long_track_recovers_truth_within_its_error_bars():
    fit = fit_shots([long_track(rng=7)], bb=BB_025, air=AIR)
    s = fit.shots[0]
    assert fit.converged
    for est, truth in (
        (s.speed_mps, 100.0),
        (fit.drag_coefficient, 0.45),
        (s.lift_coefficient, 0.2),
        (fit.spin_decay_time_s, 1.0),
    ):
        assert abs(est.value - truth) < Z_TOL * est.stderr
    assert fit.statistics.dof == 800 - 7
    assert 0.8 < fit.statistics.residual_rms_sigma < 1.2
    assert fit.correlation.shape == (7, 7)
    np.testing.assert_allclose(np.diag(fit.correlation), 1.0)


def test_joint_fit_shares_drag_and_keeps_per_shot_states():
    rng = np.random.default_rng(2)
    speeds = [85.0, 100.0, 115.0]
    shots = [close_track(rng=rng, speed_mps=v, lift_coefficient=0.1 + 0.05 * i) for i, v in enumerate(speeds)]
    fit = fit_shots(shots, bb=BB_025, air=AIR)
    single = fit_shots(shots[:1], bb=BB_025, air=AIR)
    assert len(fit.shots) == 3 and fit.statistics.n_parameters == 3 * 5 + 1
    for s, v in zip(fit.shots, speeds, strict=True):
        assert abs(s.speed_mps.value - v) < Z_TOL * s.speed_mps.stderr
    assert abs(fit.drag_coefficient.value - 0.45) < Z_TOL * fit.drag_coefficient.stderr
    assert fit.drag_coefficient.stderr < single.drag_coefficient.stderr  # pooled information


def test_calibration_translation_moves_only_the_start_position():
    # every point shifted by the same δ under each perturbed calibration: the linearised refit moves x0
    # by exactly δ and leaves speed and C_D alone, so the calibration variance of x0 is mean(δ²)
    base = close_track(rng=1)
    deltas = np.array([1e-3, -2e-3, 0.5e-3, 1.5e-3])
    off = np.zeros((4, base.n_points, 2))
    off[:, :, 0] = deltas[:, None]
    shot = ShotData(base.t_s, base.x_m, base.y_m, base.sigma_m, off, "cal")
    fit = fit_shots([shot], bb=BB_025, air=AIR)
    s = fit.shots[0]
    assert s.x0_m.stderr_calibration == pytest.approx(
        math.sqrt(np.mean(deltas**2)), rel=LINEAR_PROPAGATION_REL_TOL
    )
    assert s.speed_mps.stderr_calibration < 1e-6 * s.speed_mps.stderr
    assert fit.drag_coefficient.calibration_share < 1e-6


def test_calibration_scale_error_widens_speed_and_drag():
    base = close_track(rng=4)
    scales = np.random.default_rng(0).normal(0, 3e-4, 20)
    off = np.stack([scales[:, None] * base.x_m[None], scales[:, None] * base.y_m[None]], axis=-1)
    shot = ShotData(base.t_s, base.x_m, base.y_m, base.sigma_m, off, "cal", rig_digest="r1")
    fit = fit_shots([shot], bb=BB_025, air=AIR)
    s = fit.shots[0]
    # a scale error s scales every speed by (1 + s): σ_cal(v) = v·rms(s)
    assert s.speed_mps.stderr_calibration == pytest.approx(
        100.0 * math.sqrt(np.mean(scales**2)), rel=SCALE_SHARE_REL_TOL
    )
    assert 0 < s.speed_mps.calibration_share < 1


def test_shots_of_one_rig_share_their_calibration_perturbations():
    rng = np.random.default_rng(8)
    shots = []
    scales = rng.normal(0, 3e-4, 10)
    for digest in ("same", "same"):
        b = close_track(rng=rng)
        off = np.stack([scales[:, None] * b.x_m[None], scales[:, None] * b.y_m[None]], axis=-1)
        shots.append(ShotData(b.t_s, b.x_m, b.y_m, b.sigma_m, off, "s", digest))
    fit = fit_shots(shots, bb=BB_025, air=AIR)
    i, j = fit.free_names.index("s0_speed_mps"), fit.free_names.index("s1_speed_mps")
    c = fit.covariance_calibration
    assert c[i, j] / math.sqrt(c[i, i] * c[j, j]) > 0.99  # one rig, one scale error for both shots
    with pytest.raises(ValueError, match="share a rig"):
        bad = ShotData(
            shots[1].t_s,
            shots[1].x_m,
            shots[1].y_m,
            shots[1].sigma_m,
            shots[1].cal_offsets_m[:5],
            "t",
            "same",
        )
        fit_shots([shots[0], bad], bb=BB_025, air=AIR)


def test_outliers_are_down_weighted_and_reported():
    clean = close_track(rng=9)
    y = clean.y_m.copy()
    y[[7, 23]] += [0.02, -0.03]  # 40 σ and 60 σ
    shot = ShotData(clean.t_s, clean.x_m, y, clean.sigma_m, None, "dirty")
    robust = fit_shots([shot], bb=BB_025, air=AIR)
    plain = fit_shots([shot], bb=BB_025, air=AIR, loss="linear")
    assert robust.loss == "soft_l1" and robust.statistics.n_outliers == 2
    assert any("outliers" in w for w in robust.warnings)
    s = robust.shots[0]
    assert abs(s.lift_coefficient.value - 0.2) < Z_TOL * s.lift_coefficient.stderr
    assert abs(plain.shots[0].lift_coefficient.value - 0.2) > abs(s.lift_coefficient.value - 0.2)
    assert s.outlier[[7, 23]].all() and s.outlier.sum() == 2


def test_chronograph_prior_pulls_speed_and_links_through_the_gap():
    shot = close_track(rng=5, x0_m=1.0)
    free = fit_shots([shot], bb=BB_025, air=AIR)
    tight = fit_shots([shot], bb=BB_025, air=AIR, chrono=ChronoPrior(100.0, 0.01))
    assert tight.shots[0].speed_mps.stderr < 0.5 * free.shots[0].speed_mps.stderr
    assert tight.shots[0].speed_mps.value == pytest.approx(100.0, abs=TIGHT_PRIOR_TOL_MPS)
    # the chronograph 1 m before the first point reads more: v_mz = v0 exp(q C_D d)
    q = 0.5 * AIR.density_kgm3 * BB_025.area_m2 / BB_025.mass_kg
    v_mz = 100.0 * math.exp(q * 0.45 * 1.0 / math.cos(0.01))
    muzzle = fit_shots([shot], bb=BB_025, air=AIR, chrono=ChronoPrior(v_mz, 0.01, muzzle_x_m=0.0))
    assert muzzle.shots[0].speed_mps.value == pytest.approx(100.0, abs=MUZZLE_PRIOR_TOL_MPS)
    with pytest.raises(ValueError, match="downrange of the first tracked point"):
        fit_shots([shot], bb=BB_025, air=AIR, chrono=ChronoPrior(100.0, 1.0, muzzle_x_m=5.0))


@pytest.mark.parametrize(
    ("drag", "lift", "decay", "decay_param"),
    [("sphere", "linear", "exponential", 1.0), ("constant", "saturating", "aerodynamic", 0.05)],
)
def test_other_laws_reproduce_themselves(drag, lift, decay, decay_param):
    spec = ModelSpec(BB_025, AIR, drag=drag, lift=lift, decay=decay)
    shot = simulate_shot(
        spec, t_s=np.arange(400) / 1000.0, **{**TRUTH, "drag_param": 1.05, "decay_param": decay_param}
    )
    fit = fit_shots([shot], bb=BB_025, air=AIR, drag=drag, lift=lift, decay=decay)
    assert fit.converged, fit.reason
    assert fit.parameter_values[-2] == pytest.approx(1.05, rel=REPRODUCE_REL_TOL)
    assert fit.parameter_values[fit.layout.decay] == pytest.approx(decay_param, rel=FIXED_DECAY_REL_TOL)
    assert fit.shots[0].lift_coefficient.value == pytest.approx(0.2, rel=REPRODUCE_REL_TOL)
    if drag == "sphere":
        assert fit.drag_scale.value == pytest.approx(1.05, rel=REPRODUCE_REL_TOL)


def test_aic_prefers_the_law_that_made_the_data():
    spec = ModelSpec(BB_025, AIR, drag="sphere")
    rng = np.random.default_rng(12)
    shot = simulate_shot(
        spec, t_s=np.arange(500) / 1000.0, sigma_m=2e-4, rng=rng, **{**TRUTH, "drag_param": 1.0}
    )
    right = fit_shots([shot], bb=BB_025, air=AIR, drag="sphere")
    wrong = fit_shots([shot], bb=BB_025, air=AIR, drag="constant")
    assert right.statistics.aic < wrong.statistics.aic
    assert right.statistics.bic < wrong.statistics.bic


def test_wrong_mass_runs_drag_to_its_bound_and_says_so():
    fit = fit_shots([close_track(rng=1)], bb=BB(8e-3), air=AIR)
    assert not fit.converged
    assert "drag_coefficient ran to its bound" in fit.reason


def test_bad_arguments_raise_one_line_errors():
    shot = close_track()
    with pytest.raises(ValueError, match="need at least one shot"):
        fit_shots([], bb=BB_025, air=AIR)
    with pytest.raises(ValueError, match="loss: unknown"):
        fit_shots([shot], bb=BB_025, air=AIR, loss="l3")
    with pytest.raises(ValueError, match="drag law: unknown"):
        fit_shots([shot], bb=BB_025, air=AIR, drag="cubic")
    with pytest.raises(ValueError, match="decay_fixed"):
        fit_shots([shot], bb=BB_025, air=AIR, decay_fixed=-1.0)
    with pytest.raises(ValueError, match="BB mass"):
        BB(0.0)


def test_inflated_scatter_scales_the_error_bars():
    shot = close_track(rng=6)
    noisy = simulate_shot(SPEC, t_s=shot.t_s, sigma_m=2e-3, rng=6, **TRUTH)  # 4× the stated σ
    lying = ShotData(noisy.t_s, noisy.x_m, noisy.y_m, np.full(noisy.n_points, 5e-4), None, "lying")
    fit = fit_shots([lying], bb=BB_025, air=AIR)
    assert fit.statistics.stderr_scale == pytest.approx(4.0, rel=STDERR_SCALE_REL_TOL)
    assert any("residual scatter" in w for w in fit.warnings)
