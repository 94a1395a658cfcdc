"""Synthetic cameras and corner lists with known truth for the calibration tests (projected with OpenCV)."""

from __future__ import annotations

import numpy as np

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


TRUE_K = np.array([[1450.0, 0.0, 652.0], [0.0, 1448.0, 355.0], [0.0, 0.0, 1.0]])
TRUE_DIST = np.array([-0.11, 0.09, 0.0004, -0.0006, -0.02])


def project(world, rot, t, k=TRUE_K, dist=TRUE_DIST):
    import cv2

    rvec, _ = cv2.Rodrigues(np.asarray(rot, float))
    img, _ = cv2.projectPoints(
        np.asarray(world, float).reshape(-1, 1, 3), rvec, np.asarray(t, float), k, dist
    )
    return img.reshape(-1, 2)


def synthetic_lens_views(
    spec, n_views, rng, *, noise_px=0.05, k=TRUE_K, dist=TRUE_DIST, size=IMAGE_SIZE, fill=(0.3, 0.55)
):
    """Board views at varied tilts and positions covering the frame, projected with OpenCV, plus noise.

    ``fill`` is the range of the fraction of the image width the (untilted) board spans.
    """
    import cv2

    from calibration.lens import ViewPoints

    obj = spec.board_points()
    board_c = obj.mean(axis=0)
    w, h = size
    views = []
    tries = 0
    while len(views) < n_views:
        tries += 1
        if tries > 5000:
            raise RuntimeError("could not place synthetic views")
        board_w = (spec.cols - 1) * spec.square_m
        dist_m = k[0, 0] * board_w / (rng.uniform(*fill) * w)
        # aim the board centre at a random place in the frame
        target = np.array([rng.uniform(0.12, 0.88) * w, rng.uniform(0.12, 0.88) * h])
        ray = np.linalg.inv(k) @ np.array([target[0], target[1], 1.0])
        centre = ray / ray[2] * dist_m
        tilt = rng.uniform(-0.6, 0.6, 3) * np.array([1.0, 1.0, 0.5])
        rot, _ = cv2.Rodrigues(tilt)
        rot = rot @ np.diag([1.0, -1.0, -1.0])  # board facing the camera, board y up = image up
        t = centre - rot @ board_c
        img = project(obj, rot, t, k, dist)
        if np.any(img < 5) or np.any(img[:, 0] > w - 6) or np.any(img[:, 1] > h - 6):
            continue
        img = img + rng.normal(0, noise_px, img.shape)
        views.append(ViewPoints(f"view{len(views):02d}.png", img, obj))
    return views


def make_close_rig():
    """A 1280x720 camera 2.5 m in front of the plane, mild barrel distortion."""
    from calibration.rig import Rig

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
