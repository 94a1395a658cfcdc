"""A rendered scene calibrated as a user would calibrate it (``hopscope calibrate``): the demo's and the
tests' first step, with OpenCV single-threaded so the same seed gives the same rig to the last digit."""

from __future__ import annotations

import contextlib
import os

from hopscope.calibration.grid import GridSpec
from hopscope.calibration.images import Progress, no_progress
from hopscope.calibration.pipeline import CalibrationRun, calibrate_files
from hopscope.calibration.rig import rig_to_json
from hopscope.shared.fileio import write_text_atomic
from hopscope.shared.units import m_to_mm, mm_to_m, ms_to_s, s_to_ms

from . import __version__


def calibrate_scene(
    rendered,
    rig_path: str | os.PathLike[str],
    *,
    seed: int = 0,
    parallax_mm: float = 0.0,
    parallax_sigma_mm: float = 0.0,
    progress: Progress = no_progress,
) -> CalibrationRun:
    """Calibrate from a rendered scene's files as a user would (``hopscope calibrate``), write the rig.

    The grid is given as the user would type it (inner corners, square side in mm, converted back to m as
    the command does); the lens views are the rendered lens images, each plane view is ``IMAGE:OFFSET_M``,
    and the drop clip (when the scene has one) gives the g / level check.

    Parameters
    ----------
    rendered : :class:`hopscope.scenes.RenderedScene`.
    rig_path : where to write ``rig.json``.
    seed : seed of the calibration's ensemble resampling.
    parallax_mm, parallax_sigma_mm : how far the boards stood behind the flight line and its standard
        uncertainty, mm, as for ``hopscope calibrate --parallax-mm/--parallax-sigma-mm``.
    progress : wraps the lens views' iterable (a progress bar).

    Returns
    -------
    CalibrationRun (rig, lens, figures).

    Notes
    -----
    OpenCV runs single-threaded for the calibration (restored afterwards): with its worker threads the
    lens solution differs between runs in the last digits, and the demo promises identical files for the
    same seed.
    """
    board = rendered.truth["board"]
    square_mm = m_to_mm(float(board["square_m"]))
    spec = GridSpec(int(board["cols"]), int(board["rows"]), mm_to_m(square_mm))
    planes = [f"{path}:{offset!r}" for path, offset in rendered.plane_views]
    with _opencv_threads(1):
        run = calibrate_files(
            [str(p) for p in rendered.lens_view_paths],
            planes,
            spec,
            drop=None if rendered.drop_clip_path is None else str(rendered.drop_clip_path),
            # the drop is filmed with the flight's camera: the same rolling-shutter readout, as the user
            # enters it (ms on the command line)
            drop_readout_s=ms_to_s(s_to_ms(float(rendered.truth["camera"]["readout_s"]))),
            plane_z_m=mm_to_m(parallax_mm),
            plane_z_sigma_m=mm_to_m(parallax_sigma_mm),
            rng=seed,
            provenance={
                "tool": f"hopscope {__version__}",
                "seed": seed,
                "scene": rendered.truth.get("scene"),
            },
            progress=progress,
        )
    write_text_atomic(rig_path, rig_to_json(run.rig))
    return run


@contextlib.contextmanager
def _opencv_threads(n: int):
    """Run the block with OpenCV limited to ``n`` threads, then restore the previous setting."""
    import cv2

    before = cv2.getNumThreads()
    cv2.setNumThreads(n)
    try:
        yield
    finally:
        cv2.setNumThreads(before)
