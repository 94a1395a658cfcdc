"""Corner detection by evidence: per image, keep the detector whose corners fit the lens model best.

No single detector is right for every camera: on our renders SB with cornerSubPix is the most accurate, on
real photographs the classic detector with cornerSubPix often is (and the choice alone moves a focal
length by several of its standard errors). So every image keeps all detectors' corners
(:class:`calibration.grid.GridDetection` ``candidates``); a provisional lens model is calibrated from one
candidate per lens view, each candidate of each image (lens and plane views) is then fitted by its own
pose under that model, and the candidate with the smallest RMS reprojection residual is kept. The lens is
recalibrated from the chosen corners and the choice repeated once.

Conventions
-----------
Pixels (u, v) in OpenCV order; board points in metres.

References
----------
Zhang, Z. (2000). IEEE TPAMI 22:1330 (the lens model and the per-view pose whose residual is compared).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np

from .grid import GridDetection, GridSpec
from .lens import MIN_LENS_VIEWS, ViewPoints, calibrate_lens
from .plane import pose_residual_px

#: Rounds of "calibrate, then choose": the second round uses the lens calibrated from the first choice.
EVIDENCE_ROUNDS = 2


@dataclass(frozen=True)
class CornerChoice:  # frozen binding; its two dicts are filled while the choice is made
    """The evidence behind the corners kept for each image.

    Attributes
    ----------
    method : image name → the detector kept.
    residual_px : image name → {detector: RMS reprojection residual under the lens model, px}.
    """

    method: dict[str, str] = field(default_factory=dict)
    residual_px: dict[str, dict[str, float]] = field(default_factory=dict)

    def to_dict(self) -> dict[str, dict[str, object]]:
        """For ``rig.json``'s provenance: {image: {"detector": ..., "rms_px": {detector: px}}}."""
        return {s: {"detector": m, "rms_px": dict(self.residual_px[s])} for s, m in self.method.items()}

    def counts(self) -> dict[str, int]:
        """How many images kept each detector."""
        out: dict[str, int] = {}
        for m in self.method.values():
            out[m] = out.get(m, 0) + 1
        return out


def view_points(det: GridDetection, spec: GridSpec) -> ViewPoints:
    """The lens-view point lists of a found detection (board oriented as the view sees it)."""
    return ViewPoints(det.source, det.points(), det.spec(spec).board_points())


def choose_by_evidence(
    lens: Sequence[GridDetection],
    others: Sequence[GridDetection],
    spec: GridSpec,
    image_size: tuple[int, int],
) -> tuple[list[GridDetection], list[GridDetection], CornerChoice]:
    """Pick each image's corners by their residual under a provisional lens model.

    Parameters
    ----------
    lens : the lens views' detections (found ones; their provisional corners make the lens model).
    others : further images judged under the same model (the plane views).
    spec : the board.
    image_size : (w, h), px.

    Returns
    -------
    (lens, others, choice): the detections with the chosen corners, and the evidence. With fewer than
    :data:`calibration.lens.MIN_LENS_VIEWS` lens views, or images with a single candidate, the detections
    are returned as they came.
    """
    lens, others = list(lens), list(others)
    if len(lens) < MIN_LENS_VIEWS:
        return lens, others, CornerChoice()
    choice = CornerChoice()
    for _ in range(EVIDENCE_ROUNDS):
        try:
            model = calibrate_lens([view_points(d, spec) for d in lens], image_size)
        except ValueError:
            break
        choice = CornerChoice()
        lens = [_pick(d, spec, model.camera_matrix, model.dist_coeffs, choice) for d in lens]
        others = [_pick(d, spec, model.camera_matrix, model.dist_coeffs, choice) for d in others]
    return lens, others, choice


def _pick(
    det: GridDetection, spec: GridSpec, camera_matrix: np.ndarray, dist_coeffs: np.ndarray, into: CornerChoice
) -> GridDetection:
    """``det`` with the candidate of smallest residual under the lens; the evidence goes ``into``."""
    if len(det.candidates) < 2:
        return det
    res = {}
    for c in det.candidates:
        world = spec.oriented(c.cols, c.rows).board_points()
        res[c.method] = pose_residual_px(world, c.corners, camera_matrix, dist_coeffs)
    best = min(res, key=lambda m: res[m])
    into.method[det.source] = best
    into.residual_px[det.source] = res
    return det.choose(best)
