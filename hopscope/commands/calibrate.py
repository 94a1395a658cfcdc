"""``hopscope calibrate``: lens, flight plane, level and scale check → ``rig.json``.

The lens comes from views of the grid at varied angles (Zhang's method), the flight plane from one or more
frames with the board standing in it (joint PnP through the lens model, each placement shifted downrange by
its taped offset), the calibration's uncertainty from a bootstrap ensemble, and with ``--drop`` a free-fall
check of g (frame rate, scale) that also levels the world frame when the board was not level.

World frame: x downrange (along the board's rows toward image right), y up, z toward the camera, metres;
origin at the first placement's first inner corner (top left in the image).
"""

from __future__ import annotations

import argparse

from hopscope import __version__
from hopscope.calibration.build import DEFAULT_ENSEMBLE_SIZE, DEFAULT_OFFSET_SIGMA_M
from hopscope.calibration.charuco import BOARDS, DEFAULT_MARKER_FRACTION, DICTIONARY, CharucoSpec
from hopscope.calibration.grid import DEFAULT_DETECTOR, DETECTORS, GridSpec, parse_grid
from hopscope.calibration.pipeline import calibrate_files
from hopscope.calibration.rig import rig_to_json
from hopscope.console import progress, summary, warn
from hopscope.folders import check_output_file
from hopscope.options import count, finite_float, positive_float
from hopscope.shared.constants import STANDARD_GRAVITY_MPS2
from hopscope.shared.fileio import write_text_atomic
from hopscope.shared.units import m_to_mm, mm_to_m, ms_to_s
from hopscope.summaries import calibration_rows

NAME = "calibrate"
HELP = "calibrate the camera and the flight plane from grid images and write rig.json"
DESCRIPTION = (
    "Calibrate the lens from views of the grid held at varied angles (--views: files, folders, globs or a "
    "video), locate the flight plane from frames with the board standing in it (--plane IMAGE[:OFFSET_M], "
    "offset downrange from the first placement), optionally check g, frame rate and level from a drop clip "
    "(--drop), and write rig.json with the calibration's uncertainty ensemble."
)


def register(parser: argparse.ArgumentParser) -> None:
    parser.add_argument(
        "--grid", required=True, metavar="COLSxROWS", help="inner corners of the grid, e.g. 11x6"
    )
    parser.add_argument(
        "--square-mm", required=True, type=positive_float, metavar="S", help="square side, mm"
    )
    parser.add_argument(
        "--views",
        required=True,
        nargs="+",
        action="extend",
        metavar="PATH",
        help="lens views: image files, folders, globs or a video",
    )
    parser.add_argument(
        "--plane",
        required=True,
        nargs="+",
        action="extend",
        metavar="IMAGE[:OFFSET_M]",
        help="frames with the board standing in the flight plane; OFFSET_M = shift downrange from the first (0); "
        "repeat the option or list several",
    )
    parser.add_argument(
        "--drop", metavar="VIDEO", help="clip of a ball dropped in the flight plane (g, level check)"
    )
    parser.add_argument(
        "--drop-fps",
        type=positive_float,
        metavar="F",
        help="frame rate of the drop clip, frames/s (overrides its timestamps)",
    )
    parser.add_argument(
        "--drop-readout-ms",
        type=finite_float,
        default=0.0,
        metavar="R",
        help="rolling-shutter readout of the drop clip, top to bottom row, ms (default 0: global shutter)",
    )
    parser.add_argument(
        "--g-expected",
        type=positive_float,
        default=STANDARD_GRAVITY_MPS2,
        metavar="G",
        help=f"expected local gravity, m/s² (default {STANDARD_GRAVITY_MPS2})",
    )
    parser.add_argument(
        "--keep-failed-drop",
        action="store_true",
        help="write the rig even when it fails its own drop check (it is marked, and later commands warn)",
    )
    parser.add_argument(
        "--parallax-mm",
        type=finite_float,
        default=0.0,
        metavar="D",
        help="the boards stood D mm behind the flight plane (toward the backstop); default 0",
    )
    parser.add_argument(
        "--parallax-sigma-mm",
        type=finite_float,
        default=0.0,
        metavar="S",
        help="uncertainty of --parallax-mm, mm",
    )
    parser.add_argument(
        "--offset-sigma-mm",
        type=finite_float,
        default=m_to_mm(DEFAULT_OFFSET_SIGMA_M),
        metavar="S",
        help=f"uncertainty of each taped plane offset, mm (default {m_to_mm(DEFAULT_OFFSET_SIGMA_M):g})",
    )
    parser.add_argument(
        "--ensemble",
        type=count,
        default=DEFAULT_ENSEMBLE_SIZE,
        metavar="N",
        help=f"members of the calibration-uncertainty ensemble (default {DEFAULT_ENSEMBLE_SIZE}; 0 for none)",
    )
    parser.add_argument("--detector", choices=DETECTORS, default=DEFAULT_DETECTOR, help="corner detector")
    parser.add_argument(
        "--board",
        choices=BOARDS,
        default="chessboard",
        help="the pattern: a plain chessboard (default) or a ChArUco board (OpenCV's, markers "
        f"{DICTIONARY}), whose lens views may show only part of it at the frame edges",
    )
    parser.add_argument(
        "--marker-mm",
        type=positive_float,
        metavar="M",
        help=f"ChArUco marker side, mm (default {DEFAULT_MARKER_FRACTION:g} × --square-mm)",
    )
    parser.add_argument("--seed", type=int, default=0, help="seed of the ensemble's resampling (default 0)")
    parser.add_argument("-o", "--output", required=True, metavar="RIG.json", help="output rig file")


def run(args: argparse.Namespace) -> int:
    check_output_file(args.output)  # before the slow work
    cols, rows = parse_grid(args.grid)
    spec = GridSpec(cols, rows, mm_to_m(args.square_mm))
    if args.offset_sigma_mm < 0:
        raise ValueError(f"--offset-sigma-mm: expected a value >= 0, got {args.offset_sigma_mm:g}")
    if args.parallax_sigma_mm < 0:
        raise ValueError(f"--parallax-sigma-mm: expected a value >= 0, got {args.parallax_sigma_mm:g}")
    charuco = None
    if args.board == "charuco":
        marker_mm = args.marker_mm if args.marker_mm is not None else DEFAULT_MARKER_FRACTION * args.square_mm
        charuco = CharucoSpec(spec, mm_to_m(marker_mm))
    elif args.marker_mm is not None:
        raise ValueError("--marker-mm: only with --board charuco")
    result = calibrate_files(
        args.views,
        args.plane,
        spec,
        drop=args.drop,
        drop_fps=args.drop_fps,
        drop_readout_s=ms_to_s(args.drop_readout_ms),
        g_expected_mps2=args.g_expected,
        keep_failed_drop=args.keep_failed_drop,
        plane_z_m=mm_to_m(args.parallax_mm),
        plane_z_sigma_m=mm_to_m(args.parallax_sigma_mm),
        ensemble_size=args.ensemble,
        offset_sigma_m=mm_to_m(args.offset_sigma_mm),
        detector=args.detector,
        rng=args.seed,
        progress=lambda items: progress(items, desc="lens views", unit="view"),
        provenance={"tool": f"hopscope {__version__}", "seed": args.seed},
        charuco=charuco,
    )
    write_text_atomic(args.output, rig_to_json(result.rig))
    for w in result.rig.warnings:
        warn(w)
    print(summary(f"rig written to {args.output}", calibration_rows(result)))
    return 0
