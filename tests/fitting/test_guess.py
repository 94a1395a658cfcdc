"""Initial guesses from the data: close to the truth on clean tracks, inside the bounds on bad ones."""

from __future__ import annotations

import math

import numpy as np
import pytest

from hopscope.fitting.air import Air
from hopscope.fitting.bb import BB
from hopscope.fitting.guess import BOUNDS, guess_decay_param, guess_drag_param, guess_shot
from hopscope.fitting.observe import ModelSpec, ShotData, drag_coefficient_at, simulate_shot

SPEC = ModelSpec(BB(2.5e-4), Air.standard())
TRUTH = {
    "speed_mps": 100.0,
    "elevation_rad": 0.02,
    "lift_coefficient": 0.2,
    "drag_param": 0.45,
    "decay_param": 0.3,
}

#: Guess tolerances on a clean track: the polynomial is a local approximation, not the fit.
SPEED_REL_TOL = 2e-3
ELEVATION_TOL_RAD = 2e-3
POSITION_TOL_M = 1e-4
CD_REL_TOL = 0.05
CL_ABS_TOL = 0.02
#: A guess clipped to its bound sits just inside it (the clip margin is 1e-3 of the range).
CLIPPED_REL_TOL = 0.05
#: The speed of an exactly quadratic path comes back to round-off of the polynomial fit.
EXACT_SPEED_REL_TOL = 1e-6
#: The sphere law's scale guess against the truth (the guess is a local approximation).
SCALE_GUESS_REL_TOL = 0.1


@pytest.mark.parametrize(("n", "fps"), [(40, 2000.0), (400, 1000.0)])
def test_guesses_are_close_on_clean_tracks(n, fps):
    shot = simulate_shot(SPEC, t_s=np.arange(n) / fps, x0_m=0.3, y0_m=-0.05, **TRUTH)
    g = guess_shot(shot, SPEC)
    assert g.speed_mps == pytest.approx(TRUTH["speed_mps"], rel=SPEED_REL_TOL)
    assert g.elevation_rad == pytest.approx(TRUTH["elevation_rad"], abs=ELEVATION_TOL_RAD)
    assert g.x0_m == pytest.approx(0.3, abs=POSITION_TOL_M)
    assert g.y0_m == pytest.approx(-0.05, abs=POSITION_TOL_M)
    assert g.drag_coefficient == pytest.approx(0.45, rel=CD_REL_TOL)
    assert g.lift_coefficient == pytest.approx(0.2, abs=CL_ABS_TOL)


def _inside(name, v):
    lo, hi = BOUNDS[name]
    return lo < v < hi


def test_guesses_stay_inside_bounds_on_a_noisy_short_track():
    rng = np.random.default_rng(5)
    shot = simulate_shot(SPEC, t_s=np.arange(5) / 1000.0, sigma_m=5e-3, rng=rng, **TRUTH)
    g = guess_shot(shot, SPEC)
    assert _inside("speed_mps", g.speed_mps)
    assert _inside("elevation_rad", g.elevation_rad)
    assert _inside("drag_coefficient", g.drag_coefficient)
    assert _inside("lift_coefficient", g.lift_coefficient)


def test_vacuum_track_gives_the_lowest_drag_and_no_lift():
    # a parabola (no air): the along-track deceleration is gravity's alone, so C_D → its lower bound
    t = np.arange(30) / 1000.0
    v, th, g0 = 80.0, 0.1, SPEC.gravity_mps2
    x = v * math.cos(th) * t
    y = v * math.sin(th) * t - 0.5 * g0 * t**2
    g = guess_shot(ShotData(t, x, y, np.full(t.size, 1e-4)), SPEC)
    assert g.drag_coefficient == pytest.approx(BOUNDS["drag_coefficient"][0], rel=CLIPPED_REL_TOL)
    assert abs(g.lift_coefficient) < 1e-3
    assert g.speed_mps == pytest.approx(v, rel=EXACT_SPEED_REL_TOL)


def test_saturating_lift_guess_respects_its_ceiling():
    spec = ModelSpec(SPEC.bb, SPEC.air, lift="saturating")
    t = np.arange(30) / 1000.0
    # strong upward curvature: more lift than the saturating law can give
    shot = ShotData(t, 100 * t, 2000 * t**2, np.full(t.size, 1e-4))
    assert abs(guess_shot(shot, spec).lift_coefficient) < spec.cl_limit


def test_points_that_do_not_move_are_rejected():
    t = np.arange(10) / 1000.0
    with pytest.raises(ValueError, match="do not move"):
        guess_shot(ShotData(t, np.zeros(10), np.zeros(10), np.full(10, 1e-3), label="still"), SPEC)


def test_shared_guesses():
    shots = [
        simulate_shot(SPEC, t_s=np.arange(40) / 2000.0, **{**TRUTH, "speed_mps": v}) for v in (80.0, 110.0)
    ]
    guesses = [guess_shot(s, SPEC) for s in shots]
    assert guess_drag_param(guesses, SPEC) == pytest.approx(0.45, rel=CD_REL_TOL)
    sphere = ModelSpec(SPEC.bb, SPEC.air, drag="sphere")
    scale = guess_drag_param(guesses, sphere)
    ref = float(drag_coefficient_at(sphere, 1.0, 95.0)[()])
    assert scale * ref == pytest.approx(0.45, rel=SCALE_GUESS_REL_TOL)
    assert guess_decay_param(SPEC) > 0
