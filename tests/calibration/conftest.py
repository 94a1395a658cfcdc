"""Shared synthetic cameras for the calibration tests (known truth, projected with OpenCV)."""

from __future__ import annotations

import numpy as np
import pytest

from calibration.rig import Rig

IMAGE_SIZE = (1280, 720)


def look_at_pose(camera_center_m, target_m, up=(0.0, 1.0, 0.0)):
    """World → camera (R, t) of a camera at ``camera_center_m`` looking at ``target_m`` (image y down)."""
    c = np.asarray(camera_center_m, float)
    fwd = np.asarray(target_m, float) - c
    fwd /= np.linalg.norm(fwd)
    right = np.cross(fwd, np.asarray(up, float))
    right /= np.linalg.norm(right)
    down = np.cross(fwd, right)
    rot = np.vstack([right, down, fwd])
    return rot, -rot @ c


@pytest.fixture
def close_rig() -> Rig:
    """A 1280x720 camera 2.5 m in front of the plane, mild barrel distortion."""
    k = np.array([[1400.0, 0.0, 645.0], [0.0, 1400.0, 362.0], [0.0, 0.0, 1.0]])
    rot, t = look_at_pose((1.1, 0.35, 2.5), (1.2, 0.3, 0.0))
    return Rig(
        image_size=IMAGE_SIZE,
        camera_matrix=k,
        dist_coeffs=[-0.12, 0.08, 0.0005, -0.0003, 0.0],
        rotation=rot,
        translation=t,
        plane_z_m=0.0,
        reprojection_rms_px=0.05,
        coverage_m=(0.0, 2.4, -0.1, 0.7),
    )
