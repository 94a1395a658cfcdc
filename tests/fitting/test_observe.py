"""Observation model: ShotData validation, model path against closed forms and scipy's DOP853."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from hopscope.fitting.air import Air
from hopscope.fitting.bb import BB
from hopscope.fitting.laws import LinearLift, SaturatingLift
from hopscope.fitting.observe import (
    MIN_POINTS,
    ModelSpec,
    RowParams,
    ShotData,
    StackedShots,
    initial_spin_radps,
    model_positions,
    simulate_shot,
)

CLOSED_FORM_TOL_M = 1e-9
DOP853_TOL_M = 1e-6
STEP_TOL_M = 1e-6
#: Drag-only closed form against the model path, m (RK4 + Hermite on the fit grid).
DRAG_ONLY_TOL_M = 1e-7
#: Reference integration tolerances (scipy DOP853 rtol and atol).
REF_TOL = 1e-12
#: The same rows integrated alone and together agree to round-off (m, and relative for C_L).
ROUNDOFF_TOL = 1e-12

BB_025 = BB(2.5e-4)
AIR = Air.standard()


def _rows(**kw):
    base = dict(
        x0_m=0.0,
        y0_m=0.0,
        speed_mps=100.0,
        elevation_rad=0.02,
        lift_coefficient=0.0,
        drag_param=0.45,
        decay_param=0.3,
    )
    base.update(kw)
    keys = ("x0_m", "y0_m", "speed_mps", "elevation_rad", "lift_coefficient", "drag_param", "decay_param")
    arrs = np.broadcast_arrays(*(np.atleast_1d(np.asarray(base[k], dtype=float)) for k in keys))
    return RowParams(*(a.copy() for a in arrs))


def _shot(n=10, **kw):
    t = np.arange(n) * 1e-3
    args = dict(t_s=t, x_m=100 * t, y_m=np.zeros(n), sigma_m=np.full(n, 1e-3))
    args.update(kw)
    return ShotData(**args)


# ------------------------------------------------------------------------------------------ ShotData


@pytest.mark.parametrize(
    ("kw", "match"),
    [
        ({"n": MIN_POINTS - 1}, r"t_s has 3 points, need at least 4"),
        ({"x_m": np.r_[np.zeros(9), np.nan]}, r"x_m has a non-finite value"),
        ({"y_m": np.r_[np.zeros(9), np.inf]}, r"y_m has a non-finite value"),
        ({"t_s": np.r_[0, 2, 1, np.arange(3, 10)] * 1e-3}, r"t_s is not strictly increasing"),
        ({"sigma_m": np.r_[np.ones(9), 0.0]}, r"sigma_m must be > 0"),
        ({"y_m": np.zeros(8)}, r"y_m has 8 values, t_s has 10"),
        ({"cal_offsets_m": np.zeros((3, 9, 2))}, r"cal_offsets_m must have shape \(K, 10, 2\)"),
        ({"cal_offsets_m": np.full((3, 10, 2), np.nan)}, r"cal_offsets_m has a non-finite value"),
    ],
)
def test_shotdata_rejects_bad_input(kw, match):
    n = kw.pop("n", 10)
    with pytest.raises(ValueError, match=match):
        _shot(n=n, **kw)


def test_shotdata_is_read_only_and_counts():
    s = _shot(cal_offsets_m=np.zeros((5, 10, 2)))
    assert s.n_points == 10 and s.n_calibrations == 5
    with pytest.raises(ValueError):
        s.x_m[0] = 1.0
    assert _shot(cal_offsets_m=np.zeros((0, 10, 2))).cal_offsets_m is None


# ------------------------------------------------------------------------------------------ model path


def test_no_drag_no_lift_is_an_exact_parabola():
    # closed form of projectile motion without air (Galileo; any mechanics text, e.g. Marion & Thornton,
    # Classical Dynamics, §2.4): x = x0 + v cosθ t, y = y0 + v sinθ t − g t²/2
    spec = ModelSpec(BB_025, AIR)
    t = np.linspace(0.0, 0.3, 50)[None, :]
    rows = _rows(drag_param=0.0, lift_coefficient=0.0, x0_m=0.4, y0_m=0.1)
    pos = model_positions(spec, rows, t)[0]
    v, th, g = 100.0, 0.02, spec.gravity_mps2
    np.testing.assert_allclose(pos[:, 0], 0.4 + v * math.cos(th) * t[0], atol=CLOSED_FORM_TOL_M)
    np.testing.assert_allclose(
        pos[:, 1], 0.1 + v * math.sin(th) * t[0] - 0.5 * g * t[0] ** 2, atol=CLOSED_FORM_TOL_M
    )


def test_quadratic_drag_without_gravity_matches_closed_form():
    # dv/dt = −k v² → x(t) = ln(1 + k v0 t)/k, k = ρ A C_D / (2 m) (Marion & Thornton, Classical Dynamics,
    # §2.4, retarding force ∝ v²)
    spec = ModelSpec(BB_025, AIR, gravity_mps2=0.0)
    t = np.linspace(0.0, 0.5, 80)[None, :]
    rows = _rows(elevation_rad=0.0, lift_coefficient=0.0)
    pos = model_positions(spec, rows, t)[0]
    k = 0.5 * AIR.density_kgm3 * BB_025.area_m2 * 0.45 / BB_025.mass_kg
    np.testing.assert_allclose(pos[:, 0], np.log1p(k * 100.0 * t[0]) / k, atol=DRAG_ONLY_TOL_M)
    np.testing.assert_allclose(pos[:, 1], 0.0, atol=CLOSED_FORM_TOL_M)


def _dop853(spec, v0, el, cl0, cd, rate, t_eval):
    """Independent integration with scipy's DOP853 of the same equations (planar, backspin about +z)."""
    q = 0.5 * spec.air.density_kgm3 * spec.bb.area_m2 / spec.bb.mass_kg
    r = spec.bb.radius_m
    w0 = cl0 * v0 / (spec.lift_k * r)

    def rhs(_t, y):
        _, _, vx, vy, w = y
        u = math.hypot(vx, vy)
        cl = spec.lift_k * r * w / u
        return [
            vx,
            vy,
            -q * u * (cd * vx + cl * vy),
            q * u * (cl * vx - cd * vy) - spec.gravity_mps2,
            -rate * w,
        ]

    y0 = [0.0, 0.0, v0 * math.cos(el), v0 * math.sin(el), w0]
    sol = solve_ivp(rhs, (0, t_eval[-1]), y0, method="DOP853", t_eval=t_eval, rtol=REF_TOL, atol=REF_TOL)
    return sol.y[0], sol.y[1]


def test_model_path_matches_scipy_dop853_with_lift_and_decay():
    # reference integrator: scipy.integrate.solve_ivp, DOP853 (Hairer, Nørsett & Wanner 1993)
    spec = ModelSpec(BB_025, AIR)
    t = np.linspace(0.0, 0.8, 120)
    rows = _rows(lift_coefficient=0.2, drag_param=0.45, decay_param=0.5)
    pos = model_positions(spec, rows, t[None, :])[0]
    x, y = _dop853(spec, 100.0, 0.02, 0.2, 0.45, 0.5, t)
    np.testing.assert_allclose(pos[:, 0], x, atol=DOP853_TOL_M)
    np.testing.assert_allclose(pos[:, 1], y, atol=DOP853_TOL_M)


def test_fit_step_is_accurate_against_a_fine_step():
    spec = ModelSpec(BB(1.2e-4), AIR)  # a light, fast BB is the hardest case
    t = np.linspace(0.0, 1.0, 200)
    kw = dict(speed_mps=150.0, elevation_rad=0.05, lift_coefficient=0.3, drag_param=0.45, decay_param=1.0)
    coarse = simulate_shot(spec, t_s=t, **kw)
    fine = simulate_shot(spec, t_s=t, step_s=1e-4, **kw)
    assert np.max(np.abs(coarse.x_m - fine.x_m)) < STEP_TOL_M
    assert np.max(np.abs(coarse.y_m - fine.y_m)) < STEP_TOL_M


def test_rows_integrate_independently():
    spec = ModelSpec(BB_025, AIR)
    t = np.tile(np.linspace(0, 0.05, 20), (2, 1))
    both = model_positions(spec, _rows(speed_mps=[90.0, 110.0], drag_param=[0.4, 0.5]), t)
    one = model_positions(spec, _rows(speed_mps=110.0, drag_param=0.5), t[:1])
    np.testing.assert_allclose(both[1], one[0], atol=ROUNDOFF_TOL)


@pytest.mark.parametrize("lift", ["linear", "saturating"])
def test_initial_spin_inverts_the_lift_law(lift):
    spec = ModelSpec(BB_025, AIR, lift=lift)
    cl0 = np.array([-0.2, 0.05, 0.3])
    u = np.array([80.0, 100.0, 120.0])
    w = initial_spin_radps(spec, cl0, u)
    law = LinearLift(spec.lift_k) if lift == "linear" else SaturatingLift()
    np.testing.assert_allclose(law.coefficient(BB_025.radius_m * w / u), cl0, rtol=ROUNDOFF_TOL)


def test_stacked_shots_pad_and_mask():
    a = _shot(n=6)
    b = _shot(
        n=9, t_s=np.arange(9) * 1e-3 + 2.0, x_m=np.arange(9.0), y_m=np.ones(9), sigma_m=np.full(9, 2e-3)
    )
    st = StackedShots.from_shots([a, b])
    assert st.mask.sum() == 15 and st.t_rel_s.shape == (2, 9)
    assert st.t0_s[1] == pytest.approx(2.0) and st.t_rel_s[1, 0] == 0.0
    pos = np.stack([st.x_m, st.y_m], axis=-1) + 2e-3
    res = st.residuals(pos)
    np.testing.assert_allclose(res[1][st.mask[1]], 1.0)
