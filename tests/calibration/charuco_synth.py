"""ChArUco views rendered through a pinhole camera with known truth (the board image warped by its homography)."""

from __future__ import annotations

import cv2
import numpy as np

#: Pixels per square of the drawn board the views are warped from (fine enough that warping does not blur
#: the markers away at the views' scales).
PX_PER_SQUARE = 80
#: Grey level around the board and the image noise, DN.
BACKGROUND_DN = 110
NOISE_DN = 2.0


def rotation(rx_deg: float, ry_deg: float, rz_deg: float = 0.0) -> np.ndarray:
    """Rotation about the camera's x, then y, then z axes, degrees."""
    r, _ = cv2.Rodrigues(np.radians([rx_deg, 0.0, 0.0]))
    q, _ = cv2.Rodrigues(np.radians([0.0, ry_deg, 0.0]))
    z, _ = cv2.Rodrigues(np.radians([0.0, 0.0, rz_deg]))
    return z @ q @ r


def render_view(board_img, square_m, k, rot, t, size, rng):
    """The board (board frame: x along its rows, y down as printed, metres, z = 0) seen by camera
    ``X_cam = rot X + t`` with intrinsics ``k`` and no distortion, as an 8-bit image of ``size`` (w, h)."""
    s = square_m / PX_PER_SQUARE
    # board-image pixel centre (i, j) is at ((i + 0.5) s, (j + 0.5) s) on the board
    to_m = np.array([[s, 0.0, 0.5 * s], [0.0, s, 0.5 * s], [0.0, 0.0, 1.0]])
    h = k @ np.column_stack([rot[:, 0], rot[:, 1], t]) @ to_m
    img = cv2.warpPerspective(
        board_img, h, size, flags=cv2.INTER_AREA, borderMode=cv2.BORDER_CONSTANT, borderValue=BACKGROUND_DN
    ).astype(float)
    img += rng.normal(0.0, NOISE_DN, img.shape)
    return np.clip(img, 0, 255).astype(np.uint8)
