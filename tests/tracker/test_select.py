"""Which smooth track is the BB: size at the flight plane, speed band, fall under gravity, drag."""

from __future__ import annotations

import math

import numpy as np
import pytest

from hopscope.shared.constants import STANDARD_GRAVITY_MPS2
from hopscope.tracker.select import (
    BBSearch,
    judge_track,
    lift_accel_max_mps2,
    likely_time_scale,
    width_range_px,
)

G = STANDARD_GRAVITY_MPS2
#: Scale of a close lane, m/px (a 5.95 mm BB is 3 px across).
M_PER_PX = 2.0e-3
#: Position noise of the synthetic tracks, m (0.05 px).
NOISE_M = 1.0e-4
FPS = 2000.0


def _flight(rng, *, n=60, speed=95.0, decel=250.0, ay=-G + 12.0, scale=1.0, width=1.1):
    """A BB-like track: x decelerating by drag, y under gravity less lift; times divided by ``scale``."""
    t = np.arange(n) / FPS
    x = speed * t - 0.5 * decel * t**2
    y = 0.01 * speed * t + 0.5 * ay * t**2
    x = x + rng.normal(0, NOISE_M, n)
    y = y + rng.normal(0, NOISE_M, n)
    return t * scale, x, y, np.full(n, NOISE_M), np.full(n, width)


def test_a_bb_flight_passes(rng):
    j = judge_track(*_flight(rng), M_PER_PX, BBSearch())
    assert j.is_bb, j.reason
    assert j.speed_mps == pytest.approx(95.0 - 250.0 * 59 / 2 / FPS, rel=0.01)
    assert j.start_speed_mps == pytest.approx(math.hypot(95.0, 0.95), rel=0.01)
    assert j.accel_y_mps2 == pytest.approx(-G + 12.0, abs=4 * j.accel_y_se_mps2)


def test_slow_blob_is_not_a_bb(rng):
    # an insect at a tenth of the BB's speed, drifting level: too slow, and it does not fall
    j = judge_track(*_flight(rng, speed=9.5, decel=0.0, ay=0.0), M_PER_PX, BBSearch())
    assert not j.is_bb
    assert not j.speed_ok and not j.fall_ok
    assert "outside the BB speed band 20..200 m/s" in j.reason


def test_blob_far_wider_than_the_bb_is_not_a_bb(rng):
    lo, hi = width_range_px(5.95e-3, 0.5e-3)  # a 12 px BB image
    assert lo == pytest.approx(5.95e-3 / 0.5e-3 / 4)  # second moment of a uniform disk: (D/4)² per axis
    j = judge_track(*_flight(rng, width=2.0 * hi), 0.5e-3, BBSearch())
    assert not j.size_ok and "px wide" in j.reason
    j_ok = judge_track(*_flight(rng, width=math.sqrt(lo * hi)), 0.5e-3, BBSearch())
    assert j_ok.size_ok


def test_speeding_up_is_not_drag(rng):
    j = judge_track(*_flight(rng, decel=-3000.0), M_PER_PX, BBSearch())
    assert not j.drag_ok and "not a drag deceleration" in j.reason


def test_speed_band_is_an_option(rng):
    track = _flight(rng)
    assert not judge_track(*track, M_PER_PX, BBSearch(speed_band_mps=(100.0, 200.0))).speed_ok
    with pytest.raises(ValueError, match="--speed-band-mps"):
        BBSearch(speed_band_mps=(50.0, 20.0))
    with pytest.raises(ValueError, match="--diameter-mm"):
        BBSearch(diameter_m=-1.0)


@pytest.mark.parametrize("scale", [8.0, 66.7])
def test_playback_timing_is_seen_in_the_fall(rng, scale):
    # the same flight with its times stretched (slow-motion file with playback timestamps): speed 1/k,
    # accelerations 1/k²; gravity does not scale, so the track falls far too little for a BB
    j = judge_track(*_flight(rng, scale=scale), M_PER_PX, BBSearch())
    assert not j.is_bb and not j.fall_ok and j.timing_suspect
    stamps_hz = FPS / scale
    k = likely_time_scale(j.start_speed_mps, j.accel_y_mps2, BBSearch(), timestamp_rate_hz=stamps_hz)
    assert k is not None
    assert k * stamps_hz == pytest.approx(FPS)  # the common capture rate that makes it a BB's flight


def test_lift_bound_grows_with_speed_squared():
    assert lift_accel_max_mps2(100.0, 5.95e-3) == pytest.approx(4 * lift_accel_max_mps2(50.0, 5.95e-3))
