"""Sub-pixel localisation against spots drawn at known positions, scipy and trackpy."""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest
from scipy.optimize import least_squares
from track_synth import draw_bb

from hopscope.tracker.localise import (
    correlation_factor,
    levenberg_marquardt,
    localise,
    spot_jacobian,
    spot_model,
    streak_jacobian,
    streak_model,
)
from hopscope.tracker.profiles import spot_cost, spot_normal
from hopscope.tracker.spotfit import _fit_spot

#: Position RMS against truth, white BB, short exposure (issue 5 target).
POSITION_RMS_TOL_PX = 0.1
#: Mean along-track error of streak centres (issue 5 target).
STREAK_BIAS_TOL_PX = 0.05
#: Reported σ must lie within this factor of the real scatter (issue 5 target).
SIGMA_FACTOR = 1.5
#: Analytic Jacobians vs central differences.
JAC_TOL = 1e-6
#: Our Levenberg–Marquardt vs scipy's least_squares optimum, px.
LM_AGREE_PX = 1e-4
#: Ours vs trackpy on the same spots: "no worse" allows this much sampling noise in the RMS ratio
#: (60 spots: the RMS itself has a ~9 % standard error, the two errors are strongly correlated).
TRACKPY_MARGIN = 1.05
#: Streak travel recovered from the fit, relative (the Gaussian-profiled segment lengthens the streak of a
#: sharp disk by a fraction of the disk radius; the centre is unaffected by symmetry).
STREAK_LEN_REL_TOL = 0.06

N_TRIALS = 60
LEVEL = 40.0


def _trials(rng, *, radius, psf, noise, amplitude=120.0, streak=0.0, size=31, n=N_TRIALS):
    """(image, true u, true v, angle) for n spots at random sub-pixel positions around the window centre."""
    out = []
    c = size // 2
    for _ in range(n):
        u, v = c + rng.uniform(-0.5, 0.5), c + rng.uniform(-0.5, 0.5)
        ang = rng.uniform(0, math.pi)
        img = LEVEL + draw_bb(
            (size, size),
            u,
            v,
            radius_px=radius,
            psf_px=psf,
            streak_px=streak,
            angle_rad=ang,
            amplitude=amplitude,
        )
        img = img + rng.normal(0, noise, img.shape)
        out.append((img, u, v, ang))
    return out


def _ours(trials):
    err, sig, dets = [], [], []
    for img, u, v, _ in trials:
        d = localise(img - np.median(img), (0, 0), frame=0, sign=1)
        assert d.ok, d.reason
        err.append((d.u_px - u, d.v_px - v))
        sig.append(d.sigma_px)
        dets.append(d)
    return np.array(err), np.array(sig), dets


def test_jacobians_match_finite_differences():
    gx, gy = np.arange(13.0), np.arange(11.0)
    xs, ys = (a.ravel() for a in np.meshgrid(gx, gy))
    cases = [
        (spot_model, spot_jacobian, np.array([6.3, 5.2, 80.0, 1.4, 3.0]), gx, gy),
        (streak_model, streak_jacobian, np.array([6.3, 5.2, 80.0, 1.4, 6.0, 0.7, 3.0]), xs, ys),
        (streak_model, streak_jacobian, np.array([6.3, 5.2, 80.0, 1.4, 0.0, 0.7, 3.0]), xs, ys),
    ]
    for model, jac, p, x, y in cases:
        j = jac(p, x, y)
        for i in range(p.size):
            e = np.zeros(p.size)
            e[i] = 1e-6
            num = (model(p + e, x, y) - model(p - e, x, y)) / 2e-6
            np.testing.assert_allclose(j[:, i], num, atol=JAC_TOL * max(1.0, np.abs(num).max()))


def _explicit_fit(d, gx, gy, p0, lo, hi):
    return levenberg_marquardt(
        lambda p: spot_model(p, gx, gy) - d, lambda p: spot_jacobian(p, gx, gy), p0, lo, hi
    )


@pytest.mark.parametrize(
    ("solver", "radius", "psf", "noise", "p0"),
    [
        (_explicit_fit, 2.2, 0.7, 3.0, (15.0, 15.0, 60.0, 1.5, 0.0)),  # explicit Jacobian
        (_fit_spot, 1.6, 0.8, 4.0, (14.0, 16.0, 40.0, 1.0, 0.0)),  # separable normal equations
    ],
)
def test_spot_fit_reaches_scipy_optimum(rng, solver, radius, psf, noise, p0):
    # Reference: scipy.optimize.least_squares (Virtanen et al. 2020, SciPy 1.0, Nat. Methods 17:261).
    img, _, _, _ = _trials(rng, radius=radius, psf=psf, noise=noise, n=1)[0]
    d = (img - LEVEL).ravel()
    gx = np.arange(img.shape[1], dtype=float)
    gy = np.arange(img.shape[0], dtype=float)
    p0 = np.array(p0)
    lo = np.array([-0.5, -0.5, 0.0, 0.3, -np.inf])
    hi = np.array([30.5, 30.5, np.inf, 31.0, np.inf])
    ours = solver(d, gx, gy, p0, lo, hi)
    ref = least_squares(lambda p: spot_model(p, gx, gy) - d, p0, bounds=(lo, hi), xtol=1e-12, ftol=1e-12)
    assert ours.success
    np.testing.assert_allclose(ours.x[:2], ref.x[:2], atol=LM_AGREE_PX)
    assert ours.cost <= ref.cost * (1 + 1e-6)
    np.testing.assert_allclose(ours.fun, spot_model(ours.x, gx, gy) - d)


def test_separable_spot_normal_equations_match_the_explicit_jacobian(rng):
    # the spot fit's normal equations from per-axis Gram matrices equal JᵀJ and Jᵀr of the explicit
    # Jacobian, and its separable cost equals ‖r‖² (to round-off)
    img, _, _, _ = _trials(rng, radius=2.2, psf=0.7, noise=3.0, n=1)[0]
    d2 = img[3:26, 5:24] - LEVEL  # a non-square window
    gx = np.arange(d2.shape[1], dtype=float)
    gy = np.arange(d2.shape[0], dtype=float)
    xy = np.concatenate((gx, gy))
    for p in (np.array([9.7, 11.2, 90.0, 1.3, 2.0]), np.array([3.1, 18.4, 20.0, 2.6, -4.0])):
        r = spot_model(p, gx, gy) - d2.ravel()
        j = spot_jacobian(p, gx, gy)
        a, g = spot_normal(p, xy, gx.size, d2)
        np.testing.assert_allclose(a, j.T @ j, rtol=1e-10, atol=1e-10 * np.abs(j.T @ j).max())
        np.testing.assert_allclose(g, j.T @ r, rtol=1e-10, atol=1e-10 * np.abs(j.T @ r).max())
        assert spot_cost(p, xy, gx.size, d2, float(np.sum(d2 * d2))) == pytest.approx(float(r @ r), rel=1e-10)


@pytest.mark.parametrize(("radius", "psf", "noise"), [(2.5, 0.7, 3.0), (1.2, 0.6, 3.0), (3.5, 1.0, 6.0)])
def test_white_bb_short_exposure_accuracy_and_sigma(rng, radius, psf, noise):
    err, sig, _ = _ours(_trials(rng, radius=radius, psf=psf, noise=noise))
    rms = float(np.sqrt(np.mean(err**2)))  # per axis
    assert rms <= POSITION_RMS_TOL_PX
    ratio = float(np.sqrt(np.mean(sig**2))) / rms
    assert 1 / SIGMA_FACTOR <= ratio <= SIGMA_FACTOR, f"sigma/scatter = {ratio:.2f}"


@pytest.mark.parametrize("streak", [8.0, 20.0])
def test_streak_centre_is_mid_exposure(rng, streak):
    trials = _trials(rng, radius=2.0, psf=0.6, noise=3.0, streak=streak, size=41)
    err, sig, dets = _ours(trials)
    along = np.array(
        [e[0] * math.cos(t[3]) + e[1] * math.sin(t[3]) for e, t in zip(err, trials, strict=True)]
    )
    assert abs(float(np.mean(along))) <= STREAK_BIAS_TOL_PX
    assert abs(float(np.mean(along))) <= 3 * float(np.std(along)) / math.sqrt(len(along)) + 0.01
    assert all("streak" in d.flags for d in dets)
    lengths = np.array([d.streak_len_px for d in dets])
    assert abs(float(np.median(lengths)) - streak) <= STREAK_LEN_REL_TOL * streak
    rms = float(np.sqrt(np.mean(err**2)))
    ratio = float(np.sqrt(np.mean(sig**2))) / rms
    assert 1 / SIGMA_FACTOR <= ratio <= SIGMA_FACTOR, f"sigma/scatter = {ratio:.2f}"


def test_no_worse_than_trackpy(rng):
    # Reference library: trackpy.locate (Allan, Caswell, Keim, van der Wel, Verweij; trackpy, Zenodo
    # doi:10.5281/zenodo.1226458), the Crocker & Grier (1996, J. Colloid Interface Sci. 179:298) refined
    # centroid. Same frames, same truth.
    import trackpy as tp

    tp.quiet()
    for radius, psf, noise in [(2.5, 0.7, 3.0), (1.5, 0.7, 4.0)]:
        trials = _trials(rng, radius=radius, psf=psf, noise=noise)
        ours, _, _ = _ours(trials)
        diameter = 2 * math.ceil(radius + 2 * psf) + 1
        ref = []
        for img, u, v, _ in trials:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")  # trackpy's own deprecation/perf notices
                f = tp.locate(img, diameter, minmass=50, topn=1)
            assert len(f) == 1
            ref.append((float(f.x.iloc[0]) - u, float(f.y.iloc[0]) - v))
        rms_ours = float(np.sqrt(np.mean(ours**2)))
        rms_tp = float(np.sqrt(np.mean(np.array(ref) ** 2)))
        assert rms_ours <= TRACKPY_MARGIN * rms_tp, f"ours {rms_ours:.4f} px vs trackpy {rms_tp:.4f} px"


def test_dark_bb(rng):
    img = 150.0 + draw_bb((25, 25), 12.3, 11.6, radius_px=2.5, amplitude=-90.0) + rng.normal(0, 2, (25, 25))
    d = localise(img - 150.0, (100, 200), frame=3, sign=-1)
    assert d.ok
    assert d.u_px == pytest.approx(200 + 12.3, abs=0.1) and d.v_px == pytest.approx(100 + 11.6, abs=0.1)
    assert d.amplitude < 0 and d.brightness < 0 and d.frame == 3


def test_failures_are_values(rng):
    d = localise(rng.normal(0, 2, (15, 15)), (0, 0), frame=0, sign=1)
    assert not d.ok and d.reason
    d = localise(np.zeros((2, 9)), (0, 0), frame=0, sign=1)
    assert not d.ok and "smaller than 3" in d.reason
    spike = np.zeros((15, 15))
    spike[7, 7] = 200
    d = localise(spike + rng.normal(0, 1, spike.shape), (0, 0), frame=0, sign=1)
    assert not d.ok and "noise spike" in d.reason


def test_saturation_flag(rng):
    img = draw_bb((21, 21), 10.2, 9.9, radius_px=3.0, amplitude=400.0)
    raw = np.clip(20 + img, 0, 255)
    d = localise(raw - 20, (0, 0), frame=0, sign=1, raw=raw)
    assert d.ok and "saturated" in d.flags


def test_correlation_factor(rng):
    white = rng.normal(0, 1, (40, 40))
    mask = np.ones_like(white, bool)
    assert correlation_factor(white, mask) < 1.3
    # noise smoothed by a 2-px box in each axis: lag-one correlation 0.5 per axis → factor (1+1)² = 4
    smooth = white + np.roll(white, 1, axis=0)
    smooth = smooth + np.roll(smooth, 1, axis=1)
    assert 3.0 < correlation_factor(smooth, mask) < 5.0


#: A marked ball's own light from the fit against the light drawn, relative (noise 1 DN on a 15 px window).
OWN_LIGHT_REL_TOL = 0.01
#: The wall texture behind the ball changes frame − background by at least this, relative (so the check
#: above can fail when the hidden background is not added back).
TEXTURE_EFFECT_REL = 0.05
#: Finite-difference step and tolerance for the coverage's derivative by the radius.
COVER_STEP_PX = 1e-5
COVER_DERIV_TOL = 1e-4
#: The coverage's sum against the blurred disk's area, relative (pixel sampling of a 4 px ball).
COVER_AREA_REL_TOL = 1e-3


def _marked_params(u=10.3, v=9.6, phi=0.7):
    # (u0, v0, R, w, φ, B, D, G, λ, L, θ): a 4 px ball, its bright half 220 DN, dark half 30 DN, a short sweep
    return np.array([u, v, 4.0, 0.7, phi, 220.0, 30.0, -0.3, 0.2, 1.5, 0.1])


def test_marked_ball_brightness_is_its_own_light_whatever_hides_behind_it():
    from hopscope.tracker.localise import localise_marked, marked_ball_coverage, marked_ball_model

    rows, cols = 20, 21
    yy, xx = np.mgrid[0:rows, 0:cols]
    x, y = xx.ravel().astype(float), yy.ravel().astype(float)
    p = _marked_params()
    cover, _ = marked_ball_coverage(p, x, y)
    own = float(np.sum(marked_ball_model(p, x, y, np.zeros_like(x))))  # the ball on black: its own light
    rng = np.random.default_rng(5)
    raw = []
    for level in (60.0, 140.0):  # a dark and a bright patch of wall behind the ball
        bg = level + 10.0 * rng.standard_normal(x.size)
        frame = marked_ball_model(p, x, y, bg) + rng.normal(0.0, 1.0, x.size)
        d = localise_marked(
            frame.reshape(rows, cols), bg.reshape(rows, cols), (0, 0), frame=0, radius_px=4.0, noise_floor=0.3
        )
        assert d.ok, d.reason
        assert d.brightness == pytest.approx(own, rel=OWN_LIGHT_REL_TOL)
        assert d.light_radius_px == 4.0 and d.light_per_radius > 0
        raw.append(float(np.sum((frame - bg)[cover > 0.005])))
    assert abs(raw[0] - raw[1]) > TEXTURE_EFFECT_REL * own


def test_marked_ball_coverage_derivative_matches_finite_differences():
    from hopscope.tracker.localise import marked_ball_coverage

    yy, xx = np.mgrid[0:20, 0:21]
    x, y = xx.ravel().astype(float), yy.ravel().astype(float)
    p = _marked_params()
    cover, dcover = marked_ball_coverage(p, x, y)
    q = p.copy()
    q[2] += COVER_STEP_PX
    numeric = (marked_ball_coverage(q, x, y)[0] - cover) / COVER_STEP_PX
    np.testing.assert_allclose(dcover, numeric, atol=COVER_DERIV_TOL)
    # Σ coverage is the ball's area whatever the sweep (a time average): π (R² + w²) for an edge blurred by a
    # Gaussian of σ w (the integral of ½ erfc((r − R)/(√2 w)) over the plane)
    assert float(cover.sum()) == pytest.approx(math.pi * (4.0**2 + 0.7**2), rel=COVER_AREA_REL_TOL)
