"""``hopscope compare``: groups of tracks (two hop settings, two BB weights, ...) compared shot by shot.

Each ``--group NAME[=SETTING] TRACK.csv [TRACK.csv ...]`` is fitted jointly (one BB type), summarised
(muzzle speed and energy, C_L0 and flat distance per shot: mean, SD, extreme spread), given its effective
range and its hop verdict from the predicted path; every group is compared with the first (the reference):
each difference with its standard error, a stated test and whether it is significant at ``--alpha``,
which group is flatter and which more consistent. With three or more groups carrying a numeric SETTING
(clicks or turns of the adjuster) the tuning assistant recommends the setting of the flattest path, or
says that the data cannot tell. Writes ``compare.json`` (:mod:`hopscope.groups`) and, with ``--report``,
an HTML page.

Exit codes: 0 success; 2 bad input (one line naming the group, file or option), nothing written; 1 a
group's fit did not converge (the files are still written and say so) or anything unexpected.

World frame: x downrange, y up, metres (the rig's).
"""

from __future__ import annotations

import argparse

from hopscope import options
from hopscope.console import summary, warn
from hopscope.decision_summaries import compare_rows
from hopscope.decisions import convention_from_args
from hopscope.errors import EXIT_OK, EXIT_UNEXPECTED
from hopscope.fitting.compare import DEFAULT_ALPHA
from hopscope.fitting.dispersion import DEFAULT_BOOTSTRAP, DEFAULT_SHOTS
from hopscope.folders import check_output_file
from hopscope.groups import compare_to_json, compare_tracks, parse_group
from hopscope.shared.fileio import write_text_atomic

NAME = "compare"
HELP = "compare groups of tracks (hop settings, BB weights): differences with their tests, tuning advice"
DESCRIPTION = (
    "Fit each group of track files jointly and compare the groups: per group the muzzle speed and energy, "
    "lift coefficient and flat distance (mean, SD, extreme spread), effective range and hop verdict; each "
    "group against the first, every difference with its standard error and Welch's t test (C_D: z test; "
    "speed spread: Brown-Forsythe), flagged significant at --alpha; which group is flatter and which more "
    "consistent. Three or more groups with numeric settings (NAME=SETTING) get a recommended setting. "
    "Writes compare.json and, with --report, an HTML page."
)


def _level(text: str) -> float:
    v = options.positive_float(text)
    if not v < 1:
        raise argparse.ArgumentTypeError(f"expected a level strictly between 0 and 1, got {text!r}")
    return v


def _range_shots(text: str) -> int:
    v = options.count(text)
    if v < 100:
        raise argparse.ArgumentTypeError(f"expected at least 100 simulated shots, got {text!r}")
    return v


def _bootstrap(text: str) -> int:
    v = options.count(text)
    if v == 1:
        raise argparse.ArgumentTypeError(f"expected 0 (no ±) or at least 2 replicates, got {text!r}")
    return v


def register(parser: argparse.ArgumentParser) -> None:
    parser.add_argument(
        "--group",
        dest="groups",
        action="append",
        nargs="+",
        required=True,
        metavar="NAME[=SETTING] TRACK.csv",
        help="a group: its name, optionally =SETTING (a number: clicks or turns of the adjuster), then its "
        "track files (repeat --group for each group; the first is the reference)",
    )
    options.add_bb_options(parser)
    options.add_air_options(parser)
    options.add_fit_options(parser)
    options.add_limit_option(parser)
    options.add_forecast_options(parser)
    parser.add_argument(
        "--alpha",
        type=_level,
        default=DEFAULT_ALPHA,
        metavar="A",
        help=f"significance level of every test (default {DEFAULT_ALPHA:g})",
    )
    parser.add_argument(
        "--range-shots",
        type=_range_shots,
        default=DEFAULT_SHOTS,
        metavar="N",
        help=f"simulated shots behind each group's effective range (default {DEFAULT_SHOTS})",
    )
    parser.add_argument(
        "--range-bootstrap",
        type=_bootstrap,
        default=DEFAULT_BOOTSTRAP,
        metavar="B",
        help=f"bootstrap resamples of the shots behind the effective range's ± (default {DEFAULT_BOOTSTRAP}; 0: no ±)",
    )
    parser.add_argument(
        "-o", "--output", required=True, metavar="COMPARE_JSON", help="the compare.json to write"
    )
    parser.add_argument("--report", metavar="COMPARE_HTML", help="also write the comparison as an HTML page")
    parser.add_argument("--title", help="title of the page (default: the groups' names)")


def run(args: argparse.Namespace) -> int:
    from hopscope.report.compare_page import write_compare_page

    specs = [parse_group(g) for g in args.groups]
    settings = options.fit_settings(args)
    convention = convention_from_args(args)
    out = check_output_file(args.output)
    page = None if args.report is None else check_output_file(args.report)
    outcome = compare_tracks(
        specs, settings, convention=convention, alpha=args.alpha, range_shots=args.range_shots,
        range_bootstrap=args.range_bootstrap,
    )  # fmt: skip
    write_text_atomic(out, compare_to_json(outcome))
    written = [str(out)]
    if page is not None:
        write_compare_page(page, outcome, title=args.title)
        written.append(str(page))
    for w in outcome.warnings:
        warn(w)
    rows = compare_rows(outcome)
    rows.append(
        ("caution", "field and local rules on muzzle energy govern; the field's chronograph is the reference")
    )
    rows.append(("wrote", ", ".join(written)))
    print(summary("hopscope compare", rows))
    if not outcome.converged:
        warn("a group's fit did not converge (compare.json says converged: false for it)")
        return EXIT_UNEXPECTED
    return EXIT_OK
