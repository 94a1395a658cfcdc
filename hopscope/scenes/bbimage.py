"""The BB's image: a limb-darkened, marked or glowing disk, integrated over the exposure, row by row.

The disk's radius is f·r/Z px around the projected centre (u, v) (top-left pixel centre at (0, 0)); each
image row is drawn at its own rolling-shutter times.
"""

from __future__ import annotations

import math

import numpy as np

from .camera import project_camera_points
from .context import ClipContext, row_offsets
from .motion import Motion
from .spec import BBSpec, ImageModelSpec

#: Sub-samples of the exposure per pixel of streak length (motion blur smoothness).
SUBSAMPLES_PER_STREAK_PX = 4
MAX_EXPOSURE_SUBSAMPLES = 400
#: Relative limb darkening of the white BB at its edge.
LIMB_DARKENING = 0.25
#: Reflectance of the dark half of the marked BB relative to its bright half.
MARK_DARK_FRACTION = 0.1


def draw_bb(
    ctx: ClipContext,
    img: np.ndarray,
    gain_rows: np.ndarray,
    motion: Motion,
    t_k: float,
    bb: BBSpec,
    image: ImageModelSpec,
) -> None:
    """Composite the BB into ``img`` (sharp, DN) for the frame starting at video time ``t_k``."""
    cam = ctx.camera
    w, h = cam.image_size
    exposure = ctx.spec.camera.exposure_s
    span = ctx.readout_s + exposure
    tc = t_k + np.linspace(0.0, span, 17)
    pos, _, present = motion.states(tc)
    if not np.any(present):
        return
    pc = cam.to_camera(pos[present])
    if np.any(pc[:, 2] <= 1e-3):
        return
    uv = project_camera_points(cam, pc)
    fx = float(cam.camera_matrix[0, 0])
    r_m = 0.5 * bb.diameter_m
    rho_max = float(np.max(fx * r_m / pc[:, 2]))
    halo = 4.0 * (bb.halo_sigma_px + rho_max) if bb.kind == "tracer" else 0.0
    pad = rho_max + halo + 3.0
    u_lo = int(max(0, math.floor(uv[:, 0].min() - pad)))
    u_hi = int(min(w - 1, math.ceil(uv[:, 0].max() + pad)))
    v_lo = int(max(0, math.floor(uv[:, 1].min() - pad)))
    v_hi = int(min(h - 1, math.ceil(uv[:, 1].max() + pad)))
    if u_hi < u_lo or v_hi < v_lo:
        return
    rows = np.arange(v_lo, v_hi + 1)
    cols = np.arange(u_lo, u_hi + 1)
    # sub-samples of the exposure: enough for a smooth streak
    if image.motion_blur:
        step = np.linalg.norm(np.diff(uv, axis=0), axis=1).max() if uv.shape[0] > 1 else 0.0
        streak = step * (tc.size - 1) * exposure / span if span > 0 else 0.0
        n_sub = int(min(MAX_EXPOSURE_SUBSAMPLES, max(1, math.ceil(SUBSAMPLES_PER_STREAK_PX * streak) + 1)))
        frac = (np.arange(n_sub) + 0.5) / n_sub
    else:
        n_sub = 1
        frac = np.array([0.5])
    times = t_k + row_offsets(ctx, rows)[:, None] + frac[None, :] * exposure  # (R, J)
    pos, ang, present = motion.states(times)
    pcam = cam.to_camera(pos.reshape(-1, 3))
    uvs = project_camera_points(cam, pcam).reshape(rows.size, n_sub, 2)
    z = pcam[:, 2].reshape(rows.size, n_sub)
    rho = fx * r_m / np.maximum(z, 1e-6)
    q = image.bb_supersample
    sub = (np.arange(q) + 0.5) / q - 0.5
    ys = rows[:, None] + sub[None, :]  # (R, q)
    xs = (cols[:, None] + sub[None, :]).reshape(-1)  # (C*q,)
    dx = xs[None, None, None, :] - uvs[:, :, 0][:, :, None, None]  # (R, J, 1, Cq)
    dy = ys[:, None, :, None] - uvs[:, :, 1][:, :, None, None]  # (R, J, q, 1)
    d2 = dx * dx + dy * dy
    d = np.sqrt(d2)
    rr = rho[:, :, None, None]
    cover = np.clip((rr - d) * q + 0.5, 0.0, 1.0) * present[:, :, None, None]
    frac_r = np.clip(d2 / np.maximum(rr * rr, 1e-12), 0.0, 1.0)
    emit = None
    if bb.kind == "white":
        radiance = bb.brightness_dn * (1.0 - LIMB_DARKENING * (1.0 - np.sqrt(1.0 - frac_r)))
    elif bb.kind == "marked":
        world_ang = ang + math.radians(bb.mark_phase_deg)
        # the mark's bright-side direction in the image: world angle a → image (cos a, −sin a) (v down)
        mx = np.cos(world_ang)[:, :, None, None]
        my = -np.sin(world_ang)[:, :, None, None]
        side = (dx * mx + dy * my) * q
        albedo = MARK_DARK_FRACTION + (1.0 - MARK_DARK_FRACTION) * np.clip(side + 0.5, 0.0, 1.0)
        shade = np.clip(0.65 - 0.35 * dy / np.maximum(rr, 1e-6), 0.2, 1.0)  # lit from above (−v)
        radiance = bb.brightness_dn * albedo * shade * (1.0 - LIMB_DARKENING * (1.0 - np.sqrt(1.0 - frac_r)))
    else:  # tracer: self-luminous core and halo
        radiance = np.zeros_like(d)
        sig = bb.halo_sigma_px + rr
        emit = (
            bb.brightness_dn * cover
            + bb.halo_dn * np.exp(-0.5 * d2 / (sig * sig)) * present[:, :, None, None]
        )
    shape = (rows.size, n_sub, q, cols.size, q)
    alpha = np.broadcast_to(cover, d.shape).reshape(shape).mean(axis=(1, 2, 4))
    refl = np.broadcast_to(cover * radiance, d.shape).reshape(shape).mean(axis=(1, 2, 4))
    g = gain_rows[rows][:, None]
    patch = img[v_lo : v_hi + 1, u_lo : u_hi + 1]
    new = patch * (1.0 - alpha) + refl * g
    if emit is not None:
        new = new + np.broadcast_to(emit, d.shape).reshape(shape).mean(axis=(1, 2, 4))
    img[v_lo : v_hi + 1, u_lo : u_hi + 1] = new
