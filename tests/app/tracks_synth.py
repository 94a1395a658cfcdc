"""Synthetic track files for the app's tests: shots simulated with the flight model, in track.csv form."""

from __future__ import annotations

import numpy as np

from hopscope.fitting.air import Air
from hopscope.fitting.bb import BB
from hopscope.fitting.observe import ModelSpec, simulate_shot
from hopscope.tracker.trackfile import Track, TrackMeta

MASS_KG = 2.5e-4
TRUTH = {
    "speed_mps": 95.0,
    "elevation_rad": 0.01,
    "lift_coefficient": 0.2,
    "drag_param": 0.45,
    "decay_param": 1 / 3,
}
SIGMA_M = 5e-4
#: The fit recovers the simulated speed within this many of its own standard errors.
Z_TOL = 4.0


def synthetic_track(n_shots=1, n=40, fps=2000.0, seed=0, k_cal=4, rig="abc123", warnings=(), speeds_mps=None):
    """Shots of the flight model with Gaussian noise and a small-scale-error calibration ensemble."""
    spec = ModelSpec(BB(MASS_KG), Air.standard())
    rng = np.random.default_rng(seed)
    cols = {k: [] for k in ("frame", "t_s", "x_m", "y_m", "sigma_m", "shot")}
    cal = []
    for sid in range(n_shots):
        t = 0.1 * sid + np.arange(n) / fps
        truth = dict(TRUTH)
        if speeds_mps is not None:
            truth["speed_mps"] = speeds_mps[sid]
        s = simulate_shot(spec, t_s=t, sigma_m=SIGMA_M, rng=rng, x0_m=0.2, **truth)
        cols["frame"] += list(range(sid * 1000, sid * 1000 + n))
        cols["t_s"] += list(s.t_s)
        cols["x_m"] += list(s.x_m)
        cols["y_m"] += list(s.y_m)
        cols["sigma_m"] += list(s.sigma_m)
        cols["shot"] += [sid] * n
        # a calibration ensemble: small scale errors about the origin (systematic across points)
        scales = rng.normal(0, 1e-4, k_cal)
        cal.append(np.stack([scales[:, None] * s.x_m[None], scales[:, None] * s.y_m[None]], axis=-1))
    n_all = len(cols["t_s"])
    cal_all = np.concatenate(cal, axis=1) if k_cal else np.zeros((0, n_all, 2))
    x = np.array(cols["x_m"])
    y = np.array(cols["y_m"])
    meta = TrackMeta("clip.mp4", "container", fps, 0.0, None, rig, (1920, 1080), tuple(warnings))
    return Track(
        frame=np.array(cols["frame"]),
        t_s=np.array(cols["t_s"]),
        u_px=1000 * x,
        v_px=-1000 * y,
        x_m=x,
        y_m=y,
        sigma_px=np.full(n_all, 0.5),
        sigma_m=np.array(cols["sigma_m"]),
        shot=np.array(cols["shot"]),
        brightness=np.full(n_all, 100.0),
        streak_len_px=np.zeros(n_all),
        flags=("",) * n_all,
        cal_dx_m=cal_all[:, :, 0],
        cal_dy_m=cal_all[:, :, 1],
        meta=meta,
    )
