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
from hopscope.calibration.grid import DEFAULT_DETECTOR, DETECTORS, GridSpec, parse_grid
from hopscope.calibration.pipeline import CalibrationRun, calibrate_files
from hopscope.calibration.rig import rig_to_json
from hopscope.console import progress, summary, warn
from hopscope.options import finite_float, positive_float
from hopscope.shared.constants import STANDARD_GRAVITY_MPS2
from hopscope.shared.fileio import write_text_atomic
from hopscope.shared.units import m_to_mm, mm_to_m, ms_to_s

NAME = "calibrate"
HELP = "calibrate the camera and the flight plane from grid images and write rig.json"
DESCRIPTION = (
    "Calibrate the lens from views of the grid held at varied angles (--views: files, folders, globs or a "
    "video), locate the flight plane from frames with the board standing in it (--plane IMAGE[:OFFSET_M], "
    "offset downrange from the first placement), optionally check g, frame rate and level from a drop clip "
    "(--drop), and write rig.json with the calibration's uncertainty ensemble."
)


def _count(text: str) -> int:
    try:
        v = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a whole number, got {text!r}") from None
    if v < 0:
        raise argparse.ArgumentTypeError(f"expected a count >= 0, got {text!r}")
    return v


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
        help="frame rate of the drop clip (overrides its timestamps)",
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
        type=_count,
        default=DEFAULT_ENSEMBLE_SIZE,
        metavar="N",
        help=f"members of the calibration-uncertainty ensemble (default {DEFAULT_ENSEMBLE_SIZE}; 0 for none)",
    )
    parser.add_argument("--detector", choices=DETECTORS, default=DEFAULT_DETECTOR, help="corner detector")
    parser.add_argument("--seed", type=int, default=0, help="seed of the ensemble's resampling (default 0)")
    parser.add_argument("-o", "--output", required=True, metavar="RIG.json", help="output rig file")


def run(args: argparse.Namespace) -> int:
    cols, rows = parse_grid(args.grid)
    spec = GridSpec(cols, rows, mm_to_m(args.square_mm))
    if args.offset_sigma_mm < 0:
        raise ValueError(f"--offset-sigma-mm: expected a value >= 0, got {args.offset_sigma_mm:g}")
    if args.parallax_sigma_mm < 0:
        raise ValueError(f"--parallax-sigma-mm: expected a value >= 0, got {args.parallax_sigma_mm:g}")
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
    )
    write_text_atomic(args.output, rig_to_json(result.rig))
    for w in result.rig.warnings:
        warn(w)
    print(summary(f"rig written to {args.output}", summary_rows(result)))
    return 0


def summary_rows(result: CalibrationRun) -> list[tuple[str, str]]:
    """The one-screen summary: views, RMS, focal length ± σ, plane distance, scale, edge errors, drop."""
    rig, lens, fig = result.rig, result.lens, result.figures
    rows = [
        ("views used / rejected", f"{len(lens.views_used)} / {len(lens.views_rejected)}"),
    ]
    for name, reason in lens.views_rejected[:6]:
        rows.append(("  rejected", f"{name}: {reason}"))
    if len(lens.views_rejected) > 6:
        rows.append(("  rejected", f"... and {len(lens.views_rejected) - 6} more (see rig.json provenance)"))
    rows += [
        ("reprojection RMS", f"{lens.rms_px:.3f} px (frame coverage {lens.frame_coverage:.0%})"),
        ("worst view", _worst_view(lens)),
        ("focal length", f"{fig.focal_px:.2f} ± {fig.focal_std_px:.2f} px"),
        ("principal point", f"({rig.camera_matrix[0, 2]:.1f}, {rig.camera_matrix[1, 2]:.1f}) px"),
        ("plane distance", f"{fig.plane_distance_m:.3f} m"),
        ("scale at centre", f"{fig.mm_per_px_centre:.3f} mm/px, field width {fig.field_width_m:.2f} m"),
    ]
    plane = rig.provenance.get("plane", {})
    for p in plane.get("placements", []):
        rows.append(("  placement", f"{p['image']} at {p['offset_m']:g} m: residual {p['rms_px']:.3f} px"))
    x0, x1, y0, y1 = rig.coverage_m
    rows.append(("plane references cover", f"x {x0:.2f}..{x1:.2f} m, y {y0:.2f}..{y1:.2f} m"))
    if fig.edge_error_mm:
        e = fig.edge_error_mm
        rows.append(
            (
                "mapping error (1σ)",
                f"left edge {e['left']:.2f} mm, right edge {e['right']:.2f} mm, corners {e['corners']:.2f} mm "
                f"({len(rig.ensemble)} ensemble members)",
            )
        )
    else:
        rows.append(("mapping error", "not estimated (--ensemble 0)"))
    if rig.plane_z_m:
        rows.append(("flight plane", f"{m_to_mm(rig.plane_z_m):.1f} mm in front of the board (parallax)"))
    d = rig.drop_check
    if d is not None:
        if d.g_measured_mps2 is None or d.tilt_deg is None:
            rows.append(("drop check", f"failed: {d.reason}"))
        else:
            g, t = d.g_measured_mps2, d.tilt_deg
            kept = f", likely cause: {d.likely_cause} (kept by --keep-failed-drop)" if d.failed else ""
            rows.append(
                (
                    "drop check",
                    f"g = {g.value:.4f} ± {g.stderr:.4f} m/s² (expected {d.g_expected_mps2:.4f}): {d.verdict}{kept}",
                )
            )
            rows.append(
                (
                    "level",
                    f"tilt {t.value:+.3f} ± {t.stderr:.3f}°, {'levelled' if d.levelled else 'board taken as level'}",
                )
            )
    rows.append(("rig digest", rig.digest[:16]))
    return rows


def _worst_view(lens) -> str:
    if not lens.per_view_rms_px:
        return "-"
    i = max(range(len(lens.per_view_rms_px)), key=lambda j: lens.per_view_rms_px[j])
    return f"{lens.views_used[i]}: {lens.per_view_rms_px[i]:.3f} px"
