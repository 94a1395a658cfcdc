"""Aerodynamic laws against published correlations, experimental sphere drag and their own definitions."""

from __future__ import annotations

import math

import fluids.drag
import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from hopscope.fitting.bb import BB
from hopscope.fitting.laws import (
    SPHERE_CORRELATIONS,
    AerodynamicDecay,
    ConstantDrag,
    ExponentialDecay,
    LinearLift,
    SaturatingLift,
    SphereDrag,
    cd_brown_lawler,
    cd_clift_grace_weber,
    reynolds_number,
    spin_ratio,
)

CLIFT_FORMULA_RTOL = 1e-12
EXPERIMENT_REL_BAND = 0.08  # ±8 % around the tabulated experimental range
SATURATING_FORM_RTOL = 1e-14
SUBCRITICAL_RISE_MIN = 0.10  # C_D(1e5) / C_D(1e4) − 1 of experiment is ≈ 0.2

# Experimental drag of smooth spheres, from the tables of Lapple and of Schlichting as reproduced by
# Morsi & Alexander (1972), "An investigation of particle trajectories in two-phase flow systems",
# J. Fluid Mech. 55:193-208: (Re, low, high) of the tabulated C_D.
EXPERIMENTAL_SPHERE_CD = [(1e4, 0.40, 0.40), (5e4, 0.47, 0.50), (1e5, 0.47, 0.50)]


def test_clift_matches_fluids_exactly():
    # Reference: fluids.drag.Clift (Bell, fluids library), implementing Clift, Grace & Weber (1978),
    # *Bubbles, Drops, and Particles*, Table 5.2, as described by Barati et al. (2014), Powder Tech. 257:11.
    re = np.logspace(0.0, 6.0, 3001)
    ref = np.array([fluids.drag.Clift(float(r)) for r in re])
    np.testing.assert_allclose(cd_clift_grace_weber(re), ref, rtol=CLIFT_FORMULA_RTOL)
    # scalars and piece boundaries, one at a time and mixed with other pieces
    for r in (1.0, 20.0, 260.0, 1500.0, 12000.0, 44000.0, 338000.0, 400000.0, 1e6):
        assert float(cd_clift_grace_weber(r)) == pytest.approx(fluids.drag.Clift(r), rel=CLIFT_FORMULA_RTOL)
        mixed = cd_clift_grace_weber(np.array([r, 3.0, 3e5]))
        assert mixed[0] == pytest.approx(fluids.drag.Clift(r), rel=CLIFT_FORMULA_RTOL)


@pytest.mark.parametrize("name", sorted(SPHERE_CORRELATIONS))
@pytest.mark.parametrize(("re", "low", "high"), EXPERIMENTAL_SPHERE_CD)
def test_correlations_follow_experimental_sphere_drag(name, re, low, high):
    # Source: Lapple and Schlichting tables via Morsi & Alexander (1972), JFM 55:193 (see the table above).
    cd = float(SPHERE_CORRELATIONS[name](re))
    assert low * (1 - EXPERIMENT_REL_BAND) <= cd <= high * (1 + EXPERIMENT_REL_BAND), (name, re, cd)


def test_default_sphere_law_has_the_subcritical_rise():
    # Experiment (Morsi & Alexander 1972, JFM 55:193, tables of Lapple and Schlichting): C_D rises from
    # ≈0.40 at Re 1e4 to 0.47-0.50 at 1e5. Morrison (2013) as implemented in fluids.drag.Morrison misses
    # most of it, which is why it is not a default here.
    default = SphereDrag()
    rise = (
        default.coefficient(np.array([1e5]), np.array([0.0]))[0]
        / default.coefficient(np.array([1e4]), np.array([0.0]))[0]
    )
    assert rise - 1 > SUBCRITICAL_RISE_MIN
    assert fluids.drag.Morrison(1e5) / fluids.drag.Morrison(1e4) - 1 < SUBCRITICAL_RISE_MIN


def test_brown_lawler_formula_value():
    # Brown & Lawler (2003), J. Environ. Eng. 129:222, eq. 19, evaluated by hand at Re = 1e4:
    # 24e-4 (1 + 0.150e4^0.681) + 0.407 / 1.871.
    expected = 24e-4 * (1 + 0.150 * 1e4**0.681) + 0.407 / (1 + 0.871)
    assert float(cd_brown_lawler(1e4)) == pytest.approx(expected, rel=1e-14)


@pytest.mark.parametrize("fn", [cd_clift_grace_weber, cd_brown_lawler])
@pytest.mark.parametrize("bad", [0.0, -1.0, math.nan, math.inf])
def test_correlations_reject_bad_reynolds(fn, bad):
    with pytest.raises(ValueError, match="Reynolds number must be positive and finite"):
        fn(np.array([1e4, bad]))


def test_sphere_drag_scale_and_spin_drag():
    re = np.array([2e4, 4e4, 6e4])
    s = np.array([0.0, 0.1, 0.3])
    base = cd_clift_grace_weber(re)
    law = SphereDrag(scale=1.1, spin_drag=0.5)
    np.testing.assert_allclose(law.coefficient(re, s), 1.1 * base + 0.5 * s**2, rtol=1e-15)
    bl = SphereDrag(correlation="brown-lawler")
    np.testing.assert_allclose(bl.coefficient(re, s), cd_brown_lawler(re), rtol=1e-15)
    with pytest.raises(ValueError, match="unknown sphere correlation 'morrison'"):
        SphereDrag(correlation="morrison")


def test_constant_drag_shapes_and_spin_drag():
    re = np.full(3, 3e4)
    s = np.array([0.0, 0.2, -0.2])
    np.testing.assert_array_equal(ConstantDrag(0.45).coefficient(re, s), [0.45, 0.45, 0.45])
    np.testing.assert_allclose(ConstantDrag(0.45, 1.0).coefficient(re, s), 0.45 + s**2, rtol=1e-15)
    per_shot = ConstantDrag(np.array([0.4, 0.5, 0.6]))
    np.testing.assert_array_equal(per_shot.coefficient(re, s), [0.4, 0.5, 0.6])
    out = ConstantDrag(0.45).coefficient(re, s)
    out *= 2  # a plain writable array, not a read-only broadcast view
    assert out[0] == 0.9


@given(s=st.floats(min_value=-2.0, max_value=2.0, allow_nan=False))
def test_lift_laws_are_odd_in_spin_ratio(s):
    for law in (LinearLift(0.8), SaturatingLift()):
        pos = float(law.coefficient(np.array([s]))[0])
        neg = float(law.coefficient(np.array([-s]))[0])
        assert pos == pytest.approx(-neg, abs=1e-15)
        assert pos * s >= 0


def test_saturating_lift_equals_published_form_and_saturates():
    # The saturating form C_L = 1.12 S / (0.583 + 2.333 S) (secondary source, see fitting.laws): the
    # defaults must reproduce it for S > 0.
    s = np.linspace(0.01, 1.0, 100)
    published = 1.12 * s / (0.583 + 2.333 * s)
    np.testing.assert_allclose(SaturatingLift().coefficient(s), published, rtol=SATURATING_FORM_RTOL)
    law = SaturatingLift(cl_max=0.5, s_half=0.2)
    assert float(law.coefficient(np.array([1e6]))[0]) == pytest.approx(0.5, rel=1e-5)
    slope = float(law.coefficient(np.array([1e-8]))[0]) / 1e-8
    assert slope == pytest.approx(0.5 / 0.2, rel=1e-6)
    with pytest.raises(ValueError, match="s_half must be positive"):
        SaturatingLift(s_half=0.0)


def test_decay_laws_rates_and_decay_length():
    bb = BB(2.5e-4)
    kw = {
        "density_kgm3": 1.2,
        "area_m2": bb.area_m2,
        "radius_m": bb.radius_m,
        "inertia_kgm2": bb.inertia_kgm2,
    }
    omega = np.array([3000.0, -3000.0])
    speed = np.array([90.0, 90.0])
    np.testing.assert_allclose(ExponentialDecay(2.0).rate(omega, speed, **kw), -omega / 2.0, rtol=1e-15)
    np.testing.assert_array_equal(ExponentialDecay().rate(omega, speed, **kw), [0.0, 0.0])
    aero = AerodynamicDecay(0.02)
    length = aero.decay_length_m(**{k: kw[k] for k in kw})
    # uniform sphere I = 0.4 m r², so L = 0.8 m / (c ρ A) (Smits & Smith 1994 torque form, see fitting.laws)
    assert float(length) == pytest.approx(0.8 * bb.mass_kg / (0.02 * 1.2 * bb.area_m2), rel=1e-12)
    # dω/dt = −ω u / L: spin falls by e per decay length of distance flown
    np.testing.assert_allclose(aero.rate(omega, speed, **kw), -omega * speed / length, rtol=1e-12)


@pytest.mark.parametrize("tau", [0.0, -1.0, math.nan, np.array([1.0, -2.0])])
def test_exponential_decay_rejects_bad_time_constant(tau):
    with pytest.raises(ValueError, match="tau_s must be positive"):
        ExponentialDecay(tau)


@pytest.mark.parametrize("c", [-0.01, math.inf, math.nan])
def test_aerodynamic_decay_rejects_bad_slope(c):
    with pytest.raises(ValueError, match="torque_slope must be finite and >= 0"):
        AerodynamicDecay(c)


def test_reynolds_number_and_spin_ratio():
    # Definitions (design.md): Re = ρ u d / μ, S = r ω / u.
    assert float(reynolds_number(100.0, 6e-3, 1.2, 1.8e-5)) == pytest.approx(1.2 * 100 * 6e-3 / 1.8e-5)
    assert float(spin_ratio(-1000.0, 50.0, 3e-3)) == pytest.approx(-0.06)


@given(cl=st.floats(min_value=-0.45, max_value=0.45, allow_nan=False))
def test_lift_laws_invert(cl):
    for law in (LinearLift(0.7), SaturatingLift()):
        s = law.spin_ratio_for(cl)
        assert float(law.coefficient(np.array([s]))[0]) == pytest.approx(cl, rel=1e-12, abs=1e-15)


def test_saturating_lift_inverse_rejects_unreachable_coefficient():
    with pytest.raises(ValueError, match="out of reach of the saturating law"):
        SaturatingLift(cl_max=0.4).spin_ratio_for(0.4)


def test_bb_geometry_and_energy():
    # Uniform solid sphere: A = π d²/4, I = (2/5) m r² (e.g. Goldstein, *Classical Mechanics*, moments of
    # inertia; from memory); kinetic energy ½ m v². 6 mm-class BB default diameter 5.95 mm
    # (common practice, no published source).
    bb = BB(2.5e-4)
    assert bb.diameter_m == pytest.approx(5.95e-3)
    assert bb.radius_m == pytest.approx(2.975e-3)
    assert bb.area_m2 == pytest.approx(math.pi * 5.95e-3**2 / 4, rel=1e-15)
    assert bb.inertia_kgm2 == pytest.approx(0.4 * 2.5e-4 * 2.975e-3**2, rel=1e-15)
    assert bb.kinetic_energy_j(100.0) == pytest.approx(1.25, rel=1e-15)  # 0.25 g at 100 m/s


@pytest.mark.parametrize(
    ("mass", "diameter", "match"),
    [
        (0.0, 5.95e-3, "BB mass must be a positive finite number"),
        (-1e-4, 5.95e-3, "BB mass must be a positive finite number"),
        (math.nan, 5.95e-3, "BB mass must be a positive finite number"),
        (2.5e-4, 0.0, "BB diameter must be a positive finite number"),
        (2.5e-4, math.inf, "BB diameter must be a positive finite number"),
        (1.0, 5.95e-3, "outside 0.01..10 g"),
        (2.5e-4, 0.5, "outside 1..20 mm"),
    ],
)
def test_bb_rejects_bad_values(mass, diameter, match):
    with pytest.raises(ValueError, match=match):
        BB(mass, diameter)
