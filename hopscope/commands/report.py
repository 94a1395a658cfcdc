"""``hopscope report``: a self-contained HTML page from a fit (and optionally its tracks and rig)."""

from __future__ import annotations

import argparse

from hopscope import options
from hopscope.console import summary, warn
from hopscope.decisions import convention_from_args
from hopscope.folders import check_output_file
from hopscope.report import load_report_inputs, write_report
from hopscope.report.build import DEFAULT_RANGE_M

NAME = "report"
HELP = "write an HTML report (figures, parameter table, warnings, cautions) from fit.json"
DESCRIPTION = (
    "Write a self-contained HTML report from a fit file: tracked points with the fitted path and its ±1σ "
    "band, residuals, speed and lift-to-weight against distance, the predicted path to range, the "
    "parameter table, calibration quality, warnings and the safety cautions."
)


def register(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("fit", metavar="FIT_JSON", help="the fit file (hopscope.fit/1)")
    parser.add_argument(
        "--track",
        dest="tracks",
        action="append",
        default=[],
        metavar="TRACK_CSV",
        help="a track the fit was made from (repeatable): shows the points with their σ",
    )
    parser.add_argument(
        "--rig", metavar="RIG_JSON", help="the rig the tracks were mapped with (calibration section)"
    )
    parser.add_argument(
        "--range-m",
        type=float,
        default=DEFAULT_RANGE_M,
        help=f"distance of the predicted path, m (default {DEFAULT_RANGE_M:g})",
    )
    parser.add_argument("--title", help="title of the page (default: the fit file's name)")
    options.add_limit_option(parser)
    options.add_forecast_options(parser)
    parser.add_argument("-o", "--output", required=True, metavar="REPORT_HTML", help="the HTML file to write")


def run(args: argparse.Namespace) -> int:
    out = check_output_file(args.output)
    inputs = load_report_inputs(
        args.fit, track_paths=args.tracks, rig_path=args.rig, range_m=args.range_m, title=args.title,
        limit_j=args.limit_j, convention=convention_from_args(args),
    )  # fmt: skip
    write_report(out, inputs)
    fit = inputs.fit
    for w in fit.warnings:
        warn(w)
    if inputs.rig is not None and inputs.rig.drop_check_warning:
        warn(f"{args.rig}: {inputs.rig.drop_check_warning}")
    print(
        summary(
            "hopscope report",
            [
                (
                    "fit",
                    f"{args.fit} ({fit.n_shots} shot{'s' if fit.n_shots != 1 else ''}, "
                    f"{'converged' if fit.converged else 'NOT converged'})",
                ),
                ("tracks", ", ".join(args.tracks) or "none (points reconstructed from the fit's residuals)"),
                ("rig", args.rig or "none"),
                ("predicted to", f"{args.range_m:g} m"),
                ("wrote", str(out)),
            ],
        )
    )
    return 0
