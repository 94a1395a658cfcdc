"""Synthetic truth for tracker tests: spots at known sub-pixel positions, small clips, a simple rig.

The spots are drawn independently of the tracker's models: a uniform disk (the BB's image) supersampled
on a fine grid, swept along a segment for motion blur, averaged onto pixels, then blurred by a Gaussian
point-spread function (the trackpy habit of testing locators on spots drawn at known positions).
"""

from __future__ import annotations

import math
from collections.abc import Iterator
from pathlib import Path

import av
import cv2
import numpy as np

from hopscope.calibration.rig import Rig

SUPERSAMPLE = 8


def draw_bb(
    shape: tuple[int, int],
    u: float,
    v: float,
    *,
    radius_px: float,
    psf_px: float = 0.7,
    streak_px: float = 0.0,
    angle_rad: float = 0.0,
    amplitude: float = 1.0,
    window: int = 0,
) -> np.ndarray:
    """A disk image at (u, v) (pixel centres at integers), swept by ``streak_px`` along ``angle_rad``.

    Returns a float image of ``shape`` with peak ``amplitude`` for a still disk. Only a window of
    ``window`` px (default: sized to the blob) around the centre is drawn, so large frames stay cheap.
    """
    h, w = shape
    half = window or int(math.ceil(radius_px + streak_px / 2 + 4 * psf_px + 3))
    r0, r1 = max(0, int(v) - half), min(h, int(v) + half + 1)
    c0, c1 = max(0, int(u) - half), min(w, int(u) + half + 1)
    out = np.zeros(shape)
    if r1 <= r0 or c1 <= c0:
        return out
    ss = SUPERSAMPLE
    yy, xx = np.mgrid[0 : (r1 - r0) * ss, 0 : (c1 - c0) * ss]
    xs = c0 + (xx + 0.5) / ss - 0.5
    ys = r0 + (yy + 0.5) / ss - 0.5
    n_sub = max(1, int(math.ceil(streak_px * 2)) + 1) if streak_px > 0 else 1
    acc = np.zeros(xs.shape)
    for s in np.linspace(-0.5, 0.5, n_sub) if n_sub > 1 else [0.0]:
        cu = u + s * streak_px * math.cos(angle_rad)
        cv = v + s * streak_px * math.sin(angle_rad)
        acc += (xs - cu) ** 2 + (ys - cv) ** 2 < radius_px**2
    acc /= n_sub
    pix = acc.reshape(r1 - r0, ss, c1 - c0, ss).mean(axis=(1, 3))
    if psf_px > 0:
        pix = cv2.GaussianBlur(pix, (0, 0), psf_px)
    out[r0:r1, c0:c1] = amplitude * pix
    return out


def textured_background(shape: tuple[int, int], *, level: float, contrast: float, rng: np.random.Generator):
    """A smooth random texture (a sunlit wall, plaster) of mean ``level`` and spread ``contrast``."""
    h, w = shape
    coarse = rng.normal(0.0, 1.0, (max(2, h // 12), max(2, w // 12)))
    tex = cv2.resize(coarse, (w, h), interpolation=cv2.INTER_CUBIC)
    tex += 0.5 * rng.normal(0.0, 1.0, (h, w))
    tex = cv2.GaussianBlur(tex, (0, 0), 1.0)
    tex = (tex - tex.mean()) / (tex.std() + 1e-12)
    return level + contrast * tex


def write_clip(
    path: Path,
    frames: Iterator[np.ndarray] | list[np.ndarray],
    *,
    fps: float = 240.0,
    times_s: list[float] | None = None,
    lossless: bool = True,
    metadata: dict[str, str] | None = None,
) -> Path:
    """Encode grey uint8 frames to H.264 (lossless by default) with PyAV; ``times_s`` sets each pts."""
    container = av.open(str(path), mode="w")
    if metadata:
        container.metadata.update(metadata)
    stream = container.add_stream("libx264", rate=int(round(fps)))
    stream.pix_fmt = "yuv420p"
    stream.options = {"preset": "ultrafast", "qp": "0"} if lossless else {"preset": "ultrafast", "crf": "20"}
    first = True
    tb = None
    for i, img in enumerate(frames):
        if first:
            stream.height, stream.width = img.shape
            first = False
        fr = av.VideoFrame.from_ndarray(np.ascontiguousarray(img), format="gray").reformat(format="yuv420p")
        if times_s is not None:
            if tb is None:
                from fractions import Fraction

                tb = Fraction(1, 90000)
                stream.codec_context.time_base = tb
            fr.pts = int(round(times_s[i] * 90000))
            fr.time_base = tb
        for pkt in stream.encode(fr):
            container.mux(pkt)
    for pkt in stream.encode():
        container.mux(pkt)
    container.close()
    return path


def simple_rig(width: int, height: int, *, focal_px: float = 800.0, distance_m: float = 20.0) -> Rig:
    """A distortion-free camera looking straight at the plane z = 0 from distance_m; the image centre sees
    world (1, 0.5) m (x right, y up). The default scale, 25 mm per px at 20 m, makes the test flights'
    few px per frame at 240 fps BB speeds (about 50 m/s)."""
    k = np.array([[focal_px, 0, width / 2 - 0.5], [0, focal_px, height / 2 - 0.5], [0, 0, 1.0]])
    r = np.diag([1.0, -1.0, -1.0])
    c = np.array([1.0, 0.5, distance_m])
    return Rig(
        image_size=(width, height),
        camera_matrix=k,
        dist_coeffs=np.zeros(5),
        rotation=r,
        translation=-r @ c,
        plane_z_m=0.0,
        reprojection_rms_px=0.1,
    )


def flight_frames(
    shape: tuple[int, int],
    n: int,
    *,
    start_uv: tuple[float, float],
    vel_px: tuple[float, float],
    acc_px: tuple[float, float] = (0.0, 0.0),
    first_frame: int = 0,
    radius_px: float = 2.5,
    amplitude: float = 120.0,
    background: np.ndarray | None = None,
    level: float = 30.0,
    noise: float = 2.0,
    streak_px_per_step: float = 0.0,
    rng: np.random.Generator,
    distractor: tuple[tuple[float, float], tuple[float, float], float] | None = None,
):
    """Frames of a BB flying u = u0 + vu·k + ½au·k², v likewise (k = frame − first_frame), plus truth.

    ``distractor`` = (start_uv, vel_px, jitter_px): a second blob of the same polarity that wanders
    (random steps of ``jitter_px``). Returns (frames, truth list of (frame, u, v) for frames with the BB).
    """
    h, w = shape
    bg = background if background is not None else np.full(shape, level)
    frames = []
    truth = []
    du = np.array(start_uv, float) if distractor else None
    for f in range(n):
        img = bg.copy()
        k = f - first_frame
        if k >= 0:
            u = start_uv[0] + vel_px[0] * k + 0.5 * acc_px[0] * k * k
            v = start_uv[1] + vel_px[1] * k + 0.5 * acc_px[1] * k * k
            if -5 < u < w + 5 and -5 < v < h + 5:
                vu = vel_px[0] + acc_px[0] * k
                vv = vel_px[1] + acc_px[1] * k
                img += draw_bb(
                    shape,
                    u,
                    v,
                    radius_px=radius_px,
                    amplitude=amplitude,
                    streak_px=streak_px_per_step * math.hypot(vu, vv),
                    angle_rad=math.atan2(vv, vu),
                )
                if 4 <= u <= w - 5 and 4 <= v <= h - 5:
                    truth.append((f, u, v))
        if distractor is not None:
            (su, sv), (dvu, dvv), jit = distractor
            if f == 0:
                du = np.array([su, sv], float)
            else:
                du = du + np.array([dvu, dvv]) + rng.normal(0, jit, 2)
            img += draw_bb(shape, du[0], du[1], radius_px=radius_px + 1, amplitude=0.8 * amplitude)
        img += rng.normal(0, noise, shape)
        frames.append(np.clip(np.round(img), 0, 255).astype(np.uint8))
    return frames, truth


def localised_spots(
    n: int,
    *,
    radius_px: float,
    psf_px: float,
    noise: float,
    streak_px: float = 0.0,
    amplitude: float = 100.0,
    level: float = 40.0,
    rng: np.random.Generator,
):
    """Localise ``n`` spots drawn at random sub-pixel positions (and random streak directions).

    Each window is the BB drawn by :func:`draw_bb` on a flat level, Gaussian noise of ``noise`` grey
    levels added and the sum rounded to 8 bits, minus the level (a perfect background). Returns
    (errors (m, 2) px, σ (m, 2) px, floors (m,) px, failed count) over the m successful fits.
    """
    from hopscope.tracker.localise import QUANTISATION_NOISE_DN, localise

    half = int(math.ceil(radius_px + streak_px / 2 + 4 * psf_px + 4))
    size = 2 * half + 1
    err, sig, floor = [], [], []
    failed = 0
    for _ in range(n):
        u, v = half + rng.uniform(-0.5, 0.5), half + rng.uniform(-0.5, 0.5)
        ang = rng.uniform(0.0, math.pi)
        img = level + draw_bb(
            (size, size), u, v, radius_px=radius_px, psf_px=psf_px, amplitude=amplitude, streak_px=streak_px,
            angle_rad=ang,
        )  # fmt: skip
        raw = np.clip(np.round(img + rng.normal(0.0, noise, img.shape)), 0, 255)
        d = localise(
            (raw - level).astype(np.float32), (0, 0), frame=0, sign=1, noise_floor=QUANTISATION_NOISE_DN
        )
        if not d.ok:
            failed += 1
            continue
        err.append((d.u_px - u, d.v_px - v))
        sig.append((d.sigma_u_px, d.sigma_v_px))
        floor.append(d.sigma_floor_px)
    return np.array(err), np.array(sig), np.array(floor), failed


#: The grid of spots for the σ-honesty check: BB image radius, lens blur, noise (grey levels), streak.
SIGMA_GRID = [
    (r, p, nz, L) for r in (1.5, 2.5, 4.0) for p in (0.5, 1.0) for nz in (2.0, 4.0, 8.0) for L in (0.0, 6.0)
]
