"""The renderer: board images, the flight clip, the drop clip and ``truth.json`` for a :class:`SceneSpec`.

Image model (every effect can be switched off for tests through :class:`~hopscope.scenes.spec.ImageModelSpec`):

- geometry: OpenCV pinhole camera with radial and tangential distortion (:mod:`hopscope.scenes.camera`);
  textures are rendered by inverse mapping (pixel → ray → plane → analytic texture), supersampled;
- board: analytic checker squares, box-filtered per sample (exact integral of the square wave over the
  sample's footprint), white margin, lit by ``board_illumination_dn`` × reflectance × a gentle gradient;
- wall: a plane ``wall_distance_m`` behind the flight plane with a band-limited sum-of-sinusoids texture
  (no aliasing at one sample per pixel) and a sunlit gradient;
- BB: a disk of radius f·r/Z px around the projected centre (white: limb-darkened; tracer: bright core and
  Gaussian halo, self-luminous; marked: half dark, lit from above, so brightness follows the spin angle),
  drawn with ``bb_supersample``² samples per pixel, integrated over the exposure with enough sub-samples for
  a smooth streak, each row at its own rolling-shutter time;
- lens blur (Gaussian PSF), mains flicker (per row time), an optional dark distractor, shot + read noise,
  8-bit quantisation; clips written by ``cv2.VideoWriter`` (fourcc ``mp4v``, lossy) as 3-channel BGR.

The BB is flown by the project's flight model (:func:`fitting.flight.fly`), never by physics of its own.

Known simplifications (honest limits of the model):

- the BB's image is a disk of radius f·r/Z centred on the projected centre; the lens distortion's local
  change of scale (a few per cent at the frame's edges) and the perspective offset of a sphere's outline
  (far below 0.01 px here) are not drawn;
- shot noise is Gaussian with the Poisson variance; there is no fixed-pattern noise, vignetting, defocus
  or sensor saturation bloom (the tracer's glow is a Gaussian halo);
- the distractor moves in image space (it is not a 3-D object), and the wall is a flat plane;
- lighting is the same for every board pose (no shadows or glare on the board).

Notes
-----
Pixel points are (u, v) with the centre of the top-left pixel at (0, 0); images are indexed (row, col).
World frame: x downrange, y up, z toward the camera, metres; the flight plane is z = 0.
Time: frame k has container timestamp k/fps; row r of frame k is exposed over
[k/fps + r·readout/rows, k/fps + r·readout/rows + exposure].
"""

from __future__ import annotations

import itertools
import json
import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import cv2
import numpy as np
from scipy.integrate import cumulative_trapezoid

from hopscope.fitting.air import Air
from hopscope.fitting.bb import BB
from hopscope.fitting.flight import FlightModel, LaunchState, Trajectory, fly
from hopscope.fitting.laws import ConstantDrag, ExponentialDecay, LinearLift
from hopscope.shared.fileio import atomic_path, write_text_atomic

from .camera import SceneCamera, project_camera_points, rotation_about
from .spec import (
    BBSpec,
    BoardSpec,
    ClutterSpec,
    ImageModelSpec,
    LightingSpec,
    SceneSpec,
)

TRUTH_SCHEMA = "hopscope.truth/1"
ALL_PARTS = ("lens", "plane", "drop", "flight")

#: Step of the RK4 integration used for the truth, s (Hermite interpolation in between).
FLIGHT_STEP_S = 2e-4
#: Spacing of the finely sampled true path in truth.json, s (the brief asks for ≤ 0.2 ms).
PATH_STEP_S = 1e-4
#: Sub-samples of the exposure per pixel of streak length (motion blur smoothness).
SUBSAMPLES_PER_STREAK_PX = 4
MAX_EXPOSURE_SUBSAMPLES = 400
#: Wall texture: number of sinusoids and the shortest period in pixels (band limit, no aliasing).
WALL_COMPONENTS = 24
WALL_MIN_PERIOD_PX = 4.0
#: Relative limb darkening of the white BB at its edge.
LIMB_DARKENING = 0.25
#: Reflectance of the dark half of the marked BB relative to its bright half.
MARK_DARK_FRACTION = 0.1
#: Flicker phase offset (radians) - fixed, so rendering stays reproducible.
FLICKER_PHASE_RAD = 0.7

Progress = Callable[[str, int, int], None]


# ============================================================================================ results


@dataclass(frozen=True)
class RenderedScene:
    """Files of a rendered scene and its truth.

    Attributes
    ----------
    out_dir : the scene's folder.
    lens_view_paths : board images for the lens calibration.
    plane_views : (path, downrange offset m) of each board placement in the flight plane.
    drop_clip_path : the drop clip, or None.
    flight_clip_path : the flight clip (mp4), or None when the part was not rendered.
    truth_path : ``truth.json``.
    truth : its parsed content.
    """

    out_dir: Path
    lens_view_paths: tuple[Path, ...]
    plane_views: tuple[tuple[Path, float], ...]
    drop_clip_path: Path | None
    flight_clip_path: Path | None
    truth_path: Path
    truth: dict


# ============================================================================================ textures


def _box_filtered_square_wave(x: np.ndarray, width: np.ndarray, period_half: float) -> np.ndarray:
    """Mean of the ±1 square wave (+1 on [0, s), −1 on [s, 2s)) over [x − w/2, x + w/2].

    Exact: the integral of the square wave is the triangle wave F (F(0) = 0, F(s) = s), so the mean is
    (F(x + w/2) − F(x − w/2)) / w.
    """
    inv = 1.0 / period_half
    xs = x * inv
    ws = np.maximum(width * inv, 1e-6)

    def tri(z):  # triangle wave in units of s: 0 at even integers, 1 at odd integers
        p = 0.5 * z
        p -= np.floor(p)
        return 1.0 - np.abs(2.0 * p - 1.0)

    val = (tri(xs + 0.5 * ws) - tri(xs - 0.5 * ws)) / ws
    return np.clip(val, -1.0, 1.0)


def board_reflectance(board: BoardSpec, bx: np.ndarray, by: np.ndarray, wx: np.ndarray, wy: np.ndarray):
    """Box-filtered reflectance of the board at board coordinates (bx, by) m, footprint (wx, wy) m.

    Returns (inside, reflectance): ``inside`` marks samples on the printed sheet (margin included).

    Notes
    -----
    Board coordinates: inner corner (i, j) at (i·s, −j·s); the square whose top-left corner is the inner
    corner (a, b) (a = −1..cols−1, b = −1..rows−1) is black when a + b is odd (so the square diagonally outside the first corner is white).
    """
    s = board.square_m
    m = board.margin_m
    x0, x1 = -s, board.cols * s  # the checkered area
    y0, y1 = -board.rows * s, s
    inside = (bx >= x0 - m) & (bx <= x1 + m) & (by >= y0 - m) & (by <= y1 + m)
    wx = np.maximum(wx, 1e-9 * s)
    wy = np.maximum(wy, 1e-9 * s)
    # fraction of the footprint inside the checkered area (exact for a box footprint)
    ix = (np.clip(bx + 0.5 * wx, x0, x1) - np.clip(bx - 0.5 * wx, x0, x1)) / wx
    iy = (np.clip(by + 0.5 * wy, y0, y1) - np.clip(by - 0.5 * wy, y0, y1)) / wy
    # the squares' pattern, evaluated with the footprint kept inside the area (no phantom squares beyond it)
    xc = np.clip(bx, x0 + 0.5 * wx, x1 - 0.5 * wx)
    yc = np.clip(by, y0 + 0.5 * wy, y1 - 0.5 * wy)
    fx = _box_filtered_square_wave(xc, wx, s)
    fy = _box_filtered_square_wave(-yc, wy, s)
    black_weight = 0.5 * (1.0 - fx * fy) * ix * iy
    refl = board.white_reflectance + (board.black_reflectance - board.white_reflectance) * black_weight
    return inside, refl


def board_corners(board: BoardSpec) -> np.ndarray:
    """Inner corners in board coordinates (cols·rows, 3), m, in OpenCV's row-major order.

    Corner index j·cols + i is at (i·s, −j·s, 0): rows run along +x (image right), columns along −y (down).
    """
    i, j = np.meshgrid(np.arange(board.cols), np.arange(board.rows))
    return np.stack([i.ravel() * board.square_m, -j.ravel() * board.square_m, np.zeros(i.size)], axis=1)


def board_outline(board: BoardSpec, per_edge: int = 16, *, margin_m: float | None = None) -> np.ndarray:
    """Points along the sheet's outer edge, board coordinates (N, 3), m.

    ``margin_m`` replaces the board's white margin (e.g. 0 for the edge of the checkered area).
    """
    s = board.square_m
    m = board.margin_m if margin_m is None else margin_m
    x0, x1 = -s - m, board.cols * s + m
    y0, y1 = -board.rows * s - m, s + m
    t = np.linspace(0.0, 1.0, per_edge, endpoint=False)
    xs = np.concatenate([x0 + (x1 - x0) * t, np.full_like(t, x1), x1 - (x1 - x0) * t, np.full_like(t, x0)])
    ys = np.concatenate([np.full_like(t, y1), y1 - (y1 - y0) * t, np.full_like(t, y0), y0 + (y1 - y0) * t])
    return np.stack([xs, ys, np.zeros_like(xs)], axis=1)


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


def _plane_homography(rotation: np.ndarray, translation: np.ndarray) -> np.ndarray:
    """H with H (bx, by, 1)ᵀ = Z (x_n, y_n, 1)ᵀ for points (bx, by, 0) of a plane at pose (R, t)."""
    return np.column_stack([rotation[:, 0], rotation[:, 1], translation])


def _illumination(camera: SceneCamera, lighting: LightingSpec, u: np.ndarray) -> np.ndarray:
    """Sunlit gradient across the image width (relative, mean 1)."""
    return 1.0 + lighting.gradient * (np.asarray(u) / max(camera.width - 1, 1) - 0.5)


def render_wall(camera: SceneCamera, lighting: LightingSpec, texture: WallTexture) -> np.ndarray:
    """Sharp (before lens blur) image of the wall behind the flight plane, DN, float (h, w)."""
    w, h = camera.image_size
    u = np.arange(w, dtype=float)
    v = np.arange(h, dtype=float)
    xn, yn = camera.rays(u, v)
    r, t = camera.rotation, camera.translation
    hw = _plane_homography(r, t - lighting.wall_distance_m * r[:, 2])
    hinv = np.linalg.inv(hw)
    den = hinv[2, 0] * xn + hinv[2, 1] * yn + hinv[2, 2]
    wx = (hinv[0, 0] * xn + hinv[0, 1] * yn + hinv[0, 2]) / den
    wy = (hinv[1, 0] * xn + hinv[1, 1] * yn + hinv[1, 2]) / den
    img = lighting.wall_level_dn * texture(wx, wy) * _illumination(camera, lighting, u)[None, :]
    return np.maximum(img, 0.0)


def wall_texture_for(camera: SceneCamera, lighting: LightingSpec, rng: np.random.Generator) -> WallTexture:
    """A wall texture band-limited to periods ≥ :data:`WALL_MIN_PERIOD_PX` px as seen by ``camera``."""
    depth = float(np.abs(camera.translation[2])) + lighting.wall_distance_m
    pixel_m = depth / camera.focal_px
    return WallTexture.random(
        rng, contrast=lighting.texture_contrast, max_freq_cpm=1.0 / (WALL_MIN_PERIOD_PX * pixel_m)
    )


# ============================================================================================ board images


def _board_layer(camera: SceneCamera, board: BoardSpec, rotation, translation, supersample: int):
    """Coverage (h, w) and mean board radiance factor (h, w) of the board at pose (R, t) (board→camera)."""
    w, h = camera.image_size
    rot = np.asarray(rotation, dtype=float)
    tr = np.asarray(translation, dtype=float).reshape(3)
    outline_cam = board_outline(board) @ rot.T + tr
    if np.any(outline_cam[:, 2] <= 1e-3):
        raise ValueError("board pose puts part of the board behind the camera")
    uv = project_camera_points(camera, outline_cam)
    u0 = max(0, int(math.floor(uv[:, 0].min())) - 2)
    u1 = min(w - 1, int(math.ceil(uv[:, 0].max())) + 2)
    v0 = max(0, int(math.floor(uv[:, 1].min())) - 2)
    v1 = min(h - 1, int(math.ceil(uv[:, 1].max())) + 2)
    alpha = np.zeros((h, w))
    refl = np.zeros((h, w))
    if u1 < u0 or v1 < v0:
        return alpha, refl
    n = supersample
    hinv = np.linalg.inv(_plane_homography(rot, tr)).astype(np.float32)
    xs_all, ys_all = camera.supersampled_rays(n)
    strip = max(1, 120 // n)
    for r0 in range(v0, v1 + 1, strip):
        r1 = min(v1 + 1, r0 + strip)
        xn = xs_all[r0 * n : r1 * n, u0 * n : (u1 + 1) * n]
        yn = ys_all[r0 * n : r1 * n, u0 * n : (u1 + 1) * n]
        den = hinv[2, 0] * xn + hinv[2, 1] * yn + hinv[2, 2]
        bx = (hinv[0, 0] * xn + hinv[0, 1] * yn + hinv[0, 2]) / den
        by = (hinv[1, 0] * xn + hinv[1, 1] * yn + hinv[1, 2]) / den
        # footprint of one sample on the board, m (sum of the absolute steps along both sample axes)
        wx = np.zeros_like(bx)
        wy = np.zeros_like(by)
        for axis in (0, 1):
            if bx.shape[axis] > 1:
                wx += np.abs(np.gradient(bx, axis=axis))
                wy += np.abs(np.gradient(by, axis=axis))
        inside, rf = board_reflectance(board, bx, by, wx, wy)
        inside &= den > 0
        shape = (r1 - r0, n, u1 - u0 + 1, n)
        alpha[r0:r1, u0 : u1 + 1] = inside.reshape(shape).mean(axis=(1, 3))
        refl[r0:r1, u0 : u1 + 1] = np.where(inside, rf, 0.0).reshape(shape).mean(axis=(1, 3))
    return alpha, refl


def _finish(
    img: np.ndarray, psf_sigma_px: float, image: ImageModelSpec | None, rng: np.random.Generator | None
):
    """Lens blur, then (optionally) shot + read noise, then 8-bit quantisation (round, saturate).

    Noise: σ² = DN / gain + read² (DN²), Gaussian approximation of Poisson shot noise plus read noise.
    """
    out: np.ndarray = np.ascontiguousarray(img, dtype=np.float32)
    if psf_sigma_px > 0:
        out = cv2.GaussianBlur(out, (0, 0), psf_sigma_px, borderType=cv2.BORDER_REFLECT)
    if image is not None and image.noise:
        if rng is None:
            raise ValueError("noise needs an rng")
        var = np.maximum(out, np.float32(0.0))
        var = cv2.addWeighted(var, 1.0 / image.gain_e_per_dn, var, 0.0, image.read_noise_dn**2)
        sigma = cv2.sqrt(var)
        out = cv2.add(out, cv2.multiply(sigma, rng.standard_normal(out.shape, dtype=np.float32)))
    out = np.maximum(out, np.float32(0.0))
    return cv2.convertScaleAbs(out)  # rounds to nearest and saturates at 255 (values are >= 0 here)


def render_board_image(
    camera: SceneCamera,
    board: BoardSpec,
    rotation,
    translation,
    *,
    lighting: LightingSpec | None = None,
    background: np.ndarray | float | None = None,
    supersample: int = 3,
    psf_sigma_px: float = 0.6,
    image: ImageModelSpec | None = None,
    rng: np.random.Generator | int | None = None,
) -> np.ndarray:
    """A grayscale 8-bit image (h, w) of the board at pose (R, t) (board→camera) in front of a background.

    Parameters
    ----------
    camera : the lens (its own pose is not used).
    board : the printed board.
    rotation, translation : board→camera pose, X_cam = R · X_board + t (m); board coordinates put inner
        corner (i, j) at (i·s, −j·s, 0), see :func:`board_corners`.
    lighting : illumination (default :class:`LightingSpec`); the board is ``board_illumination_dn`` ×
        reflectance × the image-width gradient.
    background : (h, w) sharp background image in DN, or a constant DN (default: ``wall_level_dn``).
    supersample : samples per pixel side.
    psf_sigma_px : Gaussian lens blur, px (0: none).
    image : image-model switches; noise is added only when given with ``noise=True`` (needs ``rng``).
    rng : seed or generator for the noise.

    Notes
    -----
    Pixel centre of the top-left pixel at (0, 0).
    """
    lighting = lighting or LightingSpec()
    w, h = camera.image_size
    if background is None:
        background = lighting.wall_level_dn
    bg = np.broadcast_to(np.asarray(background, dtype=float), (h, w))
    alpha, refl = _board_layer(camera, board, rotation, translation, supersample)
    illum = lighting.board_illumination_dn * _illumination(camera, lighting, np.arange(w))[None, :]
    img = (1.0 - alpha) * bg + refl * illum
    gen = None if rng is None else np.random.default_rng(rng)
    return _finish(img, psf_sigma_px, image, gen)


def project_board_corners(camera: SceneCamera, board: BoardSpec, rotation, translation) -> np.ndarray:
    """True pixel positions (cols·rows, 2) of the inner corners for the board pose (R, t) (board→camera)."""
    pts = board_corners(board) @ np.asarray(rotation, float).T + np.asarray(translation, float).reshape(3)
    return project_camera_points(camera, pts)


#: Where the lens views put the board, cycling: the four corners, the four edges, the corners again, the
#: centre (image half-sizes; the board is pushed that way until it touches the image border).
_LENS_TARGETS = (
    (-1, -1),
    (1, -1),
    (1, 1),
    (-1, 1),
    (0, -1),
    (1, 0),
    (0, 1),
    (-1, 0),
    (-1, 1),
    (1, 1),
    (1, -1),
    (-1, -1),
    (0, 0),
)


def lens_view_poses(
    camera: SceneCamera, board: BoardSpec, n_views: int, tilt_deg, fill, rng: np.random.Generator
) -> list[tuple[np.ndarray, np.ndarray]]:
    """Board poses (R, t) (board→camera) as a careful user holds them: tilted 20-45°, filling the frame.

    Tilt directions go round the compass; the board visits the image's corners, edges and centre in turn
    and is pushed toward them until its sheet touches the image border (1 % margin), so the corners reach
    toward the image edges (distortion is recoverable). Each pose keeps the checkered area and a strip of
    the white margin (a third of it, at least 1 % of the image width from the border) inside the image; the
    rest of the margin may leave the frame, as it does when a user fills the frame.
    """
    w, h = camera.image_size
    base = np.diag([1.0, -1.0, -1.0])  # board x → camera x, board y (up) → camera −y, normal → camera −z
    centre_b = np.array([(board.cols - 1) * board.square_m / 2, -(board.rows - 1) * board.square_m / 2, 0.0])
    outline = board_outline(board, margin_m=board.margin_m / 3.0)
    margin = 0.01 * w
    out: list[tuple[np.ndarray, np.ndarray]] = []

    def fits(rot, tr) -> bool:
        pts = outline @ rot.T + tr
        if np.any(pts[:, 2] <= 0.05 * tr[2]):
            return False
        uv = project_camera_points(camera, pts)
        return bool(
            uv[:, 0].min() > margin
            and uv[:, 0].max() < w - 1 - margin
            and uv[:, 1].min() > margin
            and uv[:, 1].max() < h - 1 - margin
        )

    def pose(rot, f, off):
        z = camera.camera_matrix[0, 0] * board.width_m / (f * w)
        target = np.array([[(w - 1) / 2 + off[0] * w, (h - 1) / 2 + off[1] * h]])
        ray = camera.undistort_pixels(target)[0]
        return z * np.array([ray[0], ray[1], 1.0]) - rot @ centre_b

    corners = board_corners(board)

    def push(rot, f, goal):
        """Pose pushed as far toward ``goal`` as the image allows (bisection), or None if none fits."""
        if not fits(rot, pose(rot, f, np.zeros(2))):
            return None
        lo, hi = 0.0, 1.0
        for _ in range(20):
            mid = 0.5 * (lo + hi)
            if fits(rot, pose(rot, f, goal * mid)):
                lo = mid
            else:
                hi = mid
        return pose(rot, f, goal * lo)

    for i in range(n_views):
        tilt = math.radians(rng.uniform(*tilt_deg))
        jitter = rng.uniform(-0.3, 0.3)
        gamma = math.radians(rng.uniform(-15.0, 15.0))
        target = _LENS_TARGETS[i % len(_LENS_TARGETS)]
        # smaller boards reach the corners, bigger ones the edges and the centre
        share = {2: (0.0, 0.4), 1: (0.3, 0.8), 0: (0.6, 1.0)}[abs(target[0]) + abs(target[1])]
        f = fill[0] + (fill[1] - fill[0]) * rng.uniform(*share)
        goal = np.array(target, dtype=float) * 0.5 + rng.uniform(-0.03, 0.03, 2)
        if target == (0, 0):  # tilt directions go round the compass
            psis = [2 * math.pi * (i + jitter) / max(n_views, 1)]
        else:  # tilt about an axis across the target direction, whichever way reaches the edge closer
            base_psi = math.atan2(target[1], target[0]) + 0.5 * math.pi + 0.5 * jitter
            psis = [base_psi, base_psi + math.pi]
        best = None
        for _attempt in range(40):  # a smaller board if even the centred one does not fit
            for psi, g in itertools.product(psis, (gamma, -gamma) if target != (0, 0) else (gamma,)):
                rot = (
                    rotation_about((math.cos(psi), math.sin(psi), 0.0), tilt)
                    @ base
                    @ rotation_about((0, 0, 1), g)
                )
                tr = push(rot, f, goal)
                if tr is None:
                    continue
                uv = project_camera_points(camera, corners @ rot.T + tr)
                reach = float(np.max(uv @ np.asarray(target, dtype=float))) if target != (0, 0) else 0.0
                if best is None or reach > best[0]:
                    best = (reach, rot, tr)
            if best is not None:
                break
            f *= 0.95
        if best is None:
            raise ValueError(f"lens view {i}: cannot fit the {board.width_m:.2f} m board into the image")
        out.append((best[1], best[2]))
    return out


# ============================================================================================ motion


@dataclass(frozen=True, eq=False)
class _Motion:
    """A BB's path in the video clock: trajectory since release plus release time (video clock, s)."""

    trajectory: Trajectory
    t0_s: float
    spin_grid_t: np.ndarray  # times since release, s
    spin_angle: np.ndarray  # spin angle since release, rad

    def states(self, t_video: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """(positions (..., 3) m, spin angle (...,) rad, present (...,) bool) at video times (s)."""
        t = np.asarray(t_video, dtype=float) - self.t0_s
        span = self.trajectory.t_s
        present = (t >= 0.0) & (t <= span[-1])
        tc = np.clip(t, span[0], span[-1])
        flat = tc.reshape(-1)
        st = self.trajectory.sample(flat)[0]
        pos = st[:, 0:3].reshape(*t.shape, 3)
        ang = np.interp(flat, self.spin_grid_t, self.spin_angle).reshape(t.shape)
        return pos, ang, present


def _motion(traj: Trajectory, t0_s: float) -> _Motion:
    tg = np.arange(0.0, traj.t_s[-1], 1e-5)
    tg = np.append(tg, traj.t_s[-1])
    om = traj.sample(tg)[0, :, 6]
    return _Motion(traj, t0_s, tg, cumulative_trapezoid(om, tg, initial=0.0))


def flight_model(spec: SceneSpec) -> FlightModel:
    """The project's flight model for the scene (constant drag, linear lift, exponential spin decay)."""
    f = spec.flight
    air = Air.from_conditions(f.temperature_k, f.pressure_pa, f.relative_humidity)
    return FlightModel(
        bb=BB(spec.bb.mass_kg, spec.bb.diameter_m),
        air=air,
        drag=ConstantDrag(f.drag_coefficient),
        lift=LinearLift(f.lift_slope),
        decay=ExponentialDecay(f.spin_decay_time_s),
    )


def launch_state(spec: SceneSpec) -> LaunchState:
    """Launch state: speed, elevation, azimuth, muzzle; spin ω0 = (C_L0 / k) · u0 / r about +z (backspin)."""
    f = spec.flight
    omega0 = f.lift_coefficient / f.lift_slope * f.speed_mps / (0.5 * spec.bb.diameter_m)
    return LaunchState.from_speed(
        f.speed_mps,
        math.radians(f.elevation_deg),
        azimuth_rad=math.radians(f.azimuth_deg),
        spin_radps=omega0,
        spin_axis=(0.0, 0.0, 1.0),
        position_m=f.muzzle_m,
    )


def _visible_mask(camera: SceneCamera, pos: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    cam = camera.to_camera(pos)
    uv = project_camera_points(camera, cam)
    w, h = camera.image_size
    vis = (
        (cam[:, 2] > 0)
        & (uv[:, 0] >= -0.5)
        & (uv[:, 0] <= w - 0.5)
        & (uv[:, 1] >= -0.5)
        & (uv[:, 1] <= h - 0.5)
    )
    return vis, uv


def _field_x_span(camera: SceneCamera) -> tuple[float, float]:
    """Downrange extent (m) of the image's horizontal centre line on the plane z = 0."""
    w, h = camera.image_size
    xn = camera.undistort_pixels(np.array([[0.0, (h - 1) / 2], [w - 1.0, (h - 1) / 2]]))
    c = camera.centre_m
    xs = []
    for x, y in xn:
        d = camera.rotation.T @ np.array([x, y, 1.0])
        lam = -c[2] / d[2]
        xs.append(c[0] + lam * d[0])
    return min(xs), max(xs)


@dataclass(frozen=True, eq=False)
class FlightPlan:
    """The shot in the video clock: trajectory, launch time, frame count and the visible window."""

    model: FlightModel
    launch: LaunchState
    trajectory: Trajectory
    launch_time_s: float
    n_frames: int
    t_enter_s: float  # since launch
    t_exit_s: float  # since launch


def plan_flight(spec: SceneSpec, camera: SceneCamera, readout_s: float) -> FlightPlan:
    """Fly the shot and place it in the clip so that it enters after ``lead_frames`` empty frames."""
    model = flight_model(spec)
    launch = launch_state(spec)
    fps = spec.camera.fps
    x0, x1 = _field_x_span(camera)
    dist = max(x1 - spec.flight.muzzle_m[0], 0.1) + 0.2 * (x1 - x0)
    duration = dist / (0.5 * spec.flight.speed_mps) + 0.05
    traj = fly(model, launch, duration, step_s=FLIGHT_STEP_S)
    tg = np.arange(0.0, traj.t_s[-1], 2e-5)
    vis, _ = _visible_mask(camera, traj.sample(tg)[0, :, 0:3])
    if not np.any(vis):
        raise ValueError(
            f"scene {spec.name!r}: the BB never crosses the image (check muzzle_m and the camera)"
        )
    idx = np.nonzero(vis)[0]
    t_enter, t_exit = float(tg[idx[0]]), float(tg[idx[-1]])
    if idx[-1] == tg.size - 1:
        raise ValueError(f"scene {spec.name!r}: the BB is still in view after {duration:.3f} s of flight")
    launch_time = spec.flight.lead_frames / fps - t_enter
    n_frames = int(math.ceil((launch_time + t_exit) * fps)) + 1 + spec.flight.tail_frames
    needed = (n_frames + 1) / fps + readout_s + spec.camera.exposure_s - launch_time + 1e-3
    if needed > traj.t_s[-1]:
        traj = fly(model, launch, needed, step_s=FLIGHT_STEP_S)
    return FlightPlan(model, launch, traj, launch_time, n_frames, t_enter, t_exit)


def drop_fps(spec: SceneSpec) -> float:
    """Frame rate of the drop clip, 1/s (the camera's unless the drop says otherwise)."""
    if spec.drop is None or spec.drop.fps is None:
        return spec.camera.fps
    return spec.drop.fps


def plan_drop(spec: SceneSpec, model: FlightModel, readout_s: float) -> tuple[_Motion, int, float]:
    """The drop: released at rest at ``release_m`` after ``lead_frames``; returns (motion, n_frames, t0)."""
    d = spec.drop
    if d is None:
        raise ValueError(f"scene {spec.name!r} has no drop clip")
    fps = drop_fps(spec)
    t0 = d.lead_frames / fps
    n_frames = d.lead_frames + d.n_frames
    duration = (n_frames + 1) / fps + readout_s + spec.camera.exposure_s - t0 + 1e-3
    launch = LaunchState.from_speed(0.0, 0.0, spin_radps=0.0, position_m=d.release_m)
    traj = fly(model, launch, duration, step_s=FLIGHT_STEP_S)
    return _motion(traj, t0), n_frames, t0


# ============================================================================================ frames


@dataclass(frozen=True, eq=False)
class _ClipContext:
    camera: SceneCamera
    spec: SceneSpec
    background: np.ndarray  # sharp wall, DN
    readout_s: float  # effective (0 without rolling shutter)
    fps: float  # frame rate of this clip, 1/s


def _row_offsets(ctx: _ClipContext, rows: np.ndarray) -> np.ndarray:
    return np.asarray(rows, dtype=float) * ctx.readout_s / ctx.camera.height


def _flicker_gain(lighting: LightingSpec, t: np.ndarray) -> np.ndarray:
    if lighting.flicker_amplitude == 0:
        return np.ones_like(t)
    return 1.0 + lighting.flicker_amplitude * np.sin(2 * np.pi * lighting.flicker_hz * t + FLICKER_PHASE_RAD)


def _draw_distractor(ctx: _ClipContext, img: np.ndarray, t_k: float, clutter: ClutterSpec) -> None:
    """Darken a soft disk on a slow curved path (image space, each row at its own time)."""
    h, w = img.shape
    t = t_k + _row_offsets(ctx, np.arange(h))
    speed = math.hypot(*clutter.velocity_pxps)
    nx, ny = (
        (-clutter.velocity_pxps[1] / speed, clutter.velocity_pxps[0] / speed) if speed > 0 else (0.0, 1.0)
    )
    wob = clutter.wobble_px * np.sin(2 * np.pi * clutter.wobble_hz * t)
    cu = clutter.start_px[0] + clutter.velocity_pxps[0] * t + nx * wob
    cv = clutter.start_px[1] + clutter.velocity_pxps[1] * t + ny * wob
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


def _draw_bb(
    ctx: _ClipContext,
    img: np.ndarray,
    gain_rows: np.ndarray,
    motion: _Motion,
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
    times = t_k + _row_offsets(ctx, rows)[:, None] + frac[None, :] * exposure  # (R, J)
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


def clip_frame(
    ctx: _ClipContext,
    k: int,
    motion: _Motion | None,
    *,
    rng: np.random.Generator | None,
    with_clutter: bool = True,
    quantise: bool = True,
) -> np.ndarray:
    """Frame ``k`` of a clip: background × flicker, distractor, BB, lens blur, noise, 8-bit (or float DN)."""
    spec = ctx.spec
    t_k = k / ctx.fps
    h = ctx.camera.height
    row_t = t_k + _row_offsets(ctx, np.arange(h)) + 0.5 * spec.camera.exposure_s
    gain = _flicker_gain(spec.lighting, row_t)
    img = ctx.background * gain[:, None]
    if with_clutter and spec.clutter.distractor:
        _draw_distractor(ctx, img, t_k, spec.clutter)
    if motion is not None:
        _draw_bb(ctx, img, gain, motion, t_k, spec.bb, spec.image)
    if not quantise:
        out = img.astype(np.float32)
        if spec.camera.psf_sigma_px > 0:
            out = cv2.GaussianBlur(out, (0, 0), spec.camera.psf_sigma_px, borderType=cv2.BORDER_REFLECT)
        return out
    return _finish(img, spec.camera.psf_sigma_px, spec.image, rng)


def _true_frames(ctx: _ClipContext, motion: _Motion, n_frames: int) -> list[dict[str, Any]]:
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


def _path_samples(motion: _Motion, t_from: float, t_to: float) -> dict[str, list[float]]:
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


def _write_clip(path: Path, frames, size: tuple[int, int], fps: float) -> None:
    with atomic_path(path) as tmp:
        writer = cv2.VideoWriter(str(tmp), cv2.VideoWriter.fourcc(*"mp4v"), float(fps), size)
        if not writer.isOpened():
            raise OSError(f"{path}: OpenCV cannot open an mp4v video writer")
        try:
            for f in frames:
                writer.write(cv2.cvtColor(f, cv2.COLOR_GRAY2BGR))
        finally:
            writer.release()


def _write_png(path: Path, img: np.ndarray) -> None:
    with atomic_path(path) as tmp:
        if not cv2.imwrite(str(tmp), img):
            raise OSError(f"{path}: cannot write PNG")


# ============================================================================================ scene


@dataclass(frozen=True, eq=False)
class PreparedScene:
    """Everything about a scene except the files: camera, background, flight plan, drop plan, streams."""

    spec: SceneSpec
    camera: SceneCamera
    texture: WallTexture
    background: np.ndarray
    plan: FlightPlan
    flight_motion: _Motion
    readout_s: float
    streams: dict[str, np.random.Generator]

    @property
    def context(self) -> _ClipContext:
        return _ClipContext(self.camera, self.spec, self.background, self.readout_s, self.spec.camera.fps)

    @property
    def drop_context(self) -> _ClipContext:
        return _ClipContext(self.camera, self.spec, self.background, self.readout_s, drop_fps(self.spec))

    def flight_frame(
        self,
        k: int,
        *,
        rng: np.random.Generator | None = None,
        bb: bool = True,
        quantise: bool = True,
        with_clutter: bool = True,
    ) -> np.ndarray:
        """Frame ``k`` of the flight clip (8-bit, or float DN before noise when ``quantise=False``)."""
        return clip_frame(
            self.context,
            k,
            self.flight_motion if bb else None,
            rng=rng,
            quantise=quantise,
            with_clutter=with_clutter,
        )

    def true_flight_frames(self) -> list[dict[str, Any]]:
        """truth.json's per-frame records of the flight clip."""
        return _true_frames(self.context, self.flight_motion, self.plan.n_frames)

    def drop_plan(self) -> tuple[_Motion, int, float]:
        """(motion, n_frames, release time s) of the drop clip; ``ValueError`` when the scene has none."""
        if self.spec.drop is None:
            raise ValueError(f"scene {self.spec.name!r} has no drop clip")
        cached = self.__dict__.get("_drop")
        if cached is None:
            cached = plan_drop(self.spec, self.plan.model, self.readout_s)
            object.__setattr__(self, "_drop", cached)
        return cached

    def drop_frame(
        self, k: int, *, rng: np.random.Generator | None = None, bb: bool = True, quantise: bool = True
    ) -> np.ndarray:
        """Frame ``k`` of the drop clip (8-bit, or float DN before noise when ``quantise=False``)."""
        motion = self.drop_plan()[0]
        return clip_frame(self.drop_context, k, motion if bb else None, rng=rng, quantise=quantise)

    def true_drop_frames(self) -> list[dict[str, Any]]:
        """truth.json's per-frame records of the drop clip."""
        motion, n, _ = self.drop_plan()
        return _true_frames(self.drop_context, motion, n)


def prepare_scene(spec: SceneSpec, *, rng: int | np.random.Generator = 0) -> PreparedScene:
    """Build the camera, the wall, fly the BB and lay out the clip (no files written)."""
    gen = np.random.default_rng(rng)
    names = ("texture", "lens", "plane", "drop", "flight", "spare")
    streams = dict(zip(names, gen.spawn(len(names)), strict=True))
    camera = SceneCamera.from_spec(spec.camera)
    texture = wall_texture_for(camera, spec.lighting, streams["texture"])
    background = render_wall(camera, spec.lighting, texture)
    readout = spec.camera.readout_s if spec.image.rolling_shutter else 0.0
    plan = plan_flight(spec, camera, readout)
    motion = _motion(plan.trajectory, plan.launch_time_s)
    return PreparedScene(spec, camera, texture, background, plan, motion, readout, streams)


def _rt(rot: np.ndarray, tr: np.ndarray) -> dict[str, Any]:
    return {"rotation": np.asarray(rot).tolist(), "translation": np.asarray(tr).reshape(3).tolist()}


CORNER_ORDER = (
    "inner corners in the order OpenCV's findChessboardCornersSB returns them for pattern size (cols, rows): "
    "row-major, index j*cols + i is board point (i*square_m, -j*square_m, 0), i.e. rows run along board +x "
    "(image right) and columns along board -y (image down); the first corner is the top-left inner corner. "
    "cols + rows is odd, so the pattern has no 180-degree symmetry: the square diagonally outside the first "
    "corner (toward -x, +y) is white, the one diagonally outside the last corner is black. OpenCV's classic "
    "findChessboardCorners returns the same corners in reverse order for this colouring (checked in "
    "tests/scenes/test_render.py)"
)


def _cached(out_dir: Path, digest: str, parts: Sequence[str]) -> RenderedScene | None:
    path = out_dir / "truth.json"
    if not path.is_file():
        return None
    try:
        truth = load_truth(path)
    except (ValueError, OSError):
        return None
    if truth.get("spec_digest") != digest or not set(parts) <= set(truth.get("parts", [])):
        return None
    scene = _rendered_from_truth(out_dir, truth)
    files = [*scene.lens_view_paths, *(p for p, _ in scene.plane_views)]
    files += [p for p in (scene.drop_clip_path, scene.flight_clip_path) if p is not None]
    if not all(p.is_file() for p in files):
        return None
    return scene


def _rendered_from_truth(out_dir: Path, truth: dict) -> RenderedScene:
    lens = tuple(out_dir / v["file"] for v in truth["lens_views"])
    plane = tuple((out_dir / v["file"], float(v["offset_m"])) for v in truth["plane_views"])
    drop = out_dir / truth["drop"]["file"] if truth.get("drop") else None
    flight = out_dir / truth["flight"]["file"] if truth.get("flight") else None
    return RenderedScene(out_dir, lens, plane, drop, flight, out_dir / "truth.json", truth)


def render_scene(
    spec: SceneSpec,
    out_dir: str | Path,
    *,
    rng: int | np.random.Generator = 0,
    progress: Progress | None = None,
    parts: Sequence[str] = ALL_PARTS,
) -> RenderedScene:
    """Render a scene's images, clips and ``truth.json`` into ``out_dir`` (reused if already complete).

    Parameters
    ----------
    spec : the scene.
    out_dir : output folder (created if missing).
    rng : int seed (renders are cached by spec digest and seed) or a Generator (never cached).
    progress : optional callback ``progress(stage, done, total)``.
    parts : which of "lens", "plane", "drop", "flight" to render.

    Returns
    -------
    RenderedScene with the files' paths and the parsed truth.
    """
    bad = [p for p in parts if p not in ALL_PARTS]
    if bad:
        raise ValueError(f"parts: unknown part(s) {bad}; choose from {ALL_PARTS}")
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    seed = int(rng) if isinstance(rng, int | np.integer) else None
    digest = spec.digest(seed)
    if seed is not None:
        hit = _cached(out, digest, parts)
        if hit is not None:
            return hit

    def tick(stage: str, done: int, total: int) -> None:
        if progress is not None:
            progress(stage, done, total)

    # a stale truth.json must not describe the files about to be rewritten, nor stale views linger
    # (users and the demo pass whole folders of views to the calibration)
    (out / "truth.json").unlink(missing_ok=True)
    for pattern in ("lens/lens_*.png", "plane/plane_*.png"):
        for old in out.glob(pattern):
            old.unlink()
    scene = prepare_scene(spec, rng=rng if seed is None else seed)
    cam = scene.camera
    truth: dict[str, Any] = {
        "schema": TRUTH_SCHEMA,
        "scene": spec.name,
        "description": spec.description,
        "spec_digest": digest,
        "seed": seed,
        "parts": list(parts),
        "spec": spec.to_dict(),
        "camera": {
            **cam.to_json(),
            "fps": spec.camera.fps,
            "readout_s": scene.readout_s,
            "exposure_s": spec.camera.exposure_s,
            "psf_sigma_px": spec.camera.psf_sigma_px,
            "centre_m": cam.centre_m.tolist(),
        },
        "board": {
            "cols": spec.board.cols,
            "rows": spec.board.rows,
            "square_m": spec.board.square_m,
            "margin_m": spec.board.margin_m,
            "width_m": spec.board.width_m,
            "height_m": spec.board.height_m,
            "corner_order": CORNER_ORDER,
        },
        "world_frame": "x downrange (board rows, image right), y up, z toward the camera, metres; origin at "
        "the first plane placement's first inner corner; flight plane z = 0",
        "lens_views": [],
        "plane_views": [],
        "drop": None,
        "flight": None,
    }
    if "lens" in parts:
        (out / "lens").mkdir(exist_ok=True)
        poses = lens_view_poses(
            cam, spec.board, spec.lens.n_views, spec.lens.tilt_deg, spec.lens.fill, scene.streams["lens"]
        )
        noise_rng = scene.streams["lens"].spawn(1)[0]
        for i, (rot, tr) in enumerate(poses):
            img = _board_image_on(scene, rot, tr, spec.lens.supersample, noise_rng)
            name = f"lens/lens_{i:02d}.png"
            _write_png(out / name, img)
            truth["lens_views"].append({"file": name, **_rt(rot, tr)})
            tick("lens views", i + 1, len(poses))
    if "plane" in parts:
        (out / "plane").mkdir(exist_ok=True)
        noise_rng = scene.streams["plane"]
        for i, off in enumerate(spec.plane.offsets_m):
            rot = cam.rotation
            tr = cam.rotation @ np.array([off, 0.0, 0.0]) + cam.translation
            uv = project_camera_points(cam, board_outline(spec.board) @ rot.T + tr)
            w, h = cam.image_size
            if uv[:, 0].min() < 0 or uv[:, 0].max() > w - 1 or uv[:, 1].min() < 0 or uv[:, 1].max() > h - 1:
                raise ValueError(f"scene {spec.name!r}: plane placement at offset {off:g} m leaves the image")
            img = _board_image_on(scene, rot, tr, spec.plane.supersample, noise_rng)
            name = f"plane/plane_{i:02d}.png"
            _write_png(out / name, img)
            truth["plane_views"].append({"file": name, "offset_m": off, **_rt(rot, tr)})
            tick("plane views", i + 1, len(spec.plane.offsets_m))
    if "drop" in parts and spec.drop is not None:
        motion, n_drop, t0 = scene.drop_plan()
        rng_d = scene.streams["drop"]
        frames = (scene.drop_frame(k, rng=rng_d) for k in range(n_drop))
        _write_clip(
            out / "drop.mp4", _counting(frames, n_drop, "drop clip", tick), cam.image_size, drop_fps(spec)
        )
        tf = scene.true_drop_frames()
        vis_t = [f["t_mid_s"] for f in tf if f["visible"]]
        truth["drop"] = {
            "file": "drop.mp4",
            "fps": drop_fps(spec),
            "n_frames": n_drop,
            "g_mps2": scene.plan.model.gravity_mps2,
            "gravity_direction": [0.0, -1.0, 0.0],
            "release": {"t_s": t0, "position_m": list(spec.drop.release_m)},
            "model": "same flight model as the shot: gravity and constant drag, no spin",
            "path": _path_samples(motion, max(t0, min(vis_t, default=t0)), max(vis_t, default=t0 + 0.01)),
            "frames": tf,
        }
    if "flight" in parts:
        ctx = scene.context
        rng_f = scene.streams["flight"]
        n = scene.plan.n_frames
        frames = (clip_frame(ctx, k, scene.flight_motion, rng=rng_f) for k in range(n))
        _write_clip(
            out / "flight.mp4", _counting(frames, n, "flight clip", tick), cam.image_size, spec.camera.fps
        )
        truth["flight"] = _flight_truth(scene)
    write_text_atomic(out / "truth.json", json.dumps(truth, indent=1))
    return _rendered_from_truth(out, truth)


def _counting(frames, total: int, stage: str, tick):
    for i, f in enumerate(frames):
        yield f
        tick(stage, i + 1, total)


def _board_image_on(scene: PreparedScene, rot, tr, supersample: int, rng: np.random.Generator) -> np.ndarray:
    spec = scene.spec
    return render_board_image(
        scene.camera,
        spec.board,
        rot,
        tr,
        lighting=spec.lighting,
        background=scene.background,
        supersample=supersample,
        psf_sigma_px=spec.camera.psf_sigma_px,
        image=spec.image,
        rng=rng,
    )


def _flight_truth(scene: PreparedScene) -> dict[str, Any]:
    spec = scene.spec
    plan = scene.plan
    model = plan.model
    bb = model.bb
    air = model.air
    frames = scene.true_flight_frames()
    t_first = plan.launch_time_s + plan.t_enter_s
    t_last = plan.launch_time_s + plan.t_exit_s
    st0 = plan.trajectory.sample(np.array([plan.t_enter_s]))[0, 0]
    u_first = float(np.linalg.norm(st0[3:6]))
    cl_first = float(model.lift.coefficient(np.array([bb.radius_m * st0[6] / u_first]))[0])
    la = plan.launch
    v0 = la.velocity_mps[0]
    return {
        "file": "flight.mp4",
        "n_frames": plan.n_frames,
        "fps": spec.camera.fps,
        "bb": {
            "kind": spec.bb.kind,
            "mass_kg": bb.mass_kg,
            "diameter_m": bb.diameter_m,
            "mark_phase_rad": math.radians(spec.bb.mark_phase_deg),
        },
        "air": {
            "temperature_k": air.temperature_k,
            "pressure_pa": air.pressure_pa,
            "relative_humidity": air.relative_humidity,
            "density_kgm3": air.density_kgm3,
            "viscosity_pas": air.viscosity_pas,
        },
        "gravity_mps2": model.gravity_mps2,
        "wind_mps": list(model.wind_mps),
        "laws": {
            "drag": "constant",
            "drag_coefficient": spec.flight.drag_coefficient,
            "lift": "linear",
            "lift_slope": spec.flight.lift_slope,
            "lift_coefficient": {"launch": spec.flight.lift_coefficient, "first_in_view": cl_first},
            "decay": "exponential",
            "spin_decay_time_s": spec.flight.spin_decay_time_s,
        },
        "launch": {
            "t_s": plan.launch_time_s,
            "position_m": la.position_m[0].tolist(),
            "velocity_mps": v0.tolist(),
            "speed_mps": float(np.linalg.norm(v0)),
            "elevation_deg": math.degrees(math.atan2(v0[1], math.hypot(v0[0], v0[2]))),
            "spin_radps": float(la.spin_radps[0]),
            "spin_axis": la.spin_axis[0].tolist(),
        },
        "first_in_view": {
            "t_s": t_first,
            "position_m": st0[0:3].tolist(),
            "velocity_mps": st0[3:6].tolist(),
            "speed_mps": u_first,
            "spin_radps": float(st0[6]),
        },
        "path": _path_samples(scene.flight_motion, t_first, t_last),
        "frames": frames,
    }


# ============================================================================================ truth I/O


_CLIP_KEYS = ("file", "fps", "n_frames", "path", "frames")
_TRUTH_KEYS = ("schema", "scene", "camera", "board", "lens_views", "plane_views", "drop", "flight")


def load_truth(path: str | Path) -> dict:
    """Read and check a ``truth.json`` (schema ``hopscope.truth/1``)."""
    p = Path(path)
    try:
        text = p.read_text(encoding="utf-8")
    except OSError as exc:
        raise OSError(f"{p}: cannot read truth file ({exc.strerror or exc})") from exc
    try:
        data = json.loads(text)
    except json.JSONDecodeError as exc:
        raise ValueError(f"{p}: not valid JSON (line {exc.lineno}: {exc.msg})") from exc
    if not isinstance(data, dict) or data.get("schema") != TRUTH_SCHEMA:
        got = data.get("schema") if isinstance(data, dict) else type(data).__name__
        raise ValueError(f"{p}: expected schema {TRUTH_SCHEMA!r}, got {got!r}")
    missing = [k for k in _TRUTH_KEYS if k not in data]
    if missing:
        raise ValueError(f"{p}: missing field(s) {', '.join(missing)}")
    for part, keys in (("flight", _CLIP_KEYS + ("launch", "laws", "air", "bb")), ("drop", _CLIP_KEYS)):
        if data[part] is None:
            continue
        gone = [k for k in keys if k not in data[part]]
        if gone:
            raise ValueError(f"{p}: {part} lacks field(s) {', '.join(gone)}")
        bad = [k for k in ("t_s", "x_m", "y_m", "z_m", "speed_mps") if k not in data[part]["path"]]
        if bad:
            raise ValueError(f"{p}: {part}.path lacks column(s) {', '.join(bad)}")
    return data
