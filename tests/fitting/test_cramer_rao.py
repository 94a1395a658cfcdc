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
from hopscope.fitting.observe import ModelSpec, simulate_shot

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
