"""Background model: the sorting-network median, the streamed window, the noise map."""

from __future__ import annotations

import numpy as np
import pytest
from track_synth import draw_bb

from hopscope.tracker.background import (
    SIDE_SAMPLES,
    default_scale,
    downsample,
    median_of,
    noise_map,
    windowed,
)
from hopscope.tracker.video import VideoFrame

#: The noise map's robust σ against the true σ of Gaussian noise (MAD estimator, 1024 px per tile: its
#: relative standard error is about 1.166/sqrt(n) ≈ 4 %, Rousseeuw & Croux 1993).
NOISE_REL_TOL = 0.15


@pytest.mark.parametrize("n", [1, 2, 3, 4, 5, 6, 7])
def test_median_network_matches_numpy(n, rng):
    # Reference: numpy.median (for an even count, the mean of the two middle values; ours rounds down).
    imgs = [rng.integers(0, 256, (17, 23), dtype=np.uint8) for _ in range(n)]
    ours = median_of(imgs).astype(float)
    ref = np.median(np.stack(imgs).astype(float), axis=0)
    np.testing.assert_array_equal(ours, np.floor(ref))


def test_median_of_nothing():
    with pytest.raises(ValueError, match="no images"):
        median_of([])


def _stream(n, shape, rng, *, spot_every=1, level=60.0, noise=2.0):
    truth = {}
    for k in range(n):
        img = np.full(shape, level) + rng.normal(0, noise, shape)
        if k % spot_every == 0:
            u, v = 10 + 7.0 * k, 20 + 1.0 * k
            img += draw_bb(shape, u, v, radius_px=2.0, amplitude=100.0)
            truth[k] = (u, v)
        yield VideoFrame(index=k, t_s=k / 100.0, luma=np.clip(np.round(img), 0, 255).astype(np.uint8)), truth


def test_window_removes_moving_bb_and_stays_bounded(rng):
    shape = (48, 200)
    frames = []
    truth = {}
    for fr, tr in _stream(20, shape, rng):
        frames.append(fr)
        truth = tr
    out = list(windowed(iter(frames), gap_frames=2, scale=1))
    assert [w.frame.index for w in out] == list(range(20))
    for w in out:
        k = w.frame.index
        assert 3 <= len(w.samples) <= 2 * SIDE_SAMPLES
        assert k not in [s.index for s in w.samples]
        assert all(abs(s.index - k) <= 2 * SIDE_SAMPLES for s in w.samples)
        u, v = truth[k]
        if 3 <= u < shape[1] - 3:
            peak = w.diff_low[int(round(v)), int(round(u))]
            assert peak > 50  # the BB stands out: the background does not contain it
            r0, r1, c0, c1 = int(v) - 4, int(v) + 5, int(u) - 4, int(u) + 5
            bg = w.background_roi(r0, r1, c0, c1)
            assert abs(float(np.median(bg)) - 60.0) < 3.0
        far = w.diff_low[:, :5] if u > 20 else w.diff_low[:, -5:]
        assert np.abs(far).max() < 15


def test_window_short_and_too_short_clips(rng):
    frames = [fr for fr, _ in _stream(4, (20, 40), rng)]
    assert len(list(windowed(iter(frames), gap_frames=2))) == 4
    with pytest.raises(ValueError, match="too few frames"):
        list(windowed(iter(frames[:3]), gap_frames=2))
    with pytest.raises(ValueError, match="gap_frames"):
        list(windowed(iter(frames), gap_frames=0))


def test_noise_map_recovers_sigma(rng):
    for sigma in (1.5, 4.0, 9.0):
        d = np.round(rng.normal(0, sigma, (128, 192))).astype(np.int16)
        m = noise_map(d)
        assert m.shape == d.shape
        assert np.all(np.abs(m / sigma - 1) < NOISE_REL_TOL)


def test_downsample_is_block_mean(rng):
    img = rng.integers(0, 256, (24, 36), dtype=np.uint8)
    low = downsample(img, 4)
    ref = img.reshape(6, 4, 9, 4).mean(axis=(1, 3))
    # two halvings, each rounding to an integer: at most one grey level from the exact block mean
    assert low.shape == ref.shape
    assert np.max(np.abs(low - ref)) <= 1.0 + 1e-9
    assert np.mean(np.abs(low - ref)) < 0.5
    low3 = downsample(img, 3)
    assert np.max(np.abs(low3 - img.reshape(8, 3, 12, 3).mean(axis=(1, 3)))) <= 0.5 + 1e-9
    assert downsample(img, 1) is img
    assert default_scale(1920, 1080) == 4 and default_scale(320, 240) == 1 and default_scale(3840, 2160) == 8
