"""The calibration stage end to end: files in, a :class:`~calibration.rig.Rig` out (the app writes it).

Lens views → corners → Zhang calibration; plane images → corners in reading order → joint PnP of all
placements; bootstrap ensemble; optional drop clip → g check and levelling.

Conventions
-----------
World frame: x downrange, y up, z toward the camera, metres; origin at the first plane placement's first
inner corner (top left in the image). Pixels (u, v) in OpenCV order.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from hopscope.shared.constants import STANDARD_GRAVITY_MPS2

from .build import DEFAULT_ENSEMBLE_SIZE, DEFAULT_OFFSET_SIGMA_M, RigFigures, make_rig, rig_figures
from .charuco import MIN_CHARUCO_CORNERS, CharucoSpec, detect_charuco_files
from .corners import choose_by_evidence, view_points
from .drop import apply_level, check_drop, drop_refusal
from .grid import DEFAULT_DETECTOR, GridSpec
from .images import (
    Progress,
    check_plane_items,
    detect_plane_grids,
    detect_views,
    expand_views,
    no_progress,
    parse_plane_arg,
)
from .lens import MIN_LENS_VIEWS, LensCalibration, ViewPoints, calibrate_lens
from .plane import Placement
from .rig import Rig


@dataclass(frozen=True, eq=False)
class CalibrationRun:
    """What :func:`calibrate_files` made: the rig, the lens calibration and the summary figures."""

    rig: Rig
    lens: LensCalibration
    figures: RigFigures
    n_views_given: int


def calibrate_files(
    views: Sequence[str],
    planes: Sequence[str],
    spec: GridSpec,
    *,
    drop: str | None = None,
    drop_fps: float | None = None,
    drop_readout_s: float = 0.0,
    g_expected_mps2: float = STANDARD_GRAVITY_MPS2,
    keep_failed_drop: bool = False,
    plane_z_m: float = 0.0,
    plane_z_sigma_m: float = 0.0,
    ensemble_size: int = DEFAULT_ENSEMBLE_SIZE,
    offset_sigma_m: float = DEFAULT_OFFSET_SIGMA_M,
    detector: str = DEFAULT_DETECTOR,
    rng: int | np.random.Generator | None = 0,
    progress: Progress = no_progress,
    provenance: Mapping[str, Any] | None = None,
    charuco: CharucoSpec | None = None,
) -> CalibrationRun:
    """Calibrate from files.

    Parameters
    ----------
    views : ``--views`` arguments (image files, folders, globs, videos).
    planes : ``--plane`` arguments ``IMAGE[:OFFSET_M]`` (offset downrange from the first, m).
    spec : the grid (inner corners, square size in m).
    drop : a drop clip for the g / level check, or None.
    drop_fps : frame rate of the drop clip, 1/s, overriding its timestamps.
    drop_readout_s : rolling-shutter readout of the drop clip, top to bottom row, s.
    g_expected_mps2 : expected local gravity, m/s².
    keep_failed_drop : keep a rig that fails its own drop check (it then carries
        ``drop_check.kept_by_user`` and :attr:`~calibration.rig.Rig.drop_check_warning`); by default such
        a rig is refused with a ValueError naming the likely cause.
    plane_z_m, plane_z_sigma_m : distance the boards stood behind the flight plane and its standard
        error, m (parallax option).
    ensemble_size : members of the uncertainty ensemble.
    offset_sigma_m : standard error of each taped offset, m.
    detector : corner detector (see :data:`calibration.grid.DETECTORS`).
    rng : seed or generator of the ensemble.
    progress : wraps an iterable to show progress (the app passes its progress bar).
    charuco : the ChArUco board when the views show one (``--board charuco``; ``spec`` is then its
        checkerboard): lens views with part of the board count (:mod:`calibration.charuco`), and
        ``detector`` is not used.

    Raises
    ------
    ValueError / OSError with a one-line message naming the file or option (no grid in any view, too
    few usable views, unreadable image, plane view without the board, mismatched sizes, bad offset, a
    drop check the rig fails unless ``keep_failed_drop``).
    """
    plane_items = [parse_plane_arg(p) for p in planes]
    check_plane_items(plane_items)  # cheap checks before the slow detection
    gen = rng if isinstance(rng, np.random.Generator) else np.random.default_rng(rng)
    sources = expand_views(views)

    def finish(parts: _Parts) -> CalibrationRun:
        return _finish(parts, spec, gen, plane_z_m=plane_z_m, plane_z_sigma_m=plane_z_sigma_m,
                       ensemble_size=ensemble_size, offset_sigma_m=offset_sigma_m, drop=drop, drop_fps=drop_fps,
                       drop_readout_s=drop_readout_s, g_expected_mps2=g_expected_mps2,
                       keep_failed_drop=keep_failed_drop)  # fmt: skip

    if charuco is not None:
        return finish(
            _charuco_parts(sources, plane_items, charuco, views, planes, drop, progress, provenance)
        )
    detections, size = detect_views(sources, spec, detector=detector, progress=progress)
    found = [d for d in detections if d.found]
    if not found:
        raise ValueError(
            f"--views: no {spec.cols}x{spec.rows} grid found in any of the {len(detections)} view(s) "
            f"(--grid counts inner corners, COLSxROWS)"
        )
    if len(found) < MIN_LENS_VIEWS:  # before the plane views join the lens fit: they add no new angles
        raise ValueError(
            f"--views: only {len(found)} usable lens view(s) with the grid found, need at least {MIN_LENS_VIEWS}"
        )
    rejected = [(d.source, d.reason) for d in detections if not d.found]
    plane_dets = detect_plane_grids(plane_items, spec, size, detector=detector)
    # corners by evidence: each image keeps the detector that fits a provisional lens model best
    found, chosen_planes, choice = choose_by_evidence(found, [d for d, _ in plane_dets], spec, size)
    # joint refinement: the plane views are lens views too (their own poses in the lens fit)
    seen = {d.source for d in found}
    lens_views = [view_points(d, spec) for d in [*found, *(d for d in chosen_planes if d.source not in seen)]]
    placements = [
        Placement(d.source, d.points(), off, grid=d.grid)
        for d, (_, off) in zip(chosen_planes, plane_dets, strict=True)
    ]
    lens = calibrate_lens(lens_views, size, rejected=rejected)
    prov: dict[str, Any] = {
        "inputs": {"views": list(views), "plane": list(planes), "drop": drop},
        "detector": detector,
        "corners": {"chosen_by": "smallest RMS residual of each image's own pose under a provisional lens "
                    "model" if choice.method else "the one detector asked for", "counts": choice.counts(),
                    "per_image": choice.to_dict()},
        "plane_views_in_lens_fit": True,
    }  # fmt: skip
    if provenance:
        prov.update(provenance)
    return finish(_Parts(lens_views, lens, placements, prov, len(detections)))


@dataclass(frozen=True, eq=False)
class _Parts:
    """What the detection made, before the rig: lens views and fit, placements, provenance, views given."""

    lens_views: list[ViewPoints]
    lens: LensCalibration
    placements: list[Placement]
    provenance: dict[str, Any]
    n_views_given: int


def _charuco_parts(
    sources, plane_items, board: CharucoSpec, views, planes, drop, progress, provenance
) -> _Parts:
    found = detect_charuco_files(sources, plane_items, board, progress=progress)
    usable = found.n_lens
    if usable < MIN_LENS_VIEWS:
        raise ValueError(
            f"--views: only {usable} usable lens view(s) with at least {MIN_CHARUCO_CORNERS} ChArUco corners, "
            f"need at least {MIN_LENS_VIEWS}"
        )
    placements = [Placement(d.source, d.points(), off, grid=d.grid) for d, off in found.plane]
    lens = calibrate_lens(list(found.lens_views), found.image_size, rejected=list(found.rejected))
    prov: dict[str, Any] = {
        "inputs": {"views": list(views), "plane": list(planes), "drop": drop},
        "detector": "charuco",
        "board": {"kind": "charuco", "squares": list(board.squares), "square_m": board.grid.square_m,
                  "marker_m": board.marker_m, "dictionary": board.dictionary},
        "corners": {"chosen_by": "ChArUco markers (cv2.aruco.CharucoDetector); partial boards count",
                    "partial_views": list(found.partial)},
        "plane_views_in_lens_fit": True,
    }  # fmt: skip
    if provenance:
        prov.update(provenance)
    return _Parts(list(found.lens_views), lens, placements, prov, found.n_given)


def _finish(parts: _Parts, spec: GridSpec, gen: np.random.Generator, *, plane_z_m, plane_z_sigma_m,
            ensemble_size, offset_sigma_m, drop, drop_fps, drop_readout_s, g_expected_mps2,
            keep_failed_drop) -> CalibrationRun:  # fmt: skip
    """The rig from the detected parts: ensemble, then the optional drop check and levelling."""
    rig = make_rig(
        parts.lens_views,
        parts.lens,
        parts.placements,
        spec,
        plane_z_m=plane_z_m,
        plane_z_sigma_m=plane_z_sigma_m,
        ensemble_size=ensemble_size,
        offset_sigma_m=offset_sigma_m,
        rng=gen,
        provenance=parts.provenance,
    )
    if drop is not None:
        check, warns = check_drop(
            rig, drop, fps=drop_fps, g_expected_mps2=g_expected_mps2, readout_s=drop_readout_s
        )
        if check.failed:
            if not keep_failed_drop:
                raise ValueError(drop_refusal(check))
            check = dataclasses.replace(check, kept_by_user=True)
        rig = apply_level(rig, check, warns, rng=gen)
    return CalibrationRun(rig, parts.lens, rig_figures(rig), parts.n_views_given)
