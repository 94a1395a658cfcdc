"""Coverage of the error bars (slow): over many noise realisations of simulated tracks, with a calibration
error of known spread, the truth falls inside ±1σ about 68 % and inside ±2σ at least 90 % of the time."""

from __future__ import annotations

import numpy as np
import pytest

from hopscope.fitting.air import Air
from hopscope.fitting.bb import BB
from hopscope.fitting.estimate import fit_shots
from hopscope.fitting.observe import ModelSpec, ShotData, simulate_shot

BB_025 = BB(2.5e-4)
AIR = Air.standard()
SPEC = ModelSpec(BB_025, AIR)
TRUTH = {"speed_mps": 100.0, "elevation_rad": 0.01, "lift_coefficient": 0.05, "drag_param": 0.45,
         "decay_param": 1 / 3}  # fmt: skip

#: The issue's acceptance band: 68 % ± 8 % inside ±1σ, ≥ 90 % inside ±2σ.
COVER_1SIGMA = (0.60, 0.76)
COVER_2SIGMA_MIN = 0.90
N_REALISATIONS = 120
CAL_SCALE_SIGMA = 2e-4  # relative scale error of the calibration (systematic over the track)
N_ENSEMBLE = 25


def realisation(rng):
    """A close-up track with noise and a true scale error, and an ensemble of plausible scale errors."""
    exact = simulate_shot(SPEC, t_s=np.arange(40) / 2000.0, x0_m=0.5, step_s=1e-4, **TRUTH)
    s_true = rng.normal(0.0, CAL_SCALE_SIGMA)
    x = exact.x_m * (1 + s_true) + rng.normal(0, 5e-4, exact.n_points)
    y = exact.y_m * (1 + s_true) + rng.normal(0, 5e-4, exact.n_points)
    scales = rng.normal(0.0, CAL_SCALE_SIGMA, N_ENSEMBLE)
    off = np.stack([scales[:, None] * x[None], scales[:, None] * y[None]], axis=-1)
    return ShotData(exact.t_s, x, y, exact.sigma_m, off, "mc", "rig")


def z_scores(n, seed):
    rng = np.random.default_rng(seed)
    z = []
    for _ in range(n):
        fit = fit_shots([realisation(rng)], bb=BB_025, air=AIR)
        s = fit.shots[0]
        z.append([
            (s.speed_mps.value - TRUTH["speed_mps"]) / s.speed_mps.stderr,
            (fit.drag_coefficient.value - TRUTH["drag_param"]) / fit.drag_coefficient.stderr,
            (s.lift_coefficient.value - TRUTH["lift_coefficient"]) / s.lift_coefficient.stderr,
        ])  # fmt: skip
    return np.array(z)


@pytest.mark.slow
def test_error_bars_cover_the_truth_as_stated():
    z = z_scores(N_REALISATIONS, seed=2026)
    in1 = np.mean(np.abs(z) < 1.0)
    in2 = np.mean(np.abs(z) < 2.0)
    assert COVER_1SIGMA[0] <= in1 <= COVER_1SIGMA[1], (in1, np.mean(np.abs(z) < 1.0, axis=0))
    assert in2 >= COVER_2SIGMA_MIN, (in2, np.mean(np.abs(z) < 2.0, axis=0))
    # per parameter, looser (fewer samples each): neither inflated nor overconfident
    per1 = np.mean(np.abs(z) < 1.0, axis=0)
    assert np.all((per1 > 0.55) & (per1 < 0.81)), per1
