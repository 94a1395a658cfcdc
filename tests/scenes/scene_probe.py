"""Reading rendered frames back in the scene tests: centroids, interior frames, a marked BB's flicker.

Pixel points are (u, v) with the centre of the top-left pixel at (0, 0); images are indexed (row, col).
"""

from __future__ import annotations

import dataclasses

import numpy as np

from hopscope.scenes import ImageModelSpec, PreparedScene, SceneSpec

#: No noise, no motion blur, no rolling shutter: the geometry alone.
CLEAN = ImageModelSpec(noise=False, motion_blur=False, rolling_shutter=False)


def bb_centroid(frame: np.ndarray, background: np.ndarray, u: float, v: float, half: int = 8):
    """Intensity centroid of |frame − background| in a window around (u, v); returns (u, v)."""
    r0, c0 = int(round(v)) - half, int(round(u)) - half
    cut = (slice(r0, r0 + 2 * half + 1), slice(c0, c0 + 2 * half + 1))
    win = np.abs(frame[cut].astype(float) - background[cut])
    rr, cc = np.mgrid[cut]
    s = win.sum()
    return float((win * cc).sum() / s), float((win * rr).sum() / s)


def interior_frames(truth_frames, size, margin=10):
    """Truth records of the frames whose BB centre lies at least ``margin`` px inside the image."""
    w, h = size
    return [
        f
        for f in truth_frames
        if f["visible"] and margin < f["u_px"] < w - 1 - margin and margin < f["v_px"] < h - 1 - margin
    ]


def flat_clean(spec: SceneSpec) -> SceneSpec:
    """``spec`` with a flat, steady wall and the clean image model (the BB's own light alone varies)."""
    lighting = dataclasses.replace(spec.lighting, texture_contrast=0.0, gradient=0.0, flicker_amplitude=0.0)
    return dataclasses.replace(spec, image=CLEAN, lighting=lighting)


def flicker_series(scene: PreparedScene, frames, half: int) -> tuple[np.ndarray, np.ndarray]:
    """(mid-exposure times s, BB brightness DN·px) of ``frames``: the BB's summed light in a (2·half + 1)²
    window, background removed."""
    t = np.array([f["t_mid_s"] for f in frames])
    bright = []
    for f in frames:
        k = f["frame"]
        diff = scene.flight_frame(k, quantise=False) - scene.flight_frame(k, quantise=False, bb=False)
        r, c = int(round(f["v_px"])), int(round(f["u_px"]))
        bright.append(float(diff[r - half : r + half + 1, c - half : c + half + 1].sum()))
    return t, np.array(bright)
