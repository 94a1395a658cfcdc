"""Synthetic groups of shots for the decision and compare tests: fired from a muzzle at x = 0, tracked
from about 1 m downrange (the flight model's own path plus Gaussian noise), written as track.csv.

Invented numbers (demo data): a 0.25 g BB at about 95 m/s, C_D 0.45, a 3 s spin decay.
"""

from __future__ import annotations

import numpy as np

from hopscope import cli
from hopscope.fitting.air import Air
from hopscope.fitting.bb import BB
from hopscope.fitting.flyto import fly_shots_to
from hopscope.fitting.observe import ModelSpec, RowParams, simulate_shot
from hopscope.tracker.trackfile import Track, TrackMeta, track_to_csv

MASS_KG = 2.5e-4
SPEC = ModelSpec(BB(MASS_KG), Air.standard())
DRAG = 0.45
DECAY_PER_S = 1 / 3
SIGMA_M = 3e-4
FPS = 2000.0
#: Where the tracked stretch begins, m downrange of the muzzle (x = 0).
TRACK_START_M = 1.0


def state_at(speed_mps: float, cl: float, x_m: float) -> tuple[float, float, float, float, float]:
    """(t s, y m, speed m/s, elevation rad, C_L) of a level shot from the muzzle when it reaches x_m."""
    one = np.ones(1)
    rows = RowParams(0 * one, 0 * one, speed_mps * one, 0 * one, cl * one, DRAG * one, DECAY_PER_S * one)
    path = fly_shots_to(SPEC, rows, range_m=x_m, sample_s=1e-5)
    st = path.state[-1]
    u = float(np.hypot(st[3], st[4]))
    # C_L under the linear law fades with the spin: C_L = C_L0·(ω/ω0)·(u0/u)
    cl_there = cl * float(st[6] / path.state[0, 6]) * speed_mps / u
    return float(path.t_s[-1]), float(st[1]), u, float(np.arctan2(st[4], st[3])), cl_there


def group_track(
    *,
    n_shots: int = 4,
    cl: float = 0.02,
    speed_mps: float = 95.0,
    speed_sd_mps: float = 0.0,
    cl_sd_rel: float = 0.0,
    n_points: int = 60,
    rng: int = 0,
) -> Track:
    """A track of ``n_shots`` shots fired from x = 0 (level), tracked from :data:`TRACK_START_M` on."""
    gen = np.random.default_rng(rng)
    cols: dict[str, list] = {k: [] for k in ("t", "x", "y", "s", "shot")}
    for sid in range(n_shots):
        v0 = speed_mps + speed_sd_mps * gen.standard_normal()
        c0 = cl * (1 + cl_sd_rel * gen.standard_normal())
        t1, y1, u1, el1, cl1 = state_at(v0, c0, TRACK_START_M)
        t = 0.1 * sid + t1 + np.arange(n_points) / FPS
        s = simulate_shot(
            SPEC, t_s=t, speed_mps=u1, elevation_rad=el1, lift_coefficient=cl1, drag_param=DRAG,
            decay_param=DECAY_PER_S, x0_m=TRACK_START_M, y0_m=y1, sigma_m=SIGMA_M, rng=gen,
        )  # fmt: skip
        cols["t"] += list(s.t_s)
        cols["x"] += list(s.x_m)
        cols["y"] += list(s.y_m)
        cols["s"] += list(s.sigma_m)
        cols["shot"] += [sid] * n_points
    n = len(cols["t"])
    x, y = np.array(cols["x"]), np.array(cols["y"])
    meta = TrackMeta("clip.mp4", "container", FPS, 0.0, None, "rig0", (1920, 1080), ())
    return Track(
        frame=np.arange(n), t_s=np.array(cols["t"]), u_px=1000 * x, v_px=-1000 * y, x_m=x, y_m=y,
        sigma_px=np.full(n, 0.5), sigma_m=np.array(cols["s"]), shot=np.array(cols["shot"]),
        brightness=np.full(n, 100.0), streak_len_px=np.zeros(n), flags=("",) * n, cal_dx_m=np.zeros((0, n)),
        cal_dy_m=np.zeros((0, n)), meta=meta,
    )  # fmt: skip


def write_group(path, **kw):
    """Write :func:`group_track` to ``path`` and return it."""
    path.write_text(track_to_csv(group_track(**kw)), encoding="utf-8")
    return path


def run_cli(capsys, argv):
    """(exit code, stdout, stderr) of ``hopscope ARGV`` (argparse's usage errors exit through SystemExit)."""
    try:
        rc = cli.main(argv)
    except SystemExit as exc:
        rc = exc.code
    cap = capsys.readouterr()
    return rc, cap.out, cap.err
