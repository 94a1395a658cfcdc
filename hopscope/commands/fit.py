"""``hopscope fit``: fit the flight model to tracked shots and write ``fit.json``.

Each track file may hold several shots (its ``shot`` column); all shots of all files are fitted jointly as
one BB type: they share the drag coefficient (or the scale of the C_D(Re) law) and the spin-decay
parameter, and each keeps its own exit state and lift coefficient.

Exit codes: 0 converged; 2 bad input (a missing or malformed track, bad option values, fewer points than
parameters), nothing written; 1 the fit ran but did not converge (fit.json is still written, with
``converged: false`` and the reason, so the report can show what happened).

World frame: x downrange, y up, metres (the rig's); times are the track's (rolling shutter included).
"""

from __future__ import annotations

import argparse

from hopscope import options
from hopscope.console import warn
from hopscope.decision_summaries import decisions_table, spin_and_hop_table
from hopscope.decisions import convention_from_args, decide_file
from hopscope.errors import EXIT_OK, EXIT_UNEXPECTED
from hopscope.fitting.fitfile import read_fit
from hopscope.folders import check_output_file
from hopscope.pipeline import fit_track_files
from hopscope.summaries import parameter_table, speed_text

NAME = "fit"
HELP = "fit exit speed, drag, lift and spin decay to tracked shots and write fit.json"
DESCRIPTION = (
    "Fit the flight model (gravity, drag, Magnus lift, spin decay) to one or more track files; shots of "
    "all files share C_D and the spin decay (one BB type). Writes fit.json and prints the parameters with "
    "their standard errors (noise, residual scatter and the calibration's share). Exit code 1 when the "
    "fit does not converge (fit.json then says converged: false and why), 2 for bad input."
)


def register(parser: argparse.ArgumentParser) -> None:
    options.add_track_inputs(parser)
    options.add_fit_options(parser)
    options.add_limit_option(parser)
    options.add_forecast_options(parser)
    parser.add_argument("-o", "--output", required=True, metavar="FIT_JSON", help="the fit.json to write")


def run(args: argparse.Namespace) -> int:
    settings = options.fit_settings(args)
    out = check_output_file(args.output)
    fitted = fit_track_files(args.tracks, out, settings)
    result = fitted.result
    print(parameter_table(result))
    if fitted.decisions is not None:
        print(decisions_table(fitted.decisions))
    written = read_fit(out)
    after = spin_and_hop_table(written.data, decide_file(written, convention=convention_from_args(args)))
    if after is not None:
        print(after)
    for line in result.warnings:
        warn(line)
    chrono = settings.chrono
    if chrono is not None:
        print(f"chronograph prior: {speed_text(chrono.speed_mps)} ± {chrono.sigma_mps:.2g} m/s")
    print(f"wrote {out}")
    if not result.converged:
        warn(f"the fit did not converge: {result.reason} ({out} says converged: false)")
        return EXIT_UNEXPECTED
    return EXIT_OK
