"""ChArUco boards: a checkerboard with an ArUco marker in every white square, so a partial view still counts.

A checkerboard is found only whole; at the frame edges, where the lens distorts most and coverage is always
short, a view holds part of it. The markers name each chessboard corner (its id), so every corner seen
has its board position even when the board is cut by the frame (Garrido-Jurado et al. 2014). The
checkerboard geometry is the same as :class:`calibration.grid.GridSpec`'s: ``--grid COLSxROWS`` counts
inner corners, so the board has (cols + 1) × (rows + 1) squares; the markers are ``marker_m`` wide.

Conventions
-----------
Pixel points are (u, v) in OpenCV order, the centre of the top-left pixel at (0, 0); images indexed
(row, col). Board coordinates of a lens view: OpenCV's ChArUco layout (x along the board's rows, y down
the board as printed, metres; the lens calibration needs no more). Plane views must show the whole board;
their corners are put in reading order like a checkerboard's, so the world frame follows the same rules.

References
----------
Garrido-Jurado, S., Muñoz-Salinas, R., Madrid-Cuevas, F. J. & Marín-Jiménez, M. J. (2014). Automatic
generation and detection of highly reliable fiducial markers under occlusion. Pattern Recognition
47(6):2280–2292 (the ArUco markers; the dictionaries are OpenCV's ``cv2.aruco``).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

import cv2
import numpy as np

from .corners import view_points
from .grid import CornerSet, GridDetection, GridSpec, to_gray, to_reading_order
from .images import Progress, ViewSource, check_plane_items, no_progress, read_image
from .lens import ViewPoints

#: The board names accepted by ``--board``.
BOARDS = ("chessboard", "charuco")
#: ArUco dictionary of the markers: 5×5 bits, 250 ids (enough for a 12×9-square board's 54 markers).
#: # common practice, no published source
DICTIONARY = "DICT_5X5_250"
#: Marker side as a fraction of the square by default. # common practice, no published source
DEFAULT_MARKER_FRACTION = 0.7
#: Fewest corners a partial view must show to be a lens view (a pose needs at least 4 points; 6 keep a
#: nearly collinear handful out). # common practice, no published source
MIN_CHARUCO_CORNERS = 6
#: ... spread across the board: the smaller singular value of their centred board positions at least this
#: many squares (one row of corners gives no homography).
MIN_SPREAD_SQUARES = 0.4


@dataclass(frozen=True)
class CharucoSpec:
    """A ChArUco board.

    Attributes
    ----------
    grid : the checkerboard (inner corners, square side in m).
    marker_m : side of each ArUco marker, m (smaller than the square).
    dictionary : the ``cv2.aruco`` predefined dictionary of the markers.
    """

    grid: GridSpec
    marker_m: float
    dictionary: str = DICTIONARY

    def __post_init__(self) -> None:
        if not (np.isfinite(self.marker_m) and 0 < self.marker_m < self.grid.square_m):
            raise ValueError(
                f"--marker-mm: expected a marker smaller than the square ({self.grid.square_m * 1e3:g} mm), "
                f"got {self.marker_m * 1e3:g} mm"
            )
        if not hasattr(cv2.aruco, self.dictionary):
            raise ValueError(f"ChArUco dictionary {self.dictionary!r} is not one of cv2.aruco's")

    @property
    def squares(self) -> tuple[int, int]:
        """(squares along a row, squares down a column)."""
        return self.grid.cols + 1, self.grid.rows + 1

    def board(self) -> cv2.aruco.CharucoBoard:
        """The ``cv2.aruco.CharucoBoard`` (square and marker sides in m)."""
        d = cv2.aruco.getPredefinedDictionary(getattr(cv2.aruco, self.dictionary))
        return cv2.aruco.CharucoBoard(self.squares, self.grid.square_m, self.marker_m, d)


def draw_board(spec: CharucoSpec, px_per_square: int, *, margin_px: int = 0) -> np.ndarray:
    """The board as an 8-bit grey image, ``px_per_square`` pixels per square (to print, or to render).

    Returns
    -------
    (rows, cols) uint8 image of (squares · px_per_square + 2 margin) pixels each way.
    """
    sx, sy = spec.squares
    size = (sx * px_per_square + 2 * margin_px, sy * px_per_square + 2 * margin_px)
    return spec.board().generateImage(size, marginSize=margin_px, borderBits=1)


def _detect(image: np.ndarray, spec: CharucoSpec) -> tuple[np.ndarray, np.ndarray]:
    """(N, 2) corner pixels and (N,) ids of the chessboard corners the markers identify."""
    detector = cv2.aruco.CharucoDetector(spec.board())
    corners, ids, _, _ = detector.detectBoard(to_gray(image))
    if ids is None or corners is None:
        return np.zeros((0, 2)), np.zeros(0, int)
    return corners.reshape(-1, 2).astype(float), ids.ravel().astype(int)


def detect_lens_view(image: np.ndarray, spec: CharucoSpec, *, source: str) -> ViewPoints | str:
    """The corners of one lens view, whole board or part of it: ViewPoints, or the reason none were found.

    Notes
    -----
    Pixels (u, v) in OpenCV order; board points in OpenCV's ChArUco layout, metres (z = 0).
    """
    uv, ids = _detect(image, spec)
    if len(ids) < MIN_CHARUCO_CORNERS:
        return f"only {len(ids)} ChArUco corner(s) found, need {MIN_CHARUCO_CORNERS}"
    obj = np.asarray(spec.board().getChessboardCorners(), float).reshape(-1, 3)[ids]
    spread = np.linalg.svd(obj[:, :2] - obj[:, :2].mean(axis=0), compute_uv=False)
    if spread[-1] < MIN_SPREAD_SQUARES * spec.grid.square_m:
        return f"the {len(ids)} ChArUco corners found lie along one line of the board (a pose needs two rows)"
    return ViewPoints(source, uv, obj)


def detect_plane_view(image: np.ndarray, spec: CharucoSpec, *, source: str) -> GridDetection:
    """The whole board in a plane view, as a checkerboard detection (corners in reading order).

    A plane view fixes the world frame, so every corner must be seen; a partial board is refused with its
    count in ``reason``.
    """
    uv, ids = _detect(image, spec)
    g = spec.grid
    if len(ids) != g.n_corners:
        return GridDetection(
            source, None, reason=f"{len(ids)} of the ChArUco board's {g.n_corners} corners found (need all)"
        )
    ordered = np.empty((g.n_corners, 2))
    ordered[ids] = uv  # ids run row by row along the board as printed
    pts, cols, rows = to_reading_order(ordered, g.cols, g.rows)
    cand = CornerSet("charuco", pts, cols, rows)
    return GridDetection(source, pts, method="charuco", grid=(cols, rows), candidates=(cand,))


@dataclass(frozen=True, eq=False)
class CharucoViews:
    """The ChArUco corners of a calibration's files (:func:`detect_charuco_files`).

    Attributes
    ----------
    lens_views : the lens views with at least :data:`MIN_CHARUCO_CORNERS` corners (whole or partial
        boards), then the plane views (they are lens views too).
    rejected : (view, reason) of the lens views without enough corners.
    plane : (detection, offset m) per placement (the whole board, in reading order).
    image_size : (w, h) of the views, px.
    partial : names of the lens views that showed only part of the board.
    n_given : lens views given.
    n_lens : lens views found (before the plane views join them).
    """

    lens_views: tuple[ViewPoints, ...]
    rejected: tuple[tuple[str, str], ...]
    plane: tuple[tuple[GridDetection, float], ...]
    image_size: tuple[int, int]
    partial: tuple[str, ...]
    n_given: int
    n_lens: int


def _sized(path: Path, size: tuple[int, int] | None, first: str) -> tuple[np.ndarray, tuple[int, int]]:
    img = read_image(path)
    own = (img.shape[1], img.shape[0])
    if size is not None and own != size:
        raise ValueError(
            f"{path}: image size {own[0]}x{own[1]} differs from {first} ({size[0]}x{size[1]}); "
            "all views must come from the same camera setting"
        )
    return img, own


def detect_charuco_files(
    sources: Sequence[ViewSource],
    plane_items: Sequence[tuple[Path, float]],
    spec: CharucoSpec,
    *,
    progress: Progress = no_progress,
) -> CharucoViews:
    """Detect the ChArUco board in every lens view (partial boards count) and in every plane view (whole).

    Raises
    ------
    ValueError
        One line naming the file: a video among the lens views (image files only), a size that differs
        from the first view's, a plane view without the whole board.
    """
    check_plane_items(plane_items)
    size: tuple[int, int] | None = None
    first = ""
    views: list[ViewPoints] = []
    rejected: list[tuple[str, str]] = []
    partial: list[str] = []
    for src in progress(list(sources)):
        if src.is_video:
            raise ValueError(
                f"{src.path}: --board charuco takes lens views from image files, not from a video"
            )
        img, own = _sized(src.path, size, first)
        if size is None:
            size, first = own, str(src.path)
        got = detect_lens_view(img, spec, source=str(src.path))
        if isinstance(got, str):
            rejected.append((str(src.path), got))
            continue
        views.append(got)
        if len(got.image_points) < spec.grid.n_corners:
            partial.append(got.source)
    if size is None:
        raise ValueError("--views: no views given")
    plane = []
    for path, off in plane_items:
        img, _ = _sized(path, size, first)
        det = detect_plane_view(img, spec, source=str(path))
        if det.corners is None:
            raise ValueError(f"{path}: plane view without the whole ChArUco board ({det.reason})")
        plane.append((det, off))
    seen = {v.source for v in views}
    extra = tuple(view_points(d, spec.grid) for d, _ in plane if d.source not in seen)
    return CharucoViews(
        tuple(views) + extra, tuple(rejected), tuple(plane), size, tuple(partial), len(sources), len(views)
    )
