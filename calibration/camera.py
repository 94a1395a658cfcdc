"""One camera model and pose looking at the flight plane: the nominal rig's or one ensemble member's.

:class:`CameraState` maps pixels to metres on the flight plane and back; :class:`calibration.rig.Rig`
holds a nominal state and its ensemble (and re-exports the names here).

Conventions
-----------
Pixel points are (u, v) = (x, y) in OpenCV order, the centre of the top-left pixel at (0, 0).
World frame: x downrange, y up, z toward the camera, metres. Camera pose is world → camera:
``X_cam = R @ X_world + t``. The flight plane is ``z = plane_z_m + plane_slope·x``.

The camera model is OpenCV's pinhole model with Brown–Conrady distortion (coefficients in OpenCV order
k1, k2, p1, p2[, k3[, k4, k5, k6[, ...]]]).

References
----------
Zhang, Z. (2000). A flexible new technique for camera calibration. IEEE TPAMI 22(11):1330–1334.
Brown, D. C. (1966). Decentering distortion of lenses. Photogrammetric Engineering 32(3):444–462.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import cv2
import numpy as np

#: Allowed lengths of an OpenCV distortion vector.
_DIST_LENGTHS = (4, 5, 8, 12, 14)

#: Tolerance on R^T R = I and det R = 1 for a rotation read from a file.
_ROTATION_TOL = 1e-6

#: Undistortion iteration criteria: the default 5 iterations leave errors of a pixel or more near the
#: image edges of a strongly distorted lens, so iterate to convergence.
UNDISTORT_CRITERIA = (cv2.TERM_CRITERIA_COUNT | cv2.TERM_CRITERIA_EPS, 100, 1e-12)

#: Step of the central differences in :meth:`Rig.pixel_to_world_jacobian`, px.
JACOBIAN_STEP_PX = 0.5


def _frozen_array(value: Any, shape: tuple[int | None, ...], name: str) -> np.ndarray:
    arr = np.array(value, dtype=float)
    if arr.ndim != len(shape) or any(s is not None and s != n for s, n in zip(shape, arr.shape, strict=True)):
        want = "x".join("k" if s is None else str(s) for s in shape)
        raise ValueError(f"rig field {name}: expected an array of shape {want}, got shape {arr.shape}")
    if not np.all(np.isfinite(arr)):
        raise ValueError(f"rig field {name}: contains a non-finite value")
    arr.setflags(write=False)
    return arr


def _check_rotation(r: np.ndarray, name: str) -> None:
    if np.max(np.abs(r.T @ r - np.eye(3))) > _ROTATION_TOL or abs(np.linalg.det(r) - 1.0) > _ROTATION_TOL:
        raise ValueError(f"rig field {name}: not a proper rotation matrix (R^T R != I or det R != 1)")


@dataclass(frozen=True, eq=False)
class CameraState:
    """One camera model and pose: the nominal rig's, or one ensemble member's.

    Attributes
    ----------
    camera_matrix : (3, 3) intrinsics K, px.
    dist_coeffs : (k,) distortion coefficients, OpenCV order (k1, k2, p1, p2[, k3, ...]).
    rotation : (3, 3) world → camera rotation R.
    translation : (3,) world → camera translation t, m (``X_cam = R X_world + t``).
    plane_z_m : world z of the flight plane at x = 0, m.
    plane_slope : dz/dx of the flight plane (dimensionless): the flight line's angle to the board's plane.
        0 for the nominal rig (the user declares the flight line parallel to the board); ensemble members
        draw it from the uncertainty of the flight line's distance from the board (see
        :func:`calibration.build.build_ensemble`). The flight plane is z = plane_z_m + plane_slope·x.
    """

    camera_matrix: np.ndarray
    dist_coeffs: np.ndarray
    rotation: np.ndarray
    translation: np.ndarray
    plane_z_m: float = 0.0
    plane_slope: float = 0.0

    def __post_init__(self) -> None:
        object.__setattr__(self, "camera_matrix", _frozen_array(self.camera_matrix, (3, 3), "camera_matrix"))
        dist = _frozen_array(np.ravel(np.asarray(self.dist_coeffs, dtype=float)), (None,), "dist_coeffs")
        if dist.size not in _DIST_LENGTHS:
            raise ValueError(f"rig field dist_coeffs: expected 4, 5, 8, 12 or 14 values, got {dist.size}")
        object.__setattr__(self, "dist_coeffs", dist)
        rot = _frozen_array(self.rotation, (3, 3), "rotation")
        _check_rotation(rot, "rotation")
        object.__setattr__(self, "rotation", rot)
        object.__setattr__(self, "translation", _frozen_array(self.translation, (3,), "translation"))
        if not math.isfinite(float(self.plane_z_m)):
            raise ValueError("rig field plane_z_m: not a finite number")
        object.__setattr__(self, "plane_z_m", float(self.plane_z_m))
        if not (math.isfinite(float(self.plane_slope)) and abs(float(self.plane_slope)) < 0.5):
            raise ValueError("rig field plane_slope: expected a finite number with |slope| < 0.5")
        object.__setattr__(self, "plane_slope", float(self.plane_slope))
        k = self.camera_matrix
        if not (k[0, 0] > 0 and k[1, 1] > 0 and abs(k[2, 2] - 1.0) < 1e-12):
            raise ValueError("rig field camera_matrix: expected fx > 0, fy > 0 and K[2,2] = 1")

    # --- geometry -------------------------------------------------------------------------------------
    @property
    def camera_center_m(self) -> np.ndarray:
        """Camera centre in world coordinates, m: C = −Rᵀ t."""
        return -self.rotation.T @ self.translation

    @property
    def plane_distance_m(self) -> float:
        """Perpendicular distance from the camera centre to the flight plane, m."""
        return float(abs(self.camera_center_m[2] - self.plane_z_m))

    def pixel_to_world(self, uv: Any) -> np.ndarray:
        """Map pixels to world (x, y) on the flight plane.

        Parameters
        ----------
        uv : (N, 2) pixel points (u, v), px (OpenCV order, pixel centres at integers).

        Returns
        -------
        (N, 2) world x, y in m on the plane z = ``plane_z_m`` + ``plane_slope``·x. Rays that do not meet the
        plane in front of the camera give NaN.

        Notes
        -----
        Undistortion iterates to convergence (:data:`UNDISTORT_CRITERIA`), the ray x_n = (x', y', 1) is
        turned into world coordinates (D = Rᵀ x_n from C = −Rᵀ t) and cut with the plane.
        """
        pts = _points(uv, 2, "uv")
        if pts.shape[0] == 0:
            return np.zeros((0, 2))
        norm = cv2.undistortPoints(
            pts.reshape(-1, 1, 2), self.camera_matrix, self.dist_coeffs, criteria=UNDISTORT_CRITERIA
        ).reshape(-1, 2)
        rays = np.column_stack([norm, np.ones(len(norm))]) @ self.rotation  # rows: Rᵀ x_n
        c = self.camera_center_m
        with np.errstate(divide="ignore", invalid="ignore"):
            # C + s·D meets z = z0 + m·x where s = (z0 + m·C_x − C_z) / (D_z − m·D_x)
            s = (self.plane_z_m + self.plane_slope * c[0] - c[2]) / (
                rays[:, 2] - self.plane_slope * rays[:, 0]
            )
        s = np.where(s > 0, s, np.nan)
        return c[None, :2] + s[:, None] * rays[:, :2]

    def world_to_pixel(self, xy: Any) -> np.ndarray:
        """Project world points to pixels.

        Parameters
        ----------
        xy : (N, 2) world x, y on the flight plane (z = ``plane_z_m`` + ``plane_slope``·x), or (N, 3) world
            x, y, z; m.

        Returns
        -------
        (N, 2) pixel points (u, v), px (OpenCV order, pixel centres at integers), through the full lens model.
        """
        arr = np.asarray(xy, dtype=float)
        if arr.ndim != 2 or arr.shape[1] not in (2, 3):
            raise ValueError(f"xy: expected an (N, 2) or (N, 3) array of metres, got shape {arr.shape}")
        if arr.shape[1] == 2:
            arr = np.column_stack([arr, self.plane_z_m + self.plane_slope * arr[:, 0]])
        if arr.shape[0] == 0:
            return np.zeros((0, 2))
        rvec, _ = cv2.Rodrigues(self.rotation)
        img, _ = cv2.projectPoints(
            arr.reshape(-1, 1, 3), rvec, self.translation, self.camera_matrix, self.dist_coeffs
        )
        return img.reshape(-1, 2)

    def pixel_to_world_jacobian(self, uv: Any, *, step_px: float = JACOBIAN_STEP_PX) -> np.ndarray:
        """d(x, y)/d(u, v) of :meth:`pixel_to_world` by central differences, (N, 2, 2), m/px.

        ``J[i, a, b]`` is the derivative of world coordinate a (x, y) by pixel coordinate b (u, v).
        """
        pts = _points(uv, 2, "uv")
        n = pts.shape[0]
        offs = np.array([[step_px, 0.0], [-step_px, 0.0], [0.0, step_px], [0.0, -step_px]])
        probe = (pts[:, None, :] + offs[None, :, :]).reshape(-1, 2)
        w = self.pixel_to_world(probe).reshape(n, 4, 2)
        jac = np.empty((n, 2, 2))
        jac[:, :, 0] = (w[:, 0] - w[:, 1]) / (2 * step_px)
        jac[:, :, 1] = (w[:, 2] - w[:, 3]) / (2 * step_px)
        return jac

    def to_dict(self) -> dict[str, Any]:
        return {
            "camera_matrix": self.camera_matrix.tolist(),
            "dist_coeffs": self.dist_coeffs.tolist(),
            "rotation": self.rotation.tolist(),
            "translation": self.translation.tolist(),
            "plane_z_m": self.plane_z_m,
            "plane_slope": self.plane_slope,
        }


def _points(value: Any, dim: int, name: str) -> np.ndarray:
    arr = np.asarray(value, dtype=float)
    if arr.ndim == 1 and arr.size == dim:
        arr = arr.reshape(1, dim)
    if arr.ndim != 2 or arr.shape[1] != dim:
        raise ValueError(f"{name}: expected an (N, {dim}) array, got shape {arr.shape}")
    return arr
