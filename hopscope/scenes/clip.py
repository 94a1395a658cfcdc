"""Frames of a clip and their truth: background × flicker, distractor, BB, lens blur, noise; true centres.

Notes
-----
Pixel points are (u, v) with the centre of the top-left pixel at (0, 0); images are indexed (row, col).
Time: frame k starts at k/fps; row r of frame k is exposed over [k/fps + r·readout/rows, ... + exposure].
"""

from __future__ import annotations

import math
from typing import Any

import cv2
import numpy as np

from .bbimage import draw_bb
from .camera import project_camera_points
from .clutter import draw_distractor
from .context import ClipContext, row_offsets
from .lighting import flicker_gain
from .motion import Motion
from .sensor import finish

#: Spacing of the finely sampled true path in truth.json, s (the brief asks for ≤ 0.2 ms).
PATH_STEP_S = 1e-4


def clip_frame(
    ctx: ClipContext,
    k: int,
    motion: Motion | None,
    *,
    rng: np.random.Generator | None,
    with_clutter: bool = True,
    quantise: bool = True,
) -> np.ndarray:
    """Frame ``k`` of a clip: background × flicker, distractor, BB, lens blur, noise, 8-bit (or float DN)."""
    spec = ctx.spec
    t_k = k / ctx.fps
    h = ctx.camera.height
    row_t = t_k + row_offsets(ctx, np.arange(h)) + 0.5 * spec.camera.exposure_s
    gain = flicker_gain(spec.lighting, row_t)
    img = ctx.background * gain[:, None]
    if with_clutter and spec.clutter.distractor:
        draw_distractor(ctx, img, t_k, spec.clutter)
    if motion is not None:
        draw_bb(ctx, img, gain, motion, t_k, spec.bb, spec.image)
    if not quantise:
        out = img.astype(np.float32)
        if spec.camera.psf_sigma_px > 0:
            out = cv2.GaussianBlur(out, (0, 0), spec.camera.psf_sigma_px, borderType=cv2.BORDER_REFLECT)
        return out
    return finish(img, spec.camera.psf_sigma_px, spec.image, rng)


def true_frames(ctx: ClipContext, motion: Motion, n_frames: int) -> list[dict[str, Any]]:
    """Per frame: container time, mid-exposure time at the BB's row, true projected centre, etc."""
    cam = ctx.camera
    fps = ctx.fps
    exposure = ctx.spec.camera.exposure_s
    fx = float(cam.camera_matrix[0, 0])
    r_m = 0.5 * ctx.spec.bb.diameter_m
    w, h = cam.image_size
    out = []
    for k in range(n_frames):
        t_k = k / fps
        t_mid = t_k + 0.5 * exposure
        for _ in range(6):  # fixed point: the row depends on the time, the time on the row
            pos, _, present = motion.states(np.array([t_mid]))
            pc = cam.to_camera(pos[0])
            if pc[0, 2] <= 0:
                break
            uv = project_camera_points(cam, pc)[0]
            row = float(np.clip(uv[1], 0.0, h - 1.0))
            t_mid = t_k + row * ctx.readout_s / h + 0.5 * exposure
        pos, ang, present = motion.states(np.array([t_mid - 0.5 * exposure, t_mid, t_mid + 0.5 * exposure]))
        t_rel = float(np.clip(t_mid - motion.t0_s, motion.trajectory.t_s[0], motion.trajectory.t_s[-1]))
        spin = float(motion.trajectory.sample(np.array([t_rel]))[0, 0, 6])
        pc = cam.to_camera(pos)
        uv3 = project_camera_points(cam, pc)
        uv = uv3[1]
        vis = bool(present[1] and pc[1, 2] > 0 and -0.5 <= uv[0] <= w - 0.5 and -0.5 <= uv[1] <= h - 0.5)
        out.append(
            {
                "frame": k,
                "t_s": t_k,
                "t_mid_s": float(t_mid),
                "u_px": float(uv[0]),
                "v_px": float(uv[1]),
                "x_m": float(pos[1, 0]),
                "y_m": float(pos[1, 1]),
                "z_m": float(pos[1, 2]),
                "visible": vis,
                "radius_px": float(fx * r_m / pc[1, 2]),
                "streak_len_px": float(np.linalg.norm(uv3[2] - uv3[0])) if present.all() else 0.0,
                "spin_radps": spin,
                "spin_angle_rad": float(ang[1]),
            }
        )
    return out


def path_samples(motion: Motion, t_from: float, t_to: float) -> dict[str, list[float]]:
    n = max(2, int(math.ceil((t_to - t_from) / PATH_STEP_S)) + 1)
    t = np.linspace(t_from, t_to, n)
    st = motion.trajectory.sample(t - motion.t0_s)[0]
    return {
        "t_s": t.tolist(),
        "x_m": st[:, 0].tolist(),
        "y_m": st[:, 1].tolist(),
        "z_m": st[:, 2].tolist(),
        "speed_mps": np.linalg.norm(st[:, 3:6], axis=1).tolist(),
    }
