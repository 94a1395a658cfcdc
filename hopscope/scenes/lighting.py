"""Light in the scene: the textured wall behind the flight plane, the sunlit gradient, mains flicker.

Notes
-----
Pixel points are (u, v) with the centre of the top-left pixel at (0, 0); images are indexed (row, col).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .camera import SceneCamera, plane_homography
from .spec import LightingSpec

#: Wall texture: number of sinusoids and the shortest period in pixels (band limit, no aliasing).
WALL_COMPONENTS = 24
WALL_MIN_PERIOD_PX = 4.0
#: Flicker phase offset (radians) - fixed, so rendering stays reproducible.
FLICKER_PHASE_RAD = 0.7


@dataclass(frozen=True, eq=False)
class WallTexture:
    """A band-limited random texture on the wall plane: 1 + Σ a_i sin(k_i · p + φ_i) (relative)."""

    wavevectors: np.ndarray  # (K, 2) rad/m
    amplitudes: np.ndarray  # (K,)
    phases: np.ndarray  # (K,)

    @classmethod
    def random(
        cls, rng: np.random.Generator, *, contrast: float, max_freq_cpm: float, min_freq_cpm: float = 0.8
    ) -> WallTexture:
        k = WALL_COMPONENTS
        max_freq_cpm = max(max_freq_cpm, 1.5 * min_freq_cpm)
        freq = np.exp(rng.uniform(np.log(min_freq_cpm), np.log(max_freq_cpm), k))
        ang = rng.uniform(0, np.pi, k)
        kv = 2 * np.pi * freq[:, None] * np.stack([np.cos(ang), np.sin(ang)], axis=1)
        amp = freq**-0.5
        amp *= contrast / math.sqrt(0.5 * float(np.sum(amp**2)))  # std of the sum = contrast
        return cls(kv, amp, rng.uniform(0, 2 * np.pi, k))

    def __call__(self, wx: np.ndarray, wy: np.ndarray) -> np.ndarray:
        out = np.ones(np.shape(wx))
        for (kx, ky), a, ph in zip(self.wavevectors, self.amplitudes, self.phases, strict=True):
            out += a * np.sin(kx * wx + ky * wy + ph)
        return out


def illumination(camera: SceneCamera, lighting: LightingSpec, u: np.ndarray) -> np.ndarray:
    """Sunlit gradient across the image width (relative, mean 1)."""
    return 1.0 + lighting.gradient * (np.asarray(u) / max(camera.width - 1, 1) - 0.5)


def render_wall(camera: SceneCamera, lighting: LightingSpec, texture: WallTexture) -> np.ndarray:
    """Sharp (before lens blur) image of the wall behind the flight plane, DN, float (h, w)."""
    w, h = camera.image_size
    u = np.arange(w, dtype=float)
    v = np.arange(h, dtype=float)
    xn, yn = camera.rays(u, v)
    r, t = camera.rotation, camera.translation
    hw = plane_homography(r, t - lighting.wall_distance_m * r[:, 2])
    hinv = np.linalg.inv(hw)
    den = hinv[2, 0] * xn + hinv[2, 1] * yn + hinv[2, 2]
    wx = (hinv[0, 0] * xn + hinv[0, 1] * yn + hinv[0, 2]) / den
    wy = (hinv[1, 0] * xn + hinv[1, 1] * yn + hinv[1, 2]) / den
    img = lighting.wall_level_dn * texture(wx, wy) * illumination(camera, lighting, u)[None, :]
    return np.maximum(img, 0.0)


def wall_texture_for(camera: SceneCamera, lighting: LightingSpec, rng: np.random.Generator) -> WallTexture:
    """A wall texture band-limited to periods ≥ :data:`WALL_MIN_PERIOD_PX` px as seen by ``camera``."""
    depth = float(np.abs(camera.translation[2])) + lighting.wall_distance_m
    pixel_m = depth / camera.focal_px
    return WallTexture.random(
        rng, contrast=lighting.texture_contrast, max_freq_cpm=1.0 / (WALL_MIN_PERIOD_PX * pixel_m)
    )


def flicker_gain(lighting: LightingSpec, t: np.ndarray) -> np.ndarray:
    if lighting.flicker_amplitude == 0:
        return np.ones_like(t)
    return 1.0 + lighting.flicker_amplitude * np.sin(2 * np.pi * lighting.flicker_hz * t + FLICKER_PHASE_RAD)
