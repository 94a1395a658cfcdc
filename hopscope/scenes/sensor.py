"""The sensor and the files: lens blur, shot and read noise, 8-bit quantisation, PNG and mp4 writing."""

from __future__ import annotations

from pathlib import Path

import cv2
import numpy as np

from hopscope.shared.fileio import atomic_path

from .spec import ImageModelSpec


def finish(
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


def write_clip(path: Path, frames, size: tuple[int, int], fps: float) -> None:
    with atomic_path(path) as tmp:
        writer = cv2.VideoWriter(str(tmp), cv2.VideoWriter.fourcc(*"mp4v"), float(fps), size)
        if not writer.isOpened():
            raise OSError(f"{path}: OpenCV cannot open an mp4v video writer")
        try:
            for f in frames:
                writer.write(cv2.cvtColor(f, cv2.COLOR_GRAY2BGR))
        finally:
            writer.release()


def write_png(path: Path, img: np.ndarray) -> None:
    with atomic_path(path) as tmp:
        if not cv2.imwrite(str(tmp), img):
            raise OSError(f"{path}: cannot write PNG")
