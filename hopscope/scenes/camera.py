"""The scene camera: OpenCV's pinhole model with radial and tangential distortion, and inverse mapping.

Projection (world → pixel) is ``cv2.projectPoints`` with the distortion vector (k1, k2, p1, p2, k3).
Inverse mapping (pixel → ray) for texture rendering uses ``cv2.undistortPoints`` with explicit iteration
criteria on a coarse grid (every :data:`RAY_GRID_STEP_PX` px), interpolated by bicubic splines to the
supersampled pixel grid; the tests check the round trip through ``cv2.projectPoints`` to < 1e-3 px.

Notes
-----
Pixel points are (u, v) = (x, y) in OpenCV order, with the centre of the top-left pixel at (0, 0).
World frame: x downrange, y up, z toward the camera, metres. Camera frame (OpenCV): x right, y down, z
forward; X_cam = R · X_world + t.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import cv2
import numpy as np
from scipy.interpolate import RectBivariateSpline

from .spec import CameraSpec

#: Termination criteria of ``cv2.undistortPoints`` (its default of 5 iterations is too few near the edges).
UNDISTORT_CRITERIA = (cv2.TERM_CRITERIA_COUNT | cv2.TERM_CRITERIA_EPS, 100, 1e-15)

#: Spacing of the exactly-undistorted grid that the bicubic ray interpolation rests on, px.
RAY_GRID_STEP_PX = 4


def look_at_rotation(position_m, target_m, roll_rad: float = 0.0) -> np.ndarray:
    """World→camera rotation of a camera at ``position_m`` looking at ``target_m`` with image-up ≈ world +y.

    ``roll_rad`` turns the camera about its optical axis (positive: the camera's x axis turns toward its
    y axis).
    """
    c = np.asarray(position_m, dtype=float)
    z = np.asarray(target_m, dtype=float) - c
    z /= np.linalg.norm(z)
    up = np.array([0.0, 1.0, 0.0])
    x = np.cross(z, up)
    if np.linalg.norm(x) < 1e-9:
        raise ValueError("camera must not look straight up or down")
    x /= np.linalg.norm(x)
    y = np.cross(z, x)
    cr, sr = math.cos(roll_rad), math.sin(roll_rad)
    x2 = cr * x + sr * y
    y2 = -sr * x + cr * y
    return np.stack([x2, y2, z])


@dataclass(frozen=True, eq=False)
class SceneCamera:
    """A calibrated camera with known pose (the truth the calibration stage should recover).

    Attributes
    ----------
    image_size : (width, height), px.
    camera_matrix : (3, 3) intrinsic matrix K, px.
    dist_coeffs : (5,) OpenCV distortion (k1, k2, p1, p2, k3).
    rotation : (3, 3) world→camera rotation R.
    translation : (3,) world→camera translation t, m (X_cam = R X_world + t).
    """

    image_size: tuple[int, int]
    camera_matrix: np.ndarray
    dist_coeffs: np.ndarray
    rotation: np.ndarray = field(default_factory=lambda: np.eye(3))
    translation: np.ndarray = field(default_factory=lambda: np.zeros(3))

    @classmethod
    def from_spec(cls, spec: CameraSpec) -> SceneCamera:
        w, h = spec.image_size
        fx = spec.focal_px
        fy = spec.focal_px * spec.aspect
        cx = (w - 1) / 2.0 + spec.principal_offset_px[0]
        cy = (h - 1) / 2.0 + spec.principal_offset_px[1]
        k = np.array([[fx, 0.0, cx], [0.0, fy, cy], [0.0, 0.0, 1.0]])
        r = look_at_rotation(spec.position_m, spec.look_at_m, math.radians(spec.roll_deg))
        t = -r @ np.asarray(spec.position_m, dtype=float)
        return cls((w, h), k, np.asarray(spec.dist_coeffs, dtype=float), r, t)

    @property
    def width(self) -> int:
        return int(self.image_size[0])

    @property
    def height(self) -> int:
        return int(self.image_size[1])

    @property
    def focal_px(self) -> float:
        """Mean focal length (f_x + f_y)/2, px."""
        return 0.5 * float(self.camera_matrix[0, 0] + self.camera_matrix[1, 1])

    @property
    def centre_m(self) -> np.ndarray:
        """Camera centre in the world frame, m."""
        return -self.rotation.T @ self.translation

    def with_pose(self, rotation: np.ndarray, translation: np.ndarray) -> SceneCamera:
        """The same lens with another pose (e.g. a board's frame as the 'world')."""
        return SceneCamera(
            self.image_size,
            self.camera_matrix,
            self.dist_coeffs,
            np.asarray(rotation, dtype=float),
            np.asarray(translation, dtype=float),
        )

    def to_camera(self, points_m: np.ndarray) -> np.ndarray:
        """World points (N, 3) → camera-frame points (N, 3), m."""
        p = np.asarray(points_m, dtype=float).reshape(-1, 3)
        return p @ self.rotation.T + self.translation

    def project(self, points_m: np.ndarray) -> np.ndarray:
        """World points (N, 3) → distorted pixel points (N, 2) by ``cv2.projectPoints``.

        Notes
        -----
        Pixel centre of the top-left pixel at (0, 0).
        """
        return project_camera_points(self, self.to_camera(points_m))

    def rays(self, u_px: np.ndarray, v_px: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Normalised undistorted coordinates (x/z, y/z) on the grid ``v_px`` × ``u_px`` (rows × cols).

        Exact ``cv2.undistortPoints`` on a coarse grid, bicubic-spline interpolation to the requested grid.
        """
        x_spl, y_spl = self._ray_splines()
        return x_spl(np.asarray(v_px, float), np.asarray(u_px, float)), y_spl(
            np.asarray(v_px, float), np.asarray(u_px, float)
        )

    def supersampled_rays(self, n: int) -> tuple[np.ndarray, np.ndarray]:
        """Normalised coordinates (float32, (h·n, w·n)) of n × n samples per pixel, cached per ``n``.

        Sample (i, j) of pixel (row r, col c) sits at (c + (j + 0.5)/n − 0.5, r + (i + 0.5)/n − 0.5).
        """
        cache = self.__dict__.setdefault("_ss_rays", {})
        if n not in cache:
            u = (np.arange(self.width * n) + 0.5) / n - 0.5
            v = (np.arange(self.height * n) + 0.5) / n - 0.5
            x, y = self.rays(u, v)
            cache[n] = (x.astype(np.float32), y.astype(np.float32))
        return cache[n]

    def _ray_splines(self):
        cache = self.__dict__.get("_splines")
        if cache is None:
            s = RAY_GRID_STEP_PX
            uc = np.arange(-3 * s, self.width + 3 * s + 1, s, dtype=float) - 0.5
            vc = np.arange(-3 * s, self.height + 3 * s + 1, s, dtype=float) - 0.5
            uu, vv = np.meshgrid(uc, vc)
            pts = np.stack([uu.ravel(), vv.ravel()], axis=1).reshape(-1, 1, 2)
            xn = cv2.undistortPoints(pts, self.camera_matrix, self.dist_coeffs, criteria=UNDISTORT_CRITERIA)
            xn = xn.reshape(vc.size, uc.size, 2)
            cache = (RectBivariateSpline(vc, uc, xn[..., 0]), RectBivariateSpline(vc, uc, xn[..., 1]))
            object.__setattr__(self, "_splines", cache)
        return cache

    def undistort_pixels(self, uv_px: np.ndarray) -> np.ndarray:
        """Distorted pixel points (N, 2) → normalised undistorted coordinates (N, 2), exactly (cv2)."""
        pts = np.asarray(uv_px, dtype=float).reshape(-1, 1, 2)
        return cv2.undistortPoints(
            pts, self.camera_matrix, self.dist_coeffs, criteria=UNDISTORT_CRITERIA
        ).reshape(-1, 2)

    def to_json(self) -> dict:
        return {
            "image_size": [self.width, self.height],
            "camera_matrix": self.camera_matrix.tolist(),
            "dist_coeffs": self.dist_coeffs.tolist(),
            "rotation": self.rotation.tolist(),
            "translation": self.translation.tolist(),
        }


def project_camera_points(camera: SceneCamera, points_cam: np.ndarray) -> np.ndarray:
    """Camera-frame points (N, 3) → distorted pixel points (N, 2) by ``cv2.projectPoints``."""
    p = np.ascontiguousarray(np.asarray(points_cam, dtype=np.float64).reshape(-1, 3))
    if p.shape[0] == 0:
        return np.zeros((0, 2))
    uv, _ = cv2.projectPoints(p, np.zeros(3), np.zeros(3), camera.camera_matrix, camera.dist_coeffs)
    return uv.reshape(-1, 2)


def pose_to_rvec(rotation: np.ndarray) -> np.ndarray:
    """Rotation matrix → Rodrigues vector (3,)."""
    rvec, _ = cv2.Rodrigues(np.asarray(rotation, dtype=float))
    return rvec.reshape(3)


def rotation_about(axis, angle_rad: float) -> np.ndarray:
    """Rotation matrix about a unit axis by ``angle_rad`` (right-hand rule), via ``cv2.Rodrigues``."""
    a = np.asarray(axis, dtype=float)
    a = a / np.linalg.norm(a)
    r, _ = cv2.Rodrigues(a * angle_rad)
    return r


def plane_homography(rotation: np.ndarray, translation: np.ndarray) -> np.ndarray:
    """H with H (bx, by, 1)ᵀ = Z (x_n, y_n, 1)ᵀ for points (bx, by, 0) of a plane at pose (R, t)."""
    return np.column_stack([rotation[:, 0], rotation[:, 1], translation])
