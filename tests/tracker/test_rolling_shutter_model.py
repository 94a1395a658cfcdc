"""The tracker's rolling-shutter and exposure timing against a camera model written here, row by row.

The clip is made without the tracker's or the renderer's conventions: a BB flying in the plane z = 0 is
projected by a pinhole written out below (the same geometry as ``track_synth.simple_rig``, coded anew), and
each image row r of frame k integrates the scene over that row's own exposure window
[t_k + r·τ_line, t_k + r·τ_line + E], τ_line = readout / rows — a rolling shutter reads the rows one line
time apart and each row collects light for the exposure time E (Liang, Chang & Chen 2008, "Analysis and
compensation of rolling shutter effect", IEEE Trans. Image Process. 17:1323, §II; from memory). The BB's
image on a row is therefore where the BB was during that row's window.

The tracker must then report, for each point, a time at which the BB truly was at the reported position:
its row's mid-exposure time. The checks: the along-track time error is near zero on average (a start-of-
exposure time would be E/2 early), and it does not change from the top of the frame to the bottom (a
readout applied with the wrong sign or scale would make it drift by up to the full readout). Checked by
hand: tracking the same clip without ``exposure_s`` fails the first test, without ``readout_s`` both.
"""

from __future__ import annotations

import cv2
import numpy as np
import pytest
from track_synth import simple_rig, write_clip

from hopscope.tracker.pipeline import TrackOptions, track_video

ROWS, COLS = 240, 320
FPS = 240.0
READOUT_S = 3.0e-3
EXPOSURE_S = 1.0e-3
#: Own camera (a pinhole facing the plane z = 0 from 20 m, 800 px focal length, image centre on (1, 0.5) m).
FOCAL_PX, DISTANCE_M, CENTRE_M = 800.0, 20.0, (1.0, 0.5)
#: The BB: start (m), velocity (m/s), gravity along −y (m/s²), image radius (px).
START_M, VELOCITY_MPS, G = (-2.86, -2.01), (48.0, 30.0), 9.80665
RADIUS_PX = 2.5
#: Sub-steps of the exposure and of each pixel (per axis) in the row-by-row rendering.
TIME_STEPS, PIXEL_STEPS = 24, 4

#: Mean along-track time error allowed, s: a tenth of the half-exposure a start-of-exposure time would
#: be off by (0.5 ms), and far below it.
MEAN_TIME_TOL_S = 0.05e-3
#: Top-to-bottom drift of the time error allowed, s: a tenth of the readout.
ROW_DRIFT_TOL_S = 0.1 * READOUT_S


def world_at(t):
    """(X, Y) of the BB in metres at time t, s (constant velocity plus gravity)."""
    t = np.asarray(t, dtype=float)
    return START_M[0] + VELOCITY_MPS[0] * t, START_M[1] + VELOCITY_MPS[1] * t - 0.5 * G * t * t


def project(x, y):
    """Own pinhole: (u, v) px of the plane point (x, y) m; u grows with x, v grows downward (y up)."""
    cu, cv = COLS / 2 - 0.5, ROWS / 2 - 0.5
    return cu + FOCAL_PX * (np.asarray(x) - CENTRE_M[0]) / DISTANCE_M, cv - FOCAL_PX * (
        np.asarray(y) - CENTRE_M[1]
    ) / DISTANCE_M


def render_frame(k: int, rng: np.random.Generator) -> np.ndarray:
    """Frame k: each row integrates the BB over its own exposure window (rolling shutter)."""
    t0 = k / FPS
    line = READOUT_S / ROWS
    img = np.full((ROWS, COLS), 30.0)
    sub = (np.arange(PIXEL_STEPS) + 0.5) / PIXEL_STEPS - 0.5  # sub-pixel offsets
    times = (np.arange(TIME_STEPS) + 0.5) / TIME_STEPS * EXPOSURE_S  # within the exposure
    cols = np.arange(COLS, dtype=float)
    xs = (cols[:, None] + sub[None, :]).ravel()  # (COLS·P,)
    for r in range(ROWS):
        u, v = project(*world_at(t0 + r * line + times))  # (T,) the BB's image during row r's window
        near = np.abs(v - r) < RADIUS_PX + 1
        if not np.any(near):
            continue
        ys = r + sub  # (P,)
        d2 = (xs[None, None, :] - u[near, None, None]) ** 2 + (ys[None, :, None] - v[near, None, None]) ** 2
        cover = (d2 < RADIUS_PX**2).mean(axis=(0, 1)) * near.mean()  # (COLS·P,) averaged over time
        img[r] += 120.0 * cover.reshape(COLS, PIXEL_STEPS).mean(axis=1)
    img = cv2.GaussianBlur(img, (0, 0), 0.7)
    img += rng.normal(0, 2.0, img.shape)
    return np.clip(np.round(img), 0, 255).astype(np.uint8)


@pytest.fixture(scope="module")
def tracked(tmp_path_factory):
    rng = np.random.default_rng(15)
    frames = [np.full((ROWS, COLS), 30, np.uint8) for _ in range(4)]  # background before the BB enters
    frames = [np.clip(f + rng.normal(0, 2.0, f.shape), 0, 255).astype(np.uint8) for f in frames]
    frames += [render_frame(k, rng) for k in range(0, 40)]
    # the BB's clock starts at frame 4 of the clip: shift the truth accordingly
    path = write_clip(tmp_path_factory.mktemp("rs") / "rs.mp4", frames, fps=FPS)
    opt = TrackOptions(readout_s=READOUT_S, exposure_s=EXPOSURE_S)
    res = track_video(str(path), simple_rig(COLS, ROWS), opt)
    assert res.ok, res.reason
    return res.track


def _time_errors(track):
    """Along-track time error of each point, s: (tracked x − true x at the reported time) / vx."""
    t_bb = track.t_s - 4 / FPS  # the BB's clock
    x_true, y_true = world_at(t_bb)
    vx = VELOCITY_MPS[0]
    return (track.x_m - x_true) / vx, track.y_m - y_true


def test_point_times_are_mid_exposure_of_the_points_row(tracked):
    assert tracked.n_points >= 30
    dt, dy = _time_errors(tracked)
    assert abs(float(np.mean(dt))) < MEAN_TIME_TOL_S, float(np.mean(dt))
    # start-of-exposure times would sit E/2 early: the check above separates the two conventions
    assert EXPOSURE_S / 2 > 5 * MEAN_TIME_TOL_S
    # and the height agrees at the reported times too (vertical motion, gravity), within 1 mm
    assert float(np.sqrt(np.mean(dy**2))) < 1e-3


def test_time_error_does_not_drift_from_top_to_bottom_row(tracked):
    dt, _ = _time_errors(tracked)
    slope = np.polyfit(tracked.v_px, dt, 1)[0]  # s per px
    assert tracked.v_px.max() - tracked.v_px.min() > 0.5 * ROWS  # the path spans most rows
    assert abs(slope * ROWS) < ROW_DRIFT_TOL_S, slope * ROWS
