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

    from hopscope.calibration.lens import ViewPoints

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


def make_close_rig(scale=1.0):
    """A 1280x720 camera 2.5 m in front of the plane, mild barrel distortion (``scale`` shrinks the image)."""
    from hopscope.calibration.rig import Rig

    k = np.array(
        [[1400.0 * scale, 0.0, 645.0 * scale], [0.0, 1400.0 * scale, 362.0 * scale], [0.0, 0.0, 1.0]]
    )
    rot, t = look_at_pose((1.1, 0.35, 2.5), (1.2, 0.3, 0.0))
    return Rig(
        image_size=(round(IMAGE_SIZE[0] * scale), round(IMAGE_SIZE[1] * scale)),
        camera_matrix=k,
        dist_coeffs=[-0.12, 0.08, 0.0005, -0.0003, 0.0],
        rotation=rot,
        translation=t,
        plane_z_m=0.0,
        reprojection_rms_px=0.05,
        coverage_m=(0.0, 2.4, -0.1, 0.7),
    )


def fall_with_drag(t_s, g, k_per_m, tilt_rad=0.0, start_m=(0.0, 0.0)):
    """Positions of a ball released at rest: a = g ĝ − k |v| v, integrated with scipy's solve_ivp (the
    reference integrator; Dormand & Prince 1980 RK45), ĝ = (sin tilt, −cos tilt)."""
    from scipy.integrate import solve_ivp

    gvec = g * np.array([np.sin(tilt_rad), -np.cos(tilt_rad)])

    def rhs(_t, s):
        v = s[2:]
        return np.concatenate([v, gvec - k_per_m * np.linalg.norm(v) * v])

    sol = solve_ivp(
        rhs, (0, float(t_s[-1])), [start_m[0], start_m[1], 0, 0], t_eval=t_s, rtol=1e-11, atol=1e-13
    )
    return sol.y[:2].T


def render_disc_frames(size, centres_uv, radius_px, rng, *, ball_dn=40.0, noise_dn=1.0, supersample=8):
    """Grey frames of a uniform disc (anti-aliased by supersampling) on a smooth bright wall, with noise."""
    w, h = size
    yy, xx = np.mgrid[0:h, 0:w]
    wall = 170.0 + 25.0 * np.sin(xx / 97.0) * np.cos(yy / 61.0)
    offs = (np.arange(supersample) + 0.5) / supersample - 0.5
    frames = []
    for c in centres_uv:
        img = wall.copy()
        if c is not None:
            u0, v0 = c
            r0, r1 = int(max(np.floor(v0 - radius_px - 2), 0)), int(min(np.ceil(v0 + radius_px + 2), h - 1))
            c0, c1 = int(max(np.floor(u0 - radius_px - 2), 0)), int(min(np.ceil(u0 + radius_px + 2), w - 1))
            if r1 > r0 and c1 > c0:
                pr, pc = np.mgrid[r0 : r1 + 1, c0 : c1 + 1]
                su = pc[..., None, None] + offs[None, None, None, :] - u0
                sv = pr[..., None, None] + offs[None, None, :, None] - v0
                cover = ((su**2 + sv**2) <= radius_px**2).mean(axis=(2, 3))
                patch = img[r0 : r1 + 1, c0 : c1 + 1]
                img[r0 : r1 + 1, c0 : c1 + 1] = patch * (1 - cover) + ball_dn * cover
        img = img + rng.normal(0, noise_dn, img.shape)
        frames.append(np.clip(np.round(img), 0, 255).astype(np.uint8))
    return frames


def write_gray_video(path, frames, fps):
    """Write grey frames losslessly (FFV1 in Matroska) with timestamps k/fps."""
    from fractions import Fraction

    import av

    with av.open(str(path), "w") as out:
        stream = out.add_stream("ffv1", rate=Fraction(fps).limit_denominator(100000))
        stream.width, stream.height = frames[0].shape[1], frames[0].shape[0]
        stream.pix_fmt = "gray"
        for f in frames:
            for packet in stream.encode(av.VideoFrame.from_ndarray(f, format="gray")):
                out.mux(packet)
        for packet in stream.encode():
            out.mux(packet)


def fall_from_holder(t_s, g, k_per_m, contact_s, contact_accel, start_m=(0.0, 0.0)):
    """A ball leaving a holder: for t < ``contact_s`` it moves straight down with the acceleration
    ``contact_accel(t)`` (m/s², the holder still holds it back), then falls freely with quadratic drag
    a = g ĝ − k |v| v. Integrated with scipy's solve_ivp (Dormand & Prince 1980 RK45) in two pieces."""
    from scipy.integrate import solve_ivp

    t_s = np.asarray(t_s, float)

    def held(t, s):
        return [s[2], s[3], 0.0, -contact_accel(t)]

    def free(_t, s):
        v = s[2:]
        return np.concatenate([v, np.array([0.0, -g]) - k_per_m * np.linalg.norm(v) * v])

    first = t_s[t_s < contact_s]
    a = solve_ivp(held, (0, contact_s), [start_m[0], start_m[1], 0, 0], t_eval=first, rtol=1e-11, atol=1e-13,
                  dense_output=True)  # fmt: skip
    state = a.sol(contact_s)
    rest = t_s[t_s >= contact_s]
    b = solve_ivp(free, (contact_s, float(t_s[-1])), state, t_eval=rest, rtol=1e-11, atol=1e-13)
    return np.vstack([a.y[:2].T, b.y[:2].T])


def truth_rig(truth):
    """The rig of a rendered scene's true camera (from its truth), plane at z = 0 with no slope."""
    from hopscope.calibration.rig import Rig

    cam = truth["camera"]
    return Rig(
        tuple(cam["image_size"]),
        cam["camera_matrix"],
        cam["dist_coeffs"],
        cam["rotation"],
        cam["translation"],
        0.0,
        0.0,
    )
