"""``hopscope run``: track → fit → report in one go, for one clip or several (a joint fit).

Every input is checked before the first slow step (BB, air, laws, timing options, the clips exist and are
not empty, the rig reads), so bad input leaves nothing behind. Then each clip is tracked
(``track.csv``, or ``track_<stem>.csv`` for several clips), all shots are fitted jointly (``fit.json``),
each clip's overlay is drawn with its fitted path (``overlay.png`` / ``overlay_<stem>.png``), the rig is
copied in (``rig.json``) and one ``report.html`` (with its figures as ``figure_*.png``) links them all.

The folder is the run's while it runs (a lock file refuses a second run into it) and remembers what the
run wrote, so the next run into it replaces those files instead of leaving stale ones beside its own
(:mod:`hopscope.folders`). Each file is written atomically, so a step that fails leaves none of its own
outputs; outputs of earlier steps that completed stay (a track is useful without its fit).

Exit codes: 0 success; 2 bad input (one line naming the file or option); 1 the fit did not converge
(fit.json and the report are still written and say so) or anything unexpected.

World frame: x downrange, y up, metres (the rig's); times are the tracks' (rolling shutter included).
"""

from __future__ import annotations

import argparse

from hopscope import options
from hopscope.console import warn
from hopscope.decision_summaries import decisions_table, spin_and_hop_table
from hopscope.decisions import Convention, decide_file
from hopscope.errors import EXIT_OK, EXIT_UNEXPECTED
from hopscope.fitting.fitfile import read_fit
from hopscope.pipeline import RunOutcome, run_to_folder
from hopscope.summaries import show_run

NAME = "run"
HELP = "track, fit and report in one go: one clip or several (joint fit), everything into one folder"
DESCRIPTION = (
    "Track the BB in each clip (a folder means its video files, sorted by name), fit all shots jointly "
    "as one BB type, and write the track files, overlays, fit.json, a copy of the rig and one report.html "
    "into --out. Timing options as for 'hopscope track', BB, air and laws as for 'hopscope fit'."
)


def register(parser: argparse.ArgumentParser) -> None:
    options.add_run_options(parser)


def execute(args: argparse.Namespace, *, title: str | None = None) -> RunOutcome:
    """Check the inputs, then run into the folder (no printing except progress bars and warnings)."""
    return run_to_folder(options.run_request(args, title=title), on_warning=warn)


def report_outcome(
    outcome: RunOutcome, title: str = "hopscope run", *, convention: Convention | None = None
) -> int:
    """Print the parameter table, the run summary and the fit's warnings, then the measured spin and the
    hop verdict (judged by ``convention``, default the README's); the exit code."""
    show_run(outcome, title)
    if outcome.fitted.decisions is not None:
        print(decisions_table(outcome.fitted.decisions))
    written = read_fit(outcome.fitted.fit_path)
    after = spin_and_hop_table(written.data, decide_file(written, convention=convention))
    if after is not None:
        print(after)
    return EXIT_OK if outcome.fitted.result.converged else EXIT_UNEXPECTED


def run(args: argparse.Namespace) -> int:
    request = options.run_request(args)
    return report_outcome(run_to_folder(request, on_warning=warn), convention=request.convention)
