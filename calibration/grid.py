"""The calibration grid (a checkerboard): its geometry, and finding its inner corners in an image.

Detection is separate from calibration: everything downstream works on point lists, so calibration is a
pure function of detected corners (:mod:`calibration.lens`, :mod:`calibration.plane`).

Conventions
-----------
Pixel points are (u, v) = (x, y) in OpenCV order, the centre of the top-left pixel at (0, 0). Images are
numpy arrays indexed (row, col). A grid of ``cols x rows`` inner corners is returned as an (rows*cols, 2)
array in reading order: row by row from the top of the image, left to right within a row
(:func:`to_reading_order`; a board seen turned by 90° is transposed). Board coordinates: x along a row toward image right, y up the board,
origin at the first inner corner (top left as seen in the image), metres.
"""

from __future__ import annotations

import dataclasses
import re
from dataclasses import dataclass

import cv2
import numpy as np

#: Corner detectors. Each gives a candidate set of corners for an image:
#:   "classic+subpix" — cv2.findChessboardCorners (adaptive threshold, normalised image), then cv2.cornerSubPix
#:                      with a window of 0.4 × the corner spacing (at most 11 px half-width);
#:   "sb"             — cv2.findChessboardCornersSB without the accuracy flag (normalised image; retried
#:                      exhaustively when the grid is not found);
#:   "sb+subpix"      — those SB corners refined by cv2.cornerSubPix as above;
#:   "sb-accuracy"    — cv2.findChessboardCornersSB with CALIB_CB_ACCURACY (exhaustive, normalised).
#: "auto" computes every candidate and keeps, per image, the one with the smallest residual under a
#: provisional lens model (:mod:`calibration.corners`).
CANDIDATE_DETECTORS = ("classic+subpix", "sb", "sb+subpix", "sb-accuracy")
DETECTORS = ("auto", *CANDIDATE_DETECTORS)

#: Default: choose by evidence. No single detector is right: on lane-close renders "sb+subpix" beat "sb"
#: (0.041 vs 0.074 px RMS against the true corners, tests/bench/corner_detectors.py [measured]), on the
#: OpenCV sample photographs the classic detector with cornerSubPix gives the smaller residual
#: (tests/calibration/test_real_photos.py [measured]).
DEFAULT_DETECTOR = "auto"

#: Order in which a single candidate stands in for an image before the evidence is in (the provisional
#: lens model uses it). # common practice, no published source
PROVISIONAL_ORDER = ("sb-accuracy", "sb+subpix", "classic+subpix", "sb")

_SB_ACCURATE_FLAGS = cv2.CALIB_CB_NORMALIZE_IMAGE | cv2.CALIB_CB_EXHAUSTIVE | cv2.CALIB_CB_ACCURACY
_SB_FAST_FLAGS = cv2.CALIB_CB_NORMALIZE_IMAGE
_SB_RETRY_FLAGS = cv2.CALIB_CB_NORMALIZE_IMAGE | cv2.CALIB_CB_EXHAUSTIVE
_CLASSIC_FLAGS = cv2.CALIB_CB_ADAPTIVE_THRESH | cv2.CALIB_CB_NORMALIZE_IMAGE
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

    def transposed(self) -> GridSpec:
        """The same board turned by 90°: rows and columns swapped."""
        return GridSpec(self.rows, self.cols, self.square_m)

    def oriented(self, cols: int, rows: int) -> GridSpec:
        """This board as seen with ``cols`` corners along the image rows (either order of ``--grid``)."""
        if (cols, rows) == (self.cols, self.rows):
            return self
        if (cols, rows) == (self.rows, self.cols):
            return self.transposed()
        raise ValueError(f"--grid: a {cols}x{rows} corner set is not a {self.cols}x{self.rows} board")

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


@dataclass(frozen=True, eq=False)
class CornerSet:
    """One detector's corners for one image.

    Attributes
    ----------
    method : the detector (one of :data:`CANDIDATE_DETECTORS`).
    corners : (cols*rows, 2) corner pixels (u, v) in reading order, px.
    cols, rows : corners along the image rows and down the columns as seen (``--grid`` in either order).
    """

    method: str
    corners: np.ndarray
    cols: int
    rows: int


@dataclass(frozen=True, eq=False)
class GridDetection:
    """The result of looking for the grid in one image.

    Attributes
    ----------
    source : the image's name (file, or ``video.mp4#frame``).
    corners : (rows*cols, 2) corner pixels (u, v) in reading order of the chosen candidate, or None when
        not found.
    reason : why not found ("" when found).
    sharpness : variance of the Laplacian of the image (arbitrary units, larger = sharper).
    method : the detector whose corners are in ``corners`` ("" when not found).
    grid : (cols, rows) of ``corners`` as seen: ``--grid`` in either order.
    candidates : every detector's corners (the evidence choice picks among them).
    """

    source: str
    corners: np.ndarray | None
    reason: str = ""
    sharpness: float = 0.0
    method: str = ""
    grid: tuple[int, int] = (0, 0)
    candidates: tuple[CornerSet, ...] = ()

    @property
    def found(self) -> bool:
        return self.corners is not None

    def points(self) -> np.ndarray:
        """The chosen corners; ValueError naming the image when the grid was not found."""
        if self.corners is None:
            raise ValueError(f"{self.source}: no grid found ({self.reason})")
        return self.corners

    def choose(self, method: str) -> GridDetection:
        """A copy whose corners are the candidate of ``method``."""
        for c in self.candidates:
            if c.method == method:
                return dataclasses.replace(self, corners=c.corners, method=c.method, grid=(c.cols, c.rows))
        raise ValueError(f"{self.source}: no corners from detector {method!r}")

    def spec(self, board: GridSpec) -> GridSpec:
        """``board`` oriented as this view sees it."""
        return board.oriented(*self.grid)


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


def to_reading_order(corners: np.ndarray, cols: int, rows: int) -> tuple[np.ndarray, int, int]:
    """Reorder a detector's corners to reading order (rows from the image top, left to right).

    Parameters
    ----------
    corners : (rows*cols, 2) corners as a detector returned them (row-major for patternSize (cols, rows)).

    Returns
    -------
    (corners, cols_seen, rows_seen): (N, 2) corners (u, v) px in reading order, and the corner counts along
    the image rows and down the columns. A board turned by about 90° comes back transposed (its rows now
    run along the image rows), so ``--grid`` may be given in either order.
    """
    g = np.asarray(corners, float).reshape(rows, cols, 2)
    along_row = (g[:, -1] - g[:, 0]).mean(axis=0)
    if abs(along_row[0]) < abs(along_row[1]):
        g = g.transpose(1, 0, 2)
    along_row = (g[:, -1] - g[:, 0]).mean(axis=0)
    if along_row[0] < 0:
        g = g[:, ::-1]
    if (g[-1, :] - g[0, :]).mean(axis=0)[1] < 0:
        g = g[::-1, :]
    return g.reshape(-1, 2).copy(), int(g.shape[1]), int(g.shape[0])


def canonical_order(corners: np.ndarray, spec: GridSpec) -> np.ndarray:
    """Corners in reading order (:func:`reading_order`) for ``spec`` as given; a board seen turned by 90°
    raises ValueError (use :func:`to_reading_order`, which returns the counts as seen)."""
    pts, cols, rows = to_reading_order(corners, spec.cols, spec.rows)
    if (cols, rows) != (spec.cols, spec.rows):
        raise ValueError(
            f"grid rows run vertically in the image (board turned ~90°, or --grid should be {spec.rows}x{spec.cols})"
        )
    return pts


def _subpix_window(corners: np.ndarray, spec: GridSpec) -> int:
    g = corners.reshape(spec.rows, spec.cols, 2)
    d_row = np.linalg.norm(np.diff(g, axis=1), axis=2).min()
    d_col = np.linalg.norm(np.diff(g, axis=0), axis=2).min()
    return int(np.clip(0.4 * min(d_row, d_col), 2, 11))


def _subpix(gray: np.ndarray, pts: np.ndarray, spec: GridSpec) -> np.ndarray:
    win = _subpix_window(pts, spec)
    refined = cv2.cornerSubPix(
        gray, pts.astype(np.float32).reshape(-1, 1, 2), (win, win), (-1, -1), _SUBPIX_CRITERIA
    )
    return refined.reshape(-1, 2).astype(np.float64)


def _raw_candidates(gray: np.ndarray, spec: GridSpec, methods: tuple[str, ...]) -> dict[str, np.ndarray]:
    """Detector output (patternSize order) per method; a method that finds no full grid is left out."""
    out: dict[str, np.ndarray] = {}

    def full(ok: bool, found: np.ndarray | None) -> np.ndarray | None:
        if not ok or found is None or len(found) != spec.n_corners:
            return None
        return np.asarray(found, np.float64).reshape(-1, 2)

    if "sb" in methods or "sb+subpix" in methods:
        ok, found = cv2.findChessboardCornersSB(gray, spec.pattern_size, flags=_SB_FAST_FLAGS)
        if not ok:
            ok, found = cv2.findChessboardCornersSB(gray, spec.pattern_size, flags=_SB_RETRY_FLAGS)
        pts = full(ok, found)
        if pts is not None:
            if "sb" in methods:
                out["sb"] = pts
            if "sb+subpix" in methods:
                out["sb+subpix"] = _subpix(gray, pts, spec)
    if "sb-accuracy" in methods:
        ok, found = cv2.findChessboardCornersSB(gray, spec.pattern_size, flags=_SB_ACCURATE_FLAGS)
        pts = full(ok, found)
        if pts is not None:
            out["sb-accuracy"] = pts
    if "classic+subpix" in methods:
        ok, found = cv2.findChessboardCorners(gray, spec.pattern_size, flags=_CLASSIC_FLAGS)
        pts = full(ok, found)
        if pts is not None:
            out["classic+subpix"] = _subpix(gray, pts, spec)
    return out


def detect_grid(
    image: np.ndarray,
    spec: GridSpec,
    *,
    source: str = "",
    detector: str = DEFAULT_DETECTOR,
    reading_order: bool = True,
) -> GridDetection:
    """Find the grid's inner corners in one image, with every candidate detector's corners.

    Parameters
    ----------
    image : image array (grey or BGR), indexed (row, col).
    spec : the grid (``--grid`` in either order: a board seen turned by 90° is found and transposed).
    source : name used in the result (file name, or ``video#frame``).
    detector : one of :data:`DETECTORS`; "auto" runs them all (the choice is made later, by evidence, in
        :mod:`calibration.corners`; until then the first found in :data:`PROVISIONAL_ORDER` stands in).
    reading_order : kept for callers; corners always come in reading order (:func:`to_reading_order`).

    Returns
    -------
    GridDetection with the corners (u, v) px, or the reason it failed.

    References
    ----------
    Duda, A. & Frese, U. (2018). Accurate detection and localization of checkerboard corners for
    calibration. BMVC 2018 (the method behind cv2.findChessboardCornersSB).
    Förstner, W. & Gülch, E. (1987). A fast operator for detection and precise location of distinct
    points, corners and centres of circular features (the idea behind cv2.cornerSubPix).
    Bradski, G. & Kaehler, A. (2008). Learning OpenCV, O'Reilly, ch. 11 (cv2.findChessboardCorners).
    """
    del reading_order
    if detector not in DETECTORS:
        raise ValueError(f"detector: expected one of {', '.join(DETECTORS)}, got {detector!r}")
    gray = to_gray(image)
    sharp = float(cv2.Laplacian(gray, cv2.CV_64F).var())
    methods = CANDIDATE_DETECTORS if detector == "auto" else (detector,)
    raw = _raw_candidates(gray, spec, methods)
    if not raw:
        return GridDetection(source, None, f"no {spec.cols}x{spec.rows} grid found", sharp)
    cands = []
    for m in CANDIDATE_DETECTORS:
        if m in raw:
            pts, cols, rows = to_reading_order(raw[m], spec.cols, spec.rows)
            cands.append(CornerSet(m, pts, cols, rows))
    det = GridDetection(source, None, "", sharp, candidates=tuple(cands))
    first = next(m for m in PROVISIONAL_ORDER if m in raw)
    return det.choose(first)
