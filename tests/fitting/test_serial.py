"""Serial correlation of position errors: measured without bias, and carried into the error bars.

The reference is the first-order autoregression's own autocorrelation (Box, Jenkins & Reinsel 2008, Time
Series Analysis, 4th ed., §3.2.1: for e_t = φ e_{t−1} + a_t, ρ_k = φ^k), generated here, not by the
fitter.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pytest

from hopscope.fitting.air import Air
from hopscope.fitting.bb import BB
from hopscope.fitting.estimate import fit_shots
from hopscope.fitting.fitfile import fit_to_dict
from hopscope.fitting.observe import ModelSpec, simulate_shot
from hopscope.fitting.serial import correlation_excess, frame_steps
from hopscope.summaries import parameter_table

PHI = 0.4  # autoregression coefficient of the vertical error
N_POINTS = 50
#: Replicates of the linear-model checks (each a few milliseconds).
N_LINEAR = 400
#: The mean of an unbiased estimate lies within this many of its standard errors of the truth.
MEAN_SE = 3.5
#: What leaving the moments beyond one frame out of the equations costs at φ = 0.4 over 200 points.
MOMENT_TRUNCATION_BIAS = 0.02


def ar1(phi, n, gen):
    """Unit-variance stationary AR(1) noise: e_0 ~ N(0, 1), e_t = φ e_{t−1} + √(1 − φ²) a_t."""
    a = gen.normal(size=n)
    e = np.empty(n)
    e[0] = a[0]
    for t in range(1, n):
        e[t] = phi * e[t - 1] + math.sqrt(1 - phi**2) * a[t]
    return e


def design(n):
    """A linear fit of the interleaved (x, y) entries: a quadratic in time per axis (6 columns)."""
    t = np.linspace(-1, 1, n)
    jac = np.zeros((2 * n, 6))
    for k in range(3):
        jac[0::2, k] = t**k
        jac[1::2, 3 + k] = t**k
    return t, jac


def _fit(jac, e, t):
    """Least-squares residual of the linear model, the measured correlation and the sandwich middle."""
    beta, *_ = np.linalg.lstsq(jac, e, rcond=None)
    r = e - jac @ beta
    mask = np.ones((1, t.size), dtype=bool)
    inlier = np.ones(r.size, dtype=bool)
    corr, excess = correlation_excess(r, jac, inlier, (t - t[0])[None, :], mask, np.ones(t.size, dtype=bool))
    return beta, corr, None if excess is None else jac.T @ jac + excess


def test_moment_estimate_of_the_correlation_is_unbiased_where_the_naive_one_is_not():
    """Over 200-point tracks (a ratio of moments keeps a small-sample bias of a few 0.01 at 50 points)."""
    gen = np.random.default_rng(5)
    n = 4 * N_POINTS
    t, jac = design(n)
    got, naive, x_got = [], [], []
    for _ in range(N_LINEAR):
        e = np.empty(2 * n)
        e[0::2] = gen.normal(size=n)
        e[1::2] = ar1(PHI, n, gen)
        beta, corr, _ = _fit(jac, e, t)
        got.append(corr.y)
        x_got.append(corr.x)
        r = (e - jac @ beta)[1::2]
        naive.append(np.sum(r[1:] * r[:-1]) / np.sum(r * r))
    got, x_got, naive = np.array(got), np.array(x_got), np.array(naive)
    se = got.std() / math.sqrt(N_LINEAR)
    # unbiased but for the moments beyond one frame, which the equations leave out (measured: −0.016)
    assert abs(got.mean() - PHI) < MEAN_SE * se + MOMENT_TRUNCATION_BIAS, (got.mean(), PHI, se)
    # white noise on x: the estimate is kept ≥ 0, so its mean is the mean of a clipped noise (small)
    assert 0.0 <= x_got.mean() < 0.05
    # the plain residual autocorrelation, which ignores what the fit removes, is biased low, beyond that
    assert got.mean() - naive.mean() > MEAN_SE * naive.std() / math.sqrt(N_LINEAR), naive.mean()


def test_sandwich_error_bar_of_a_curvature_covers_under_correlated_noise():
    """z of the vertical quadratic coefficient: rms ≈ 1 with the sandwich, well above without it."""
    gen = np.random.default_rng(8)
    t, jac = design(N_POINTS)
    inv = np.linalg.inv(jac.T @ jac)
    z_sandwich, z_plain = [], []
    for _ in range(N_LINEAR):
        e = np.empty(2 * N_POINTS)
        e[0::2] = gen.normal(size=N_POINTS)
        e[1::2] = ar1(PHI, N_POINTS, gen)
        beta, _, middle = _fit(jac, e, t)
        cov = inv if middle is None else inv @ middle @ inv
        z_sandwich.append(beta[5] / math.sqrt(cov[5, 5]))
        z_plain.append(beta[5] / math.sqrt(inv[5, 5]))
    rms_s, rms_p = (math.sqrt(np.mean(np.square(z))) for z in (z_sandwich, z_plain))
    # AR(1) with φ = 0.4: the long-run variance factor (1 + φ)/(1 − φ) ≈ 2.3 for a smooth column, so plain
    # bars are ~1.5× too small; the band's half-width is ~3 standard errors of an rms over 400
    assert 0.9 <= rms_s <= 1.12, rms_s
    assert rms_p > 1.3, rms_p


def test_white_noise_costs_little_and_no_noise_nothing():
    """On white noise the bars of the curvature stay near honest: the kept-positive estimate widens them a
    little (rms z ≈ 0.95), never narrows them; noise-free residuals measure nothing."""
    gen = np.random.default_rng(9)
    t, jac = design(N_POINTS)
    inv = np.linalg.inv(jac.T @ jac)
    z = []
    for _ in range(N_LINEAR):
        e = gen.normal(size=2 * N_POINTS)
        beta, _, middle = _fit(jac, e, t)
        cov = inv if middle is None else inv @ middle @ inv
        z.append(beta[5] / math.sqrt(cov[5, 5]))
        assert cov[5, 5] >= inv[5, 5] * (1 - 1e-12)
    assert 0.88 <= math.sqrt(np.mean(np.square(z))) <= 1.06
    _, corr, middle = _fit(jac, 1e-9 * gen.normal(size=2 * N_POINTS), t)
    assert corr.is_zero and middle is None


def test_frame_steps_follow_missing_frames_and_ignore_row_offsets():
    t = np.array([0.0, 1.0, 2.0, 4.0, 5.0, 8.0]) / 2000.0 + np.array([0, 3, 1, 2, 0, 4]) * 1e-6
    mask = np.ones((1, t.size), dtype=bool)
    assert frame_steps((t - t[0])[None, :], mask).tolist() == [[0, 1, 2, 4, 5, 8]]


def test_the_fitter_reports_the_correlation_and_widens_the_lift_error_bar():
    air = Air.from_conditions(293.15, 101325.0, 0.5)
    spec = ModelSpec(BB(2.5e-4, 5.95e-3), air)
    truth = dict(speed_mps=95.0, elevation_rad=0.005, lift_coefficient=0.03, drag_param=0.42, decay_param=0.5)
    t = np.arange(N_POINTS) / 2000.0
    sigma = 5e-4
    clean = simulate_shot(spec, t_s=t, sigma_m=sigma, rng=None, **truth)
    gen = np.random.default_rng(21)
    white = sigma * gen.normal(size=(2, N_POINTS))
    shot_white = dataclasses.replace(clean, x_m=clean.x_m + white[0], y_m=clean.y_m + white[1])
    # the same vertical innovations made strongly correlated
    coloured = sigma * ar1(0.7, N_POINTS, np.random.default_rng(21))
    shot_corr = dataclasses.replace(clean, x_m=clean.x_m + white[0], y_m=clean.y_m + coloured)
    bb = BB(2.5e-4, 5.95e-3)
    fit_w = fit_shots([shot_white], bb=bb, air=air)
    fit_c = fit_shots([shot_corr], bb=bb, air=air)
    assert fit_c.statistics.serial_correlation_y > 0.3
    assert fit_c.shots[0].lift_coefficient.stderr_noise > 1.3 * fit_w.shots[0].lift_coefficient.stderr_noise
    # the summary shows it, and fit.json carries it
    assert f"y {fit_c.statistics.serial_correlation_y:.2f} between neighbouring frames" in parameter_table(
        fit_c
    )
    assert (
        fit_to_dict(fit_c)["statistics"]["serial_correlation"]["y"] == fit_c.statistics.serial_correlation_y
    )


@pytest.mark.parametrize("n_shots", [1, 3])
def test_joint_fits_keep_shots_apart(n_shots):
    """Pairs are formed within a shot only: a joint fit of shots with white errors finds no correlation."""
    air = Air.from_conditions(293.15, 101325.0, 0.5)
    bb = BB(2.5e-4, 5.95e-3)
    spec = ModelSpec(bb, air)
    t = np.arange(N_POINTS) / 2000.0
    shots = [
        simulate_shot(
            spec,
            t_s=t,
            sigma_m=5e-4,
            rng=100 + i,
            speed_mps=90.0 + i,
            elevation_rad=0.0,
            lift_coefficient=0.02,
            drag_param=0.42,
            decay_param=0.5,
            label=f"s{i}",
        )  # fmt: skip
        for i in range(n_shots)
    ]
    st = fit_shots(shots, bb=bb, air=air).statistics
    assert 0 <= st.serial_correlation_x < 0.5 and 0 <= st.serial_correlation_y < 0.5
