"""The plane corners' noise split into a sub-pixel phase bias and an independent rest.

The bias model is the peak-locking form of Westerweel (1997), Fundamentals of digital particle image
velocimetry, Meas. Sci. Technol. 8:1379 (a sub-pixel estimator's error as a periodic function of the
position's fractional part); the truths here are generated in the test.
"""

from __future__ import annotations

import math

import numpy as np

from hopscope.calibration.build import PHASE_HARMONICS, CornerNoise, corner_phase_bias, phase_basis

N_CORNERS = 54  # one 9×6 board
#: Replicate boards for the statistical checks.
N_SETS = 300


def _residual(gen, uv, coef_u, coef_v, sigma):
    r = gen.normal(0.0, sigma, uv.shape)
    r[:, 0] += phase_basis(uv[:, 0]) @ coef_u
    r[:, 1] += phase_basis(uv[:, 1]) @ coef_v
    return r


def test_phase_bias_and_rest_are_recovered_with_honest_standard_errors():
    gen = np.random.default_rng(3)
    m = 2 * len(PHASE_HARMONICS)
    coef_u = np.array([0.045, 0.004, -0.003, 0.004])[:m]  # sin 2πu dominant, as measured on renders
    coef_v = np.array([0.055, 0.0, 0.0, 0.004])[:m]
    sigma = 0.02
    z, rest = [], []
    for _ in range(N_SETS):
        uv = gen.uniform(0, 640, (N_CORNERS, 2))
        noise = corner_phase_bias(uv, _residual(gen, uv, coef_u, coef_v, sigma), n_pose=0)
        z.append((noise.phase_coef_px[0, 0] - coef_u[0]) / math.sqrt(noise.phase_cov_px2[0, 0, 0]))
        rest.append(noise.independent_px)
    z = np.array(z)
    # an rms of 300 unit normals lies within ±0.12 of 1 at about 3 of its standard errors
    assert 0.88 <= math.sqrt(np.mean(z**2)) <= 1.12
    assert abs(np.mean(z)) < 3.0 / math.sqrt(N_SETS)
    assert abs(np.sqrt(np.mean(np.square(rest))) / sigma - 1.0) < 0.03


def test_too_few_corners_are_all_independent_noise():
    gen = np.random.default_rng(4)
    uv = gen.uniform(0, 640, (8, 2))
    noise = corner_phase_bias(uv, gen.normal(0, 0.05, uv.shape))
    assert noise.independent_px == noise.total_px
    assert not np.any(noise.phase_coef_px)


def test_a_draw_is_one_phase_function_for_every_corner():
    """With no independent rest, corners at the same sub-pixel phase get the same error in a draw."""
    m = 2 * len(PHASE_HARMONICS)
    coef = np.zeros((2, m))
    coef[:, 0] = 0.05
    noise = CornerNoise(0.0, coef, np.zeros((2, m, m)), 0.05)
    uv = np.array([[10.25, 3.5], [200.25, 97.5], [33.75, 12.0]])
    gen = np.random.default_rng(1)
    draws = np.array([noise.draw(uv, gen) for _ in range(200)])
    np.testing.assert_allclose(draws[:, 0, 0], draws[:, 1, 0])  # same u phase
    np.testing.assert_allclose(draws[:, 2, 0], -draws[:, 0, 0])  # the opposite phase, the opposite sign
    # its size: the factor is N(0, 1), so the rms over draws is the measured amplitude at that phase
    assert abs(np.sqrt(np.mean(draws[:, 0, 0] ** 2)) / 0.05 - 1.0) < 0.2
