"""The printed checkerboard: analytic box-filtered texture, corners, outline and rendered board images.

Notes
-----
Board coordinates: inner corner (i, j) at (i·s, −j·s, 0) m. Pixel points are (u, v) with the centre of the top-left pixel at (0, 0); images are indexed (row, col).
"""

from __future__ import annotations

import math

import numpy as np

from .camera import SceneCamera, plane_homography, project_camera_points
from .lighting import illumination
from .sensor import finish
from .spec import BoardSpec, ImageModelSpec, LightingSpec

CORNER_ORDER = (
    "inner corners in the order OpenCV's findChessboardCornersSB returns them for pattern size (cols, rows): "
    "row-major, index j*cols + i is board point (i*square_m, -j*square_m, 0), i.e. rows run along board +x "
    "(image right) and columns along board -y (image down); the first corner is the top-left inner corner. "
    "cols + rows is odd, so the pattern has no 180-degree symmetry: the square diagonally outside the first "
    "corner (toward -x, +y) is white, the one diagonally outside the last corner is black. OpenCV's classic "
    "findChessboardCorners returns the same corners in reverse order for this colouring (checked in "
    "tests/scenes/test_render.py)"
)


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
    hinv = np.linalg.inv(plane_homography(rot, tr)).astype(np.float32)
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
    illum = lighting.board_illumination_dn * illumination(camera, lighting, np.arange(w))[None, :]
    img = (1.0 - alpha) * bg + refl * illum
    gen = None if rng is None else np.random.default_rng(rng)
    return finish(img, psf_sigma_px, image, gen)


def project_board_corners(camera: SceneCamera, board: BoardSpec, rotation, translation) -> np.ndarray:
    """True pixel positions (cols·rows, 2) of the inner corners for the board pose (R, t) (board→camera)."""
    pts = board_corners(board) @ np.asarray(rotation, float).T + np.asarray(translation, float).reshape(3)
    return project_camera_points(camera, pts)
