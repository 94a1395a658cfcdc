"""What else is in the picture: the distractor blob crossing the flight clip, the drop's holder."""

from __future__ import annotations

import math

import numpy as np

from .camera import SceneCamera, plane_homography, project_camera_points
from .context import ClipContext, row_offsets
from .spec import ClutterSpec, SceneSpec

#: Samples per pixel side when drawing the holder's edges.
HOLDER_SUPERSAMPLE = 4


def distractor_centre(clutter: ClutterSpec, t_s: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The distractor's programmed centre (u, v) px at video times ``t_s`` (s): drift plus sideways wobble."""
    t = np.asarray(t_s, dtype=float)
    speed = math.hypot(*clutter.velocity_pxps)
    nx, ny = (
        (-clutter.velocity_pxps[1] / speed, clutter.velocity_pxps[0] / speed) if speed > 0 else (0.0, 1.0)
    )
    wob = clutter.wobble_px * np.sin(2 * np.pi * clutter.wobble_hz * t)
    cu = clutter.start_px[0] + clutter.velocity_pxps[0] * t + nx * wob
    cv = clutter.start_px[1] + clutter.velocity_pxps[1] * t + ny * wob
    return cu, cv


def draw_distractor(ctx: ClipContext, img: np.ndarray, t_k: float, clutter: ClutterSpec) -> None:
    """Darken (``darkness``) and light (``glow_dn``) a soft disk on its path, each row at its own time."""
    h, w = img.shape
    cu, cv = distractor_centre(clutter, t_k + row_offsets(ctx, np.arange(h)))
    r = clutter.radius_px
    rows = np.nonzero(np.abs(np.arange(h) - cv) < r + 2)[0]
    if rows.size == 0:
        return
    u_lo = int(max(0, math.floor(cu[rows].min() - r - 2)))
    u_hi = int(min(w - 1, math.ceil(cu[rows].max() + r + 2)))
    if u_hi < u_lo:
        return
    cols = np.arange(u_lo, u_hi + 1)
    d = np.hypot(cols[None, :] - cu[rows, None], rows[:, None] - cv[rows, None])
    cover = np.clip(r - d + 0.5, 0.0, 1.0)
    img[rows[:, None], cols[None, :]] *= 1.0 - clutter.darkness * cover
    if clutter.glow_dn > 0:
        img[rows[:, None], cols[None, :]] += clutter.glow_dn * cover


def holder_rect_m(spec: SceneSpec) -> tuple[tuple[float, float], tuple[float, float]]:
    """The drop holder's extent ((x0, x1), (y0, y1)) in the BB's plane, m.

    A bar whose right edge touches the resting BB's leftmost point and which reaches from the BB's centre
    height up by ``holder_height_m``.
    """
    d = spec.drop
    if d is None:
        raise ValueError(f"scene {spec.name!r} has no drop clip")
    x, y, _ = d.release_m
    r = 0.5 * spec.bb.diameter_m
    return (x - r - d.holder_width_m, x - r), (y, y + d.holder_height_m)


def holder_truth(spec: SceneSpec) -> dict[str, object]:
    """truth.json's record of the holder: frames at rest, extent in the plane (m)."""
    (x0, x1), (y0, y1) = holder_rect_m(spec)
    frames = spec.drop.holder_frames if spec.drop is not None else 0
    return {"frames": frames, "x_m": [x0, x1], "y_m": [y0, y1]}


def holder_background(camera: SceneCamera, spec: SceneSpec, background: np.ndarray) -> np.ndarray:
    """The sharp background of the drop clip: ``background`` with the holder drawn in (when there is one).

    The holder is flat, lit evenly at ``holder_level_dn``, and rendered by inverse mapping onto the plane
    z = release z, ``HOLDER_SUPERSAMPLE``² samples per pixel.
    """
    d = spec.drop
    if d is None or d.holder_frames == 0:
        return background
    (x0, x1), (y0, y1) = holder_rect_m(spec)
    z = d.release_m[2]
    corners = np.array([[x0, y0, z], [x1, y0, z], [x1, y1, z], [x0, y1, z]])
    uv = project_camera_points(camera, camera.to_camera(corners))
    w, h = camera.image_size
    u0, u1 = max(0, int(uv[:, 0].min()) - 2), min(w - 1, int(uv[:, 0].max()) + 3)
    v0, v1 = max(0, int(uv[:, 1].min()) - 2), min(h - 1, int(uv[:, 1].max()) + 3)
    out = background.copy()
    if u1 < u0 or v1 < v0:
        return out
    n = HOLDER_SUPERSAMPLE
    xs, ys = camera.supersampled_rays(n)
    xn = xs[v0 * n : (v1 + 1) * n, u0 * n : (u1 + 1) * n].astype(float)
    yn = ys[v0 * n : (v1 + 1) * n, u0 * n : (u1 + 1) * n].astype(float)
    r = camera.rotation
    hinv = np.linalg.inv(plane_homography(r, camera.translation + z * r[:, 2]))
    den = hinv[2, 0] * xn + hinv[2, 1] * yn + hinv[2, 2]
    px = (hinv[0, 0] * xn + hinv[0, 1] * yn + hinv[0, 2]) / den
    py = (hinv[1, 0] * xn + hinv[1, 1] * yn + hinv[1, 2]) / den
    inside = (px >= x0) & (px <= x1) & (py >= y0) & (py <= y1) & (den > 0)
    alpha = inside.reshape(v1 - v0 + 1, n, u1 - u0 + 1, n).mean(axis=(1, 3))
    patch = out[v0 : v1 + 1, u0 : u1 + 1]
    out[v0 : v1 + 1, u0 : u1 + 1] = patch * (1.0 - alpha) + d.holder_level_dn * alpha
    return out
