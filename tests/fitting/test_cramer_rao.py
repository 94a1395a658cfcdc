"""The fitter's noise-only σ against a Cramér–Rao bound computed here from an independent Fisher matrix.

The test writes its own equations of motion (planar flight, quadratic drag, linear Magnus lift with
exponentially decaying spin), integrates them with scipy's DOP853 and differentiates the path by central
finite differences. For independent Gaussian position errors of σ per coordinate, the Fisher information of
the parameters θ is F = Σᵢ Jᵢᵀ Jᵢ / σ² and the smallest unbiased covariance is F⁻¹ (Cramér 1946,
*Mathematical Methods of Statistics*, §32.3; Rao 1945, Bull. Calcutta Math. Soc. 37:81). A least-squares
fit on a model that is nearly linear over its error bars reaches the bound, so the fitter's reported
noise-only standard errors must equal √diag(F⁻¹).

This replaces ``test_drag_stderr_matches_the_cramer_rao_estimate`` in ``tests/fitting/test_estimate.py``
(a hard-coded 0.018 at 15 %).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from hopscope.fitting.air import Air
from hopscope.fitting.bb import BB
from hopscope.fitting.estimate import fit_shots
from hopscope.fitting.observe import ModelSpec, ShotData, simulate_shot

#: The fitter's σ and the bound computed here agree to this fraction (the issue's 1 %).
CRAMER_RAO_RTOL = 0.01
#: DOP853 tolerances: far below the finite-difference steps' effect on the path.
ODE_RTOL = 1e-12
ODE_ATOL = 1e-14
#: Relative finite-difference step per parameter (central differences: truncation ~ step², rounding ~
#: ODE error / step; both far below 1e-4 of the derivative at this step).
FD_REL_STEP = 1e-5

G = 9.80665  # standard gravity, m/s² (CGPM 1901, 3rd General Conference), written out here on purpose
SIGMA_M = 5e-4
#: Spin-decay time constant, s: a 20 ms track cannot fix it, so the fitter holds it at its default (3 s);
#: the truth uses the same value so the fitted and the true model coincide.
TAU_S = 3.0


def _path(theta, t, *, rho, area, mass):
    """x, y (m) at times t of a shot with θ = (x0, y0, speed, elevation, C_L0, C_D); own model."""
    x0, y0, v0, el, cl0, cd = theta
    k = 0.5 * rho * area / mass  # 1/m

    def rhs(ti, s):
        _, _, vx, vy = s
        u = math.hypot(vx, vy)
        # lift ½ρA C_L u (n × u) with n = +z and C_L·u = C_L0·u0·e^(−t/τ) under the linear law
        lift = k * cl0 * v0 * math.exp(-ti / TAU_S)
        return [vx, vy, -k * cd * u * vx - lift * vy, -k * cd * u * vy + lift * vx - G]

    s0 = [x0, y0, v0 * math.cos(el), v0 * math.sin(el)]
    sol = solve_ivp(rhs, (t[0], t[-1]), s0, method="DOP853", t_eval=t, rtol=ODE_RTOL, atol=ODE_ATOL)
    assert sol.success, sol.message
    return sol.y[0], sol.y[1]


def _cramer_rao_sigma(theta, t, sigma, **consts):
    theta = np.asarray(theta, dtype=float)
    cols = []
    for i in range(theta.size):
        h = FD_REL_STEP * max(abs(theta[i]), 1e-2)
        up, dn = theta.copy(), theta.copy()
        up[i] += h
        dn[i] -= h
        xu, yu = _path(up, t, **consts)
        xd, yd = _path(dn, t, **consts)
        cols.append(np.concatenate([xu - xd, yu - yd]) / (2 * h))
    jac = np.column_stack(cols) / sigma
    fisher = jac.T @ jac
    return np.sqrt(np.diag(np.linalg.inv(fisher)))


@pytest.mark.parametrize(
    ("n_points", "fps", "speed", "cl0", "cd"),
    [
        (40, 2000.0, 100.0, 0.2, 0.45),  # the close lane: 20 ms of flight
        (60, 1000.0, 85.0, 0.1, 0.40),  # a longer, slower track
    ],
)
def test_fitter_sigma_equals_the_computed_cramer_rao_bound(n_points, fps, speed, cl0, cd):
    bb, air = BB(2.5e-4), Air.standard()
    spec = ModelSpec(bb, air)
    t = np.arange(n_points) / fps
    truth = dict(speed_mps=speed, elevation_rad=0.01, lift_coefficient=cl0, drag_param=cd)
    # noise-free data: the fit lands on the truth, so fitter and bound are evaluated at the same θ
    shot = simulate_shot(spec, t_s=t, sigma_m=SIGMA_M, rng=None, decay_param=1.0 / TAU_S, **truth)
    fit = fit_shots([shot], bb=bb, air=air)
    assert fit.converged, fit.reason
    assert fit.decay_fixed_value == pytest.approx(1.0 / TAU_S)  # the model here holds τ at 3 s too
    s = fit.shots[0]
    fitted = [s.x0_m, s.y0_m, s.speed_mps, s.elevation_rad, s.lift_coefficient, fit.drag_coefficient]

    theta = (0.0, 0.0, speed, 0.01, cl0, cd)
    bound = _cramer_rao_sigma(theta, t, SIGMA_M, rho=air.density_kgm3, area=bb.area_m2, mass=bb.mass_kg)
    got = np.array([e.stderr_noise for e in fitted])
    np.testing.assert_allclose(got, bound, rtol=CRAMER_RAO_RTOL)


#: Seeds for the statistical check of the error bars (see the docstring below for the sizing).
N_SEEDS = 400
#: Band for the RMS of z = (estimate − truth) / reported σ over the seeds.
Z_RMS_BAND = (0.88, 1.13)
#: Largest mean of z allowed (an estimator bias in units of σ): five standard errors of the mean at N = 400.
BIAS_MAX_SIGMA = 0.25
#: The band must reject error bars this many times too large or too small.
SIGMA_MISSCALE = 1.3


@pytest.fixture(scope="module")
def z_scores():
    bb, air = BB(2.5e-4), Air.standard()
    spec = ModelSpec(bb, air)
    t = np.arange(40) / 2000.0
    truth = dict(speed_mps=100.0, elevation_rad=0.01, lift_coefficient=0.2, drag_param=0.45)
    exact = simulate_shot(spec, t_s=t, sigma_m=SIGMA_M, rng=None, decay_param=1.0 / TAU_S, **truth)
    gen = np.random.default_rng(20261202)
    z = []
    for _ in range(N_SEEDS):
        noise = gen.normal(size=(2, t.size)) * SIGMA_M
        shot = ShotData(t, exact.x_m + noise[0], exact.y_m + noise[1], exact.sigma_m, None, "seed")
        fit = fit_shots([shot], bb=bb, air=air)
        s = fit.shots[0]
        z.append(
            [
                (e.value - v) / e.stderr
                for e, v in (
                    (s.speed_mps, truth["speed_mps"]),
                    (s.elevation_rad, truth["elevation_rad"]),
                    (s.lift_coefficient, truth["lift_coefficient"]),
                    (fit.drag_coefficient, truth["drag_param"]),
                )
            ]
        )
    return np.array(z)


#: Seeds for the long track (0.4 s at 1000 fps, decay measured), fewer because each fit is ~5x dearer.
N_LONG_SEEDS = 300


@pytest.fixture(scope="module")
def long_z_scores():
    """z of speed, C_L, C_D and the spin-decay time τ on a 0.4 s track (1 mm noise), where τ is measured."""
    bb, air = BB(2.5e-4), Air.standard()
    spec = ModelSpec(bb, air)
    t = np.arange(400) / 1000.0
    truth = dict(speed_mps=100.0, elevation_rad=0.01, lift_coefficient=0.2, drag_param=0.45)
    tau = 1.0
    exact = simulate_shot(spec, t_s=t, sigma_m=1e-3, rng=None, decay_param=1.0 / tau, **truth)
    gen = np.random.default_rng(20261203)
    z = []
    for _ in range(N_LONG_SEEDS):
        noise = gen.normal(size=(2, t.size)) * 1e-3
        shot = ShotData(t, exact.x_m + noise[0], exact.y_m + noise[1], exact.sigma_m, None, "seed")
        fit = fit_shots([shot], bb=bb, air=air)
        s = fit.shots[0]
        assert fit.spin_decay_time_s.value is not None
        z.append(
            [
                (e.value - v) / e.stderr
                for e, v in (
                    (s.speed_mps, truth["speed_mps"]),
                    (s.lift_coefficient, truth["lift_coefficient"]),
                    (fit.drag_coefficient, truth["drag_param"]),
                    (fit.spin_decay_time_s, tau),
                )
            ]
        )
    return np.array(z)


def _rms(z):
    return np.sqrt(np.mean(np.square(z), axis=0))


@pytest.mark.slow
@pytest.mark.parametrize("which", ["z_scores", "long_z_scores"], ids=["close-track", "long-track"])
def test_error_bars_are_honest_over_many_seeds(request, which):
    """Speed, elevation, C_L and C_D: the RMS of (estimate − truth)/σ over 400 noise draws lies in 0.88–1.13.

    Sizing: for honest σ the RMS of N standard-normal z has a standard error ≈ 1/√(2N) = 0.035 (N = 400),
    so the band is ±3.4 standard errors around 1 (a false failure has probability ≈ 7e-4 per parameter).
    Error bars 1.3× too large give an RMS of 0.77 (band edge 4 standard errors away), 1.3× too small an
    RMS of 1.3 (3.7 standard errors away): either fails with probability > 0.9999. The seeds are fixed, so
    the verdict is reproducible. This supersedes the single-seed "within 4σ" checks of the fits in
    ``tests/fitting/test_estimate.py`` (``Z_TOL``), which pass for error bars several times too large.

    The long track (300 draws, standard error 0.041: band ±2.9/3.2 standard errors, power against 1.3×
    still > 0.999) adds the spin-decay time τ, which only a long track measures.
    """
    z_scores = request.getfixturevalue(which)
    rms = _rms(z_scores)
    assert np.all(rms > Z_RMS_BAND[0]) and np.all(rms < Z_RMS_BAND[1]), rms
    assert np.all(np.abs(np.mean(z_scores, axis=0)) < BIAS_MAX_SIGMA), np.mean(z_scores, axis=0)


@pytest.mark.slow
@pytest.mark.parametrize("scale", [SIGMA_MISSCALE, 1.0 / SIGMA_MISSCALE])
def test_the_band_rejects_error_bars_off_by_thirty_percent(z_scores, scale):
    # the same draws with every reported σ multiplied by ``scale``: the band above must fail them
    rms = _rms(z_scores / scale)
    assert np.all((rms < Z_RMS_BAND[0]) | (rms > Z_RMS_BAND[1])), rms
