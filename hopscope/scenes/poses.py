"""Where the board stands: lens views held at varied angles, and the placements in the flight plane.

Notes
-----
Poses map board coordinates to the camera, X_cam = R · X_board + t (m); board inner corner (i, j) at
(i·s, −j·s, 0). Pixel points are (u, v) with the centre of the top-left pixel at (0, 0).
"""

from __future__ import annotations

import itertools
import math

import numpy as np

from .board import board_corners, board_outline
from .camera import SceneCamera, project_camera_points, rotation_about
from .spec import BoardSpec

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


def plane_view_pose(
    camera: SceneCamera, board: BoardSpec, offset_m: float, *, scene: str = "scene"
) -> tuple[np.ndarray, np.ndarray]:
    """Pose (R, t) (board→camera) of the board standing in the flight plane, shifted ``offset_m`` downrange.

    The first placement (offset 0) defines the world frame, so its pose is the camera's own; ``ValueError``
    (naming ``scene``) when the sheet leaves the image.
    """
    rot = camera.rotation
    tr = camera.rotation @ np.array([offset_m, 0.0, 0.0]) + camera.translation
    uv = project_camera_points(camera, board_outline(board) @ rot.T + tr)
    w, h = camera.image_size
    if uv[:, 0].min() < 0 or uv[:, 0].max() > w - 1 or uv[:, 1].min() < 0 or uv[:, 1].max() > h - 1:
        raise ValueError(f"scene {scene!r}: plane placement at offset {offset_m:g} m leaves the image")
    return rot, tr
