"""The calibration grid (a checkerboard): its geometry, and finding its inner corners in an image.

Detection is separate from calibration: everything downstream works on point lists, so calibration is a
pure function of detected corners (:mod:`calibration.lens`, :mod:`calibration.plane`).

Conventions
-----------
Pixel points are (u, v) = (x, y) in OpenCV order, the centre of the top-left pixel at (0, 0). Images are
numpy arrays indexed (row, col). A grid of ``cols x rows`` inner corners is returned as an (rows*cols, 2)
array in reading order: row by row from the top of the image, left to right within a row
(:func:`canonical_order`). Board coordinates: x along a row toward image right, y up the board,
origin at the first inner corner (top left as seen in the image), metres.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

import cv2
import numpy as np

#: Detector choices:
#:   "sb+subpix" — cv2.findChessboardCornersSB in its fast mode (normalised image; retried exhaustively
#:                 when the grid is not found), then cv2.cornerSubPix with a window of 0.4 × the corner
#:                 spacing (at most 11 px half-width);
#:   "sb"        — cv2.findChessboardCornersSB alone in its accuracy mode (exhaustive, accuracy flags).
DETECTORS = ("sb+subpix", "sb")

#: Default detector, chosen by measurement (tests/bench/corner_detectors.py, lane-close lens views,
#: 1280x720, against the true projected corners) [measured]: RMS corner error sharp 0.041 vs 0.074 px;
#: +1 px blur 0.028 vs 0.076; +1.5 px blur and 3 DN noise 0.043 vs 0.058; +2.5 px blur and noise 0.061 vs
#: 0.050 px ("sb+subpix" vs "sb"), at ≈ 0.1–0.25 s vs ≈ 0.6–1.1 s per image. A fixed 5 px subpix window
#: is worse than "sb" alone under blur (0.18 px at 2.5 px blur): the window must follow the square size.
DEFAULT_DETECTOR = "sb+subpix"

_SB_ACCURATE_FLAGS = cv2.CALIB_CB_NORMALIZE_IMAGE | cv2.CALIB_CB_EXHAUSTIVE | cv2.CALIB_CB_ACCURACY
_SB_FAST_FLAGS = cv2.CALIB_CB_NORMALIZE_IMAGE
_SB_RETRY_FLAGS = cv2.CALIB_CB_NORMALIZE_IMAGE | cv2.CALIB_CB_EXHAUSTIVE
_SUBPIX_CRITERIA = (cv2.TERM_CRITERIA_EPS | cv2.TERM_CRITERIA_COUNT, 60, 1e-4)


@dataclass(frozen=True)
class GridSpec:
    """A checkerboard.

    Attributes
    ----------
    cols, rows : inner corners per row and per column (``--grid COLSxROWS``).
    square_m : side of one square, m.
    """

    cols: int
    rows: int
    square_m: float

    def __post_init__(self) -> None:
        if self.cols < 3 or self.rows < 3:
            raise ValueError(f"--grid: need at least 3x3 inner corners, got {self.cols}x{self.rows}")
        if not (np.isfinite(self.square_m) and self.square_m > 0):
            raise ValueError(f"--square-mm: expected a positive size, got {self.square_m * 1e3:g} mm")

    @property
    def n_corners(self) -> int:
        return self.cols * self.rows

    @property
    def pattern_size(self) -> tuple[int, int]:
        """(cols, rows) as OpenCV's ``patternSize``."""
        return (self.cols, self.rows)

    def board_points(self, offset_x_m: float = 0.0) -> np.ndarray:
        """(rows*cols, 3) corner positions on the board in reading order, m: (offset + c·s, −r·s, 0).

        Notes
        -----
        World frame: x along a row toward image right, y up, z toward the camera; origin at the first
        inner corner (shifted by ``offset_x_m`` along x).
        """
        c, r = np.meshgrid(np.arange(self.cols), np.arange(self.rows))
        pts = np.zeros((self.n_corners, 3))
        pts[:, 0] = offset_x_m + c.ravel() * self.square_m
        pts[:, 1] = -r.ravel() * self.square_m
        return pts


def parse_grid(text: str) -> tuple[int, int]:
    """Parse ``COLSxROWS`` (inner corners), e.g. ``"9x6"``; ValueError naming ``--grid`` otherwise."""
    m = re.fullmatch(r"\s*(\d+)\s*[xX×]\s*(\d+)\s*", text)
    if not m:
        raise ValueError(f"--grid: expected COLSxROWS inner corners such as 9x6, got {text!r}")
    return int(m.group(1)), int(m.group(2))


@dataclass(frozen=True)
class GridDetection:
    """The result of looking for the grid in one image.

    Attributes
    ----------
    source : the image's name (file, or ``video.mp4#frame``).
    corners : (rows*cols, 2) corner pixels (u, v) in reading order, or None when not found.
    reason : why not found ("" when found).
    sharpness : variance of the Laplacian of the image (arbitrary units, larger = sharper).
    """

    source: str
    corners: np.ndarray | None
    reason: str = ""
    sharpness: float = 0.0

    @property
    def found(self) -> bool:
        return self.corners is not None


def to_gray(image: np.ndarray) -> np.ndarray:
    """8-bit greyscale of an image array (grey, BGR or BGRA; 8 or 16 bit)."""
    img = np.asarray(image)
    if img.ndim == 3 and img.shape[2] == 4:
        img = cv2.cvtColor(img, cv2.COLOR_BGRA2GRAY)
    elif img.ndim == 3 and img.shape[2] == 3:
        img = cv2.cvtColor(img, cv2.COLOR_BGR2GRAY)
    elif img.ndim == 3 and img.shape[2] == 1:
        img = img[:, :, 0]
    elif img.ndim != 2:
        raise ValueError(f"expected a greyscale or colour image, got an array of shape {img.shape}")
    if img.dtype == np.uint16:
        img = (img >> 8).astype(np.uint8)
    elif img.dtype != np.uint8:
        img = np.clip(img, 0, 255).astype(np.uint8)
    return img


def canonical_order(corners: np.ndarray, spec: GridSpec) -> np.ndarray:
    """Reorder detected corners to reading order (rows from the image top, left to right).

    Parameters
    ----------
    corners : (rows*cols, 2) corners as a detector returned them (row-major for ``spec.pattern_size``).

    Returns
    -------
    (rows*cols, 2) corners, (u, v) px. Raises ValueError when the board's rows run closer to vertical
    than horizontal (the board is turned by about 90°, or ``--grid`` has columns and rows swapped).
    """
    g = np.asarray(corners, float).reshape(spec.rows, spec.cols, 2)
    along_row = (g[:, -1] - g[:, 0]).mean(axis=0)
    down_cols = (g[-1, :] - g[0, :]).mean(axis=0)
    if abs(along_row[0]) < abs(along_row[1]):
        if spec.cols == spec.rows:  # a square grid may come back transposed
            g = g.transpose(1, 0, 2)
            along_row, down_cols = down_cols, along_row
        else:
            raise ValueError(
                f"grid rows run vertically in the image (board turned ~90°, or --grid should be "
                f"{spec.rows}x{spec.cols})"
            )
    if along_row[0] < 0:
        g = g[:, ::-1]
    if (g[-1, :] - g[0, :]).mean(axis=0)[1] < 0:
        g = g[::-1, :]
    return g.reshape(-1, 2).copy()


def _subpix_window(corners: np.ndarray, spec: GridSpec) -> int:
    g = corners.reshape(spec.rows, spec.cols, 2)
    d_row = np.linalg.norm(np.diff(g, axis=1), axis=2).min()
    d_col = np.linalg.norm(np.diff(g, axis=0), axis=2).min()
    return int(np.clip(0.4 * min(d_row, d_col), 2, 11))


def detect_grid(
    image: np.ndarray,
    spec: GridSpec,
    *,
    source: str = "",
    detector: str = DEFAULT_DETECTOR,
    reading_order: bool = False,
) -> GridDetection:
    """Find the grid's inner corners in one image.

    Parameters
    ----------
    image : image array (grey or BGR), indexed (row, col).
    spec : the grid.
    source : name used in the result (file name, or ``video#frame``).
    detector : one of :data:`DETECTORS`.
    reading_order : put the corners in reading order (:func:`canonical_order`), as the plane views need;
        lens views may keep the detector's order (any consistent order is a rigid motion of a flat board).

    Returns
    -------
    GridDetection with the corners (u, v) px, or the reason it failed.

    References
    ----------
    Duda, A. & Frese, U. (2018). Accurate detection and localization of checkerboard corners for
    calibration. BMVC 2018 (the method behind cv2.findChessboardCornersSB).
    Förstner, W. & Gülch, E. (1987). A fast operator for detection and precise location of distinct
    points, corners and centres of circular features (the idea behind cv2.cornerSubPix).
    """
    if detector not in DETECTORS:
        raise ValueError(f"detector: expected one of {', '.join(DETECTORS)}, got {detector!r}")
    gray = to_gray(image)
    sharp = float(cv2.Laplacian(gray, cv2.CV_64F).var())
    if detector == "sb":
        ok, found = cv2.findChessboardCornersSB(gray, spec.pattern_size, flags=_SB_ACCURATE_FLAGS)
    else:
        ok, found = cv2.findChessboardCornersSB(gray, spec.pattern_size, flags=_SB_FAST_FLAGS)
        if not ok:
            ok, found = cv2.findChessboardCornersSB(gray, spec.pattern_size, flags=_SB_RETRY_FLAGS)
    if not ok or found is None or len(found) != spec.n_corners:
        return GridDetection(source, None, f"no {spec.cols}x{spec.rows} grid found", sharp)
    pts = found.reshape(-1, 2).astype(np.float64)
    if detector == "sb+subpix":
        win = _subpix_window(pts, spec)
        refined = cv2.cornerSubPix(
            gray, pts.astype(np.float32).reshape(-1, 1, 2), (win, win), (-1, -1), _SUBPIX_CRITERIA
        )
        pts = refined.reshape(-1, 2).astype(np.float64)
    if reading_order:
        try:
            pts = canonical_order(pts, spec)
        except ValueError as exc:
            return GridDetection(source, None, str(exc), sharp)
    return GridDetection(source, pts, "", sharp)
