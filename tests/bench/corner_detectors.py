"""Benchmark: corner accuracy and speed of the grid detectors on rendered lens views (known truth).

Run: ``python tests/bench/corner_detectors.py [OUT_DIR]``. Renders the lane-close lens views (cached in
OUT_DIR, default a temp folder), then for several blur levels (extra Gaussian blur, sigma px) and noise
levels prints, per detector variant, the RMS and 95th-percentile corner error against the true projected
corners and the time per image. Prints figures; asserts nothing.
"""

from __future__ import annotations

import sys
import tempfile
import time
from pathlib import Path

import cv2
import numpy as np

from hopscope.calibration.grid import GridSpec, _subpix_window
from hopscope.scenes import builtin_scene, render_scene

ACC = cv2.CALIB_CB_NORMALIZE_IMAGE | cv2.CALIB_CB_EXHAUSTIVE | cv2.CALIB_CB_ACCURACY
FAST = cv2.CALIB_CB_NORMALIZE_IMAGE
#: name: (findChessboardCornersSB flags, cornerSubPix half-window px or 0 for none, or "adaptive")
VARIANTS = {
    "sb accurate": (ACC, 0),
    "sb accurate + subpix 5": (ACC, 5),
    "sb fast": (FAST, 0),
    "sb fast + subpix 5": (FAST, 5),
    "sb fast + subpix 11": (FAST, 11),
    "sb fast + subpix adaptive (project default)": (FAST, "adaptive"),
}
CRIT = (cv2.TERM_CRITERIA_EPS | cv2.TERM_CRITERIA_COUNT, 60, 1e-4)


def truth_corners(truth, view, spec):
    cam = truth["camera"]
    k = np.array(cam["camera_matrix"])
    d = np.array(cam["dist_coeffs"])
    rvec, _ = cv2.Rodrigues(np.array(view["rotation"]))
    img, _ = cv2.projectPoints(
        spec.board_points().reshape(-1, 1, 3), rvec, np.array(view["translation"]), k, d
    )
    return img.reshape(-1, 2)


def match(found, want):
    """Errors after matching each true corner to the nearest detected one (order-free)."""
    d = np.linalg.norm(found[None, :, :] - want[:, None, :], axis=2)
    return d.min(axis=1)


def main(out_dir: str | None = None) -> None:
    out = Path(out_dir or tempfile.mkdtemp(prefix="hopscope-bench-"))
    scene = render_scene(builtin_scene("lane-close"), out, rng=0, parts=("lens",))
    truth = scene.truth
    b = truth["board"]
    spec = GridSpec(b["cols"], b["rows"], b["square_m"])
    views = truth["lens_views"]
    imgs = [cv2.imread(str(out / v["file"]), cv2.IMREAD_GRAYSCALE) for v in views]
    wants = [truth_corners(truth, v, spec) for v in views]
    rng = np.random.default_rng(0)
    print(f"{len(imgs)} rendered lens views of {truth['scene']} ({imgs[0].shape[1]}x{imgs[0].shape[0]})")
    for blur, noise in [(0.0, 0.0), (1.0, 0.0), (1.5, 3.0), (2.5, 3.0)]:
        print(f"\nextra blur sigma {blur} px, extra noise {noise} DN")
        for name, (flags, subpix) in VARIANTS.items():
            errs, dt, found_n = [], 0.0, 0
            for img, want in zip(imgs, wants, strict=True):
                im = img.astype(np.float32)
                if blur:
                    im = cv2.GaussianBlur(im, (0, 0), blur)
                if noise:
                    im = im + rng.normal(0, noise, im.shape)
                im = np.clip(np.round(im), 0, 255).astype(np.uint8)
                t0 = time.perf_counter()
                ok, c = cv2.findChessboardCornersSB(im, spec.pattern_size, flags=flags)
                if ok and subpix:
                    win = _subpix_window(c.reshape(-1, 2), spec) if subpix == "adaptive" else subpix
                    c = cv2.cornerSubPix(im, c.astype(np.float32), (win, win), (-1, -1), CRIT)
                dt += time.perf_counter() - t0
                if ok:
                    found_n += 1
                    errs.append(match(c.reshape(-1, 2).astype(float), want))
            e = np.concatenate(errs) if errs else np.array([np.nan])
            print(
                f"  {name:45s} found {found_n:2d}/{len(imgs)}  rms {np.sqrt(np.mean(e**2)):.4f} px  "
                f"p95 {np.percentile(e, 95):.4f} px  {1e3 * dt / len(imgs):6.0f} ms/image"
            )


if __name__ == "__main__":
    main(sys.argv[1] if len(sys.argv) > 1 else None)
