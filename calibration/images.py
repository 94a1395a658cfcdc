"""Reading the calibration inputs: lens views (files, folders, globs or a video) and plane images.

Conventions
-----------
Images are numpy arrays indexed (row, col), 8-bit grey; pixel points (u, v) in OpenCV order. A frame
taken from a video is named ``video.mp4#<frame index>``.
"""

from __future__ import annotations

import glob
import math
import os
from collections.abc import Callable, Iterable, Iterator, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import TypeVar

import cv2
import numpy as np

from hopscope.shared.files import folder_files
from hopscope.shared.parse import parse_finite
from hopscope.shared.video import VIDEO_SUFFIXES, frame_count, iter_frames

from .grid import DEFAULT_DETECTOR, GridDetection, GridSpec, detect_grid, to_gray

IMAGE_SUFFIXES = (".png", ".jpg", ".jpeg", ".tif", ".tiff", ".bmp", ".pgm", ".ppm", ".webp")

#: Video sampling for lens views: frames looked at (evenly spread), and the most views kept (the most
#: varied ones, by board position, size and foreshortening in the image).
VIDEO_CANDIDATES = 60
VIDEO_MAX_VIEWS = 20
#: Frames blurrier than this fraction of the sharpest candidate's Laplacian variance are skipped.
VIDEO_MIN_RELATIVE_SHARPNESS = 0.3


T = TypeVar("T")
Progress = Callable[[Iterable[T]], Iterator[T]]


def no_progress(items: Iterable[T]) -> Iterator[T]:
    yield from items


@dataclass(frozen=True)
class ViewSource:
    """One input of ``--views``: an image file, or a video to sample."""

    path: Path
    is_video: bool


def expand_views(items: Sequence[str], *, option: str = "--views") -> list[ViewSource]:
    """Expand ``--views`` arguments: image files, folders (their images, sorted), globs, or videos.

    Raises
    ------
    FileNotFoundError / ValueError naming the argument when it matches nothing usable.
    """
    out: list[ViewSource] = []
    for item in items:
        p = Path(item)
        if p.is_dir():
            files = folder_files(p, IMAGE_SUFFIXES, what="images", where=f"{option} {item}")
            out += [ViewSource(f, False) for f in files]
        elif p.is_file():
            out.append(ViewSource(p, p.suffix.lower() in VIDEO_SUFFIXES))
        elif glob.has_magic(item):
            hits = sorted(Path(h) for h in glob.glob(item) if Path(h).is_file())
            if not hits:
                raise FileNotFoundError(f"{option} {item}: the pattern matches no files")
            out += [ViewSource(h, h.suffix.lower() in VIDEO_SUFFIXES) for h in hits]
        else:
            raise FileNotFoundError(f"{item}: no such file or folder ({option})")
    return out


def read_image(path: str | os.PathLike[str]) -> np.ndarray:
    """Read an image file as 8-bit grey; OSError naming the file when it cannot be read."""
    p = Path(path)
    if not p.is_file():
        raise FileNotFoundError(f"{p}: no such image file")
    data = np.fromfile(str(p), dtype=np.uint8)
    img = cv2.imdecode(data, cv2.IMREAD_UNCHANGED) if data.size else None
    if img is None:
        raise OSError(f"{p}: cannot read the image (not an image file, or damaged)")
    return to_gray(img)


def _video_frames(path: Path, wanted: set[int]) -> list[tuple[int, np.ndarray]]:
    """The wanted frames of a video as (index, luma copy), read by the ground floor's reader."""
    return [(f.index, np.array(f.luma)) for f in iter_frames(path, check_length=False) if f.index in wanted]


def _descriptor(corners: np.ndarray, spec: GridSpec, size: tuple[int, int]) -> np.ndarray:
    g = corners.reshape(spec.rows, spec.cols, 2)
    w, h = size
    c = corners.mean(axis=0) / [w, h]
    row_len = np.linalg.norm(g[:, -1] - g[:, 0], axis=1)
    col_len = np.linalg.norm(g[-1, :] - g[0, :], axis=1)
    scale = math.sqrt(row_len.mean() * col_len.mean()) / w
    # foreshortening: how the far ends of rows and columns differ (board tilt about either axis)
    tilt_a = (col_len[-1] - col_len[0]) / col_len.mean()
    tilt_b = (row_len[-1] - row_len[0]) / row_len.mean()
    return np.array([c[0], c[1], scale, tilt_a, tilt_b])


def sample_video_views(
    path: Path,
    spec: GridSpec,
    *,
    candidates: int = VIDEO_CANDIDATES,
    max_views: int = VIDEO_MAX_VIEWS,
    detector: str = DEFAULT_DETECTOR,
) -> tuple[list[GridDetection], tuple[int, int]]:
    """Sharp, varied lens views from a video: evenly spread candidate frames, the blurry ones skipped,
    then greedily the most different board placements (farthest-point sampling on position, size and
    foreshortening). Returns the detections (found and not) and the frame size (w, h)."""
    n = frame_count(path)
    wanted = set(np.unique(np.linspace(0, max(n - 1, 0), min(candidates, max(n, 1))).astype(int)).tolist())
    frames = list(_video_frames(path, wanted))
    if not frames:
        raise ValueError(f"{path}: the video has no frames")
    size = (frames[0][1].shape[1], frames[0][1].shape[0])
    sharp = np.array([cv2.Laplacian(f, cv2.CV_64F).var() for _, f in frames])
    limit = VIDEO_MIN_RELATIVE_SHARPNESS * sharp.max()
    found: list[GridDetection] = []
    missed: list[GridDetection] = []
    # the sampling looks with one fast detector; the kept frames are then detected with ``detector``
    scout = "sb+subpix" if detector == "auto" else detector
    images = dict(frames)
    for (i, f), s in zip(frames, sharp, strict=True):
        name = f"{path}#{i}"
        if s < limit:
            missed.append(GridDetection(name, None, "too blurred", float(s)))
            continue
        det = detect_grid(f, spec, source=name, detector=scout)
        (found if det.found else missed).append(det)

    def final(dets: list[GridDetection]) -> list[GridDetection]:
        if scout == detector:
            return dets
        return [detect_grid(images[int(d.source.rpartition("#")[2])], spec, source=d.source, detector=detector)
                for d in dets]  # fmt: skip

    if len(found) <= max_views:
        return final(found) + missed, size
    desc = np.array([_descriptor(d.corners, d.spec(spec), size) for d in found])  # type: ignore[arg-type]
    desc = (desc - desc.mean(axis=0)) / (desc.std(axis=0) + 1e-9)
    chosen = [int(np.argmax([d.sharpness for d in found]))]
    dmin = np.linalg.norm(desc - desc[chosen[0]], axis=1)
    while len(chosen) < max_views:
        nxt = int(np.argmax(dmin))
        chosen.append(nxt)
        dmin = np.minimum(dmin, np.linalg.norm(desc - desc[nxt], axis=1))
    keep = set(chosen)
    extra = [
        GridDetection(d.source, None, "similar to another view", d.sharpness)
        for i, d in enumerate(found)
        if i not in keep
    ]
    return final([found[i] for i in sorted(keep)]) + extra + missed, size


def detect_views(
    sources: Sequence[ViewSource],
    spec: GridSpec,
    *,
    detector: str = DEFAULT_DETECTOR,
    progress: Progress = no_progress,
) -> tuple[list[GridDetection], tuple[int, int]]:
    """Detect the grid in every lens view; returns all detections and the common image size (w, h).

    Raises ValueError naming the file when an image's size differs from the first view's.
    """
    detections: list[GridDetection] = []
    size: tuple[int, int] | None = None
    first = ""
    for src in progress(list(sources)):
        if src.is_video:
            dets, vsize = sample_video_views(src.path, spec, detector=detector)
            batch = [(dets, vsize, str(src.path))]
        else:
            img = read_image(src.path)
            batch = [
                (
                    [detect_grid(img, spec, source=str(src.path), detector=detector)],
                    (img.shape[1], img.shape[0]),
                    str(src.path),
                )
            ]
        for dets, vsize, name in batch:
            if size is None:
                size, first = vsize, name
            elif vsize != size:
                raise ValueError(
                    f"{name}: image size {vsize[0]}x{vsize[1]} differs from {first} ({size[0]}x{size[1]}); "
                    "all views must come from the same camera setting"
                )
            detections += dets
    if size is None:
        raise ValueError("--views: no views given")
    return detections, size


def parse_plane_arg(item: str) -> tuple[Path, float]:
    """``IMAGE[:OFFSET_M]`` → (path, offset m). A path that exists as given is taken whole."""
    if Path(item).is_file() or ":" not in item:
        return Path(item), 0.0
    path, _, off = item.rpartition(":")
    value = parse_finite(off, f"--plane {item}: the offset in metres")
    return Path(path), value


def check_plane_items(items: Sequence[tuple[Path, float]]) -> None:
    """Cheap checks of the ``--plane`` list: not empty, files exist, the first offset is 0."""
    if not items:
        raise ValueError("--plane: need at least one plane image")
    if items[0][1] != 0.0:
        raise ValueError(
            f"--plane {items[0][0]}: the first placement defines the origin, its offset must be 0 "
            f"(got {items[0][1]:g} m)"
        )
    for path, _ in items:
        if not path.is_file():
            raise FileNotFoundError(f"{path}: no such plane image (--plane)")


def detect_plane_grids(
    items: Sequence[tuple[Path, float]],
    spec: GridSpec,
    image_size: tuple[int, int],
    *,
    detector: str = DEFAULT_DETECTOR,
) -> list[tuple[GridDetection, float]]:
    """Detect the grid (in reading order, every candidate detector) in each plane image.

    Returns (detection, offset m) per placement. Raises ValueError naming the file when the board is not
    found, the image size differs from the lens views', or the first placement's offset is not 0.
    """
    check_plane_items(items)
    out = []
    for path, off in items:
        img = read_image(path)
        size = (img.shape[1], img.shape[0])
        if size != tuple(image_size):
            raise ValueError(
                f"{path}: plane image size {size[0]}x{size[1]} differs from the lens views' "
                f"{image_size[0]}x{image_size[1]}"
            )
        det = detect_grid(img, spec, source=str(path), detector=detector)
        if det.corners is None:
            raise ValueError(f"{path}: plane view without the board ({det.reason})")
        out.append((det, off))
    return out


def detect_plane_views(
    items: Sequence[tuple[Path, float]],
    spec: GridSpec,
    image_size: tuple[int, int],
    *,
    detector: str = DEFAULT_DETECTOR,
) -> list[tuple[str, np.ndarray, float]]:
    """(name, corners, offset m) per placement (:func:`detect_plane_grids` with the provisional corners)."""
    return [
        (d.source, d.points(), off)
        for d, off in detect_plane_grids(items, spec, image_size, detector=detector)
    ]
