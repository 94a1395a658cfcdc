"""``hopscope run``: track → fit → report in one go, for one clip or several (a joint fit).

Every input is checked before the first slow step (BB, air, laws, timing options, the clips exist and are
not empty, the rig reads), so bad input leaves nothing behind. Then each clip is tracked
(``track.csv``, or ``track_<stem>.csv`` for several clips), all shots are fitted jointly (``fit.json``),
each clip's overlay is drawn with its fitted path (``overlay.png`` / ``overlay_<stem>.png``) and one
``report.html`` (with its figures as ``figure_*.png``) links the overlays and tracks.

Each file is written atomically, so a step that fails leaves none of its own outputs. Outputs of earlier
steps that completed stay (a track is useful without its fit; a rerun overwrites them). An output folder
the run created is removed again when the run fails before writing anything into it.

Exit codes: 0 success; 2 bad input (one line naming the file or option); 1 the fit did not converge
(fit.json and the report are still written and say so) or anything unexpected.

World frame: x downrange, y up, metres (the rig's); times are the tracks' (rolling shutter included).
"""

from __future__ import annotations

import argparse
import contextlib
import dataclasses
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path

from hopscope import options
from hopscope.calibration.rig import read_rig
from hopscope.commands.fit import parameter_table
from hopscope.console import progress, summary, warn
from hopscope.errors import EXIT_OK, EXIT_UNEXPECTED
from hopscope.pipeline import (
    FittedTracks,
    RunPlan,
    TrackedClip,
    expand_videos,
    fit_track_files,
    overlay_with_fit,
    plan_run,
    report_to_file,
    sibling_links,
    track_to_files,
)
from hopscope.report.build import DEFAULT_RANGE_M
from hopscope.tracker.pipeline import POLARITIES, TrackOptions

NAME = "run"
HELP = "track, fit and report in one go: one clip or several (joint fit), everything into one folder"
DESCRIPTION = (
    "Track the BB in each clip (a folder means its video files, sorted by name), fit all shots jointly "
    "as one BB type, and write the track files, overlays, fit.json and one report.html into --out. "
    "Timing options as for 'hopscope track', BB, air and laws as for 'hopscope fit'."
)


@dataclass(frozen=True, eq=False)
class RunOutcome:
    """What a run made: the plan of its outputs, the tracked clips, the fit and the report."""

    plan: RunPlan
    clips: tuple[TrackedClip, ...]
    fitted: FittedTracks
    report_path: Path
    rig_path: Path


def register(parser: argparse.ArgumentParser) -> None:
    parser.add_argument(
        "videos", nargs="+", metavar="VIDEO", help="clips, or folders of clips (tracked in name order)"
    )
    parser.add_argument("--rig", required=True, help="rig.json from 'hopscope calibrate'")
    options.add_bb_options(parser)
    options.add_air_options(parser)
    options.add_timing_options(parser, polarities=POLARITIES)
    options.add_chrono_options(parser)
    options.add_law_options(parser)
    parser.add_argument(
        "--range-m",
        type=options.positive_float,
        default=DEFAULT_RANGE_M,
        metavar="R",
        help=f"distance of the report's predicted path, m (default {DEFAULT_RANGE_M:g})",
    )
    parser.add_argument("--title", help="title of the report (default: the first clip's name)")
    parser.add_argument("--out", required=True, metavar="DIR", help="output folder (created if missing)")


@contextlib.contextmanager
def _output_folder(out: Path) -> Iterator[None]:
    """Create ``out`` if needed; remove it again if the run fails before anything was written into it."""
    if out.exists() and not out.is_dir():
        raise ValueError(f"--out {out}: exists and is not a folder")
    created = not out.exists()
    out.mkdir(parents=True, exist_ok=True)
    try:
        yield
    except BaseException:
        if created and not any(out.iterdir()):
            out.rmdir()
        raise


def execute(args: argparse.Namespace, *, title: str | None = None) -> RunOutcome:
    """Check the inputs, then track every clip, fit them jointly and write the report (no printing
    except progress bars and the tracker's warnings)."""
    bb = options.bb_from_args(args)
    air, air_notes = options.air_from_args(args)
    chrono = options.chrono_from_args(args)
    fps, readout_s, exposure_s = options.timing_seconds(args)
    track_options = TrackOptions(
        fps_override=fps, readout_s=readout_s, exposure_s=exposure_s, polarity=args.polarity
    )
    videos = expand_videos(args.videos)
    rig_path = Path(args.rig)
    rig = read_rig(rig_path)
    out = Path(args.out)
    plan = plan_run(videos, out)
    clips: list[TrackedClip] = []
    with _output_folder(out):
        for i, (video, track_path, overlay_path) in enumerate(
            zip(plan.videos, plan.track_paths, plan.overlay_paths, strict=True)
        ):
            desc = "tracking" if len(plan.videos) == 1 else f"tracking {i + 1}/{len(plan.videos)}"

            def bar(frames, total, desc=desc):
                return progress(frames, total=total, desc=desc, unit="frame")

            clip = track_to_files(
                video,
                rig,
                track_options,
                track_path=track_path,
                rig_name=str(rig_path),
                progress=bar,
            )
            # the overlay is drawn once, after the fit, with the fitted path in it
            clip = dataclasses.replace(clip, overlay_path=overlay_path)
            for w in clip.result.warnings:
                warn(f"{video.name}: {w}" if len(plan.videos) > 1 else w)
            clips.append(clip)
        fitted = fit_track_files(
            plan.track_paths,
            plan.fit_path,
            bb=bb,
            air=air,
            drag=args.drag,
            lift=args.lift,
            decay=args.decay,
            chrono=chrono,
            loss=args.loss,
            notes=air_notes,
        )
        for clip in clips:
            overlay_with_fit(clip, fitted.result, rig)
        links = sibling_links(
            plan.report_path, [*plan.overlay_paths, *plan.track_paths, plan.fit_path, rig_path]
        )
        report = report_to_file(
            plan.report_path,
            plan.fit_path,
            track_paths=plan.track_paths,
            rig_path=rig_path,
            range_m=args.range_m,
            links=links,
            title=title or args.title or (videos[0].stem if len(videos) == 1 else f"{len(videos)} clips"),
        )
    return RunOutcome(plan, tuple(clips), fitted, report, rig_path)


def summary_rows(outcome: RunOutcome) -> list[tuple[str, str]]:
    """The run's own rows: per clip what was tracked, then the files written."""
    rows: list[tuple[str, str]] = []
    for c in outcome.clips:
        s = c.result.summary
        track = c.result.track
        n_shots = 0 if track is None else len(track.shot_ids)
        rows.append(
            (
                c.video.name,
                f"{s.frames_read} frames at {s.frame_rate_hz:.6g} fps, {n_shots} shot{'s' if n_shots != 1 else ''}, "
                f"{s.points} points",
            )
        )
    fit = outcome.fitted.result
    rows.append(
        ("fit", f"{len(fit.shots)} shot(s) jointly, {'converged' if fit.converged else 'NOT converged'}")
    )
    folder = outcome.plan.report_path.parent
    names = [p.name for p in (*outcome.plan.track_paths, *outcome.plan.overlay_paths)]
    rows.append(
        (
            "written to",
            f"{folder}/: {', '.join(names)}, {outcome.plan.fit_path.name}, {outcome.report_path.name} "
            "(its figures also as figure_*.png)",
        )
    )
    return rows


def report_outcome(outcome: RunOutcome, title: str = "hopscope run") -> int:
    """Print the parameter table, the run summary and the fit's warnings; the exit code."""
    fit = outcome.fitted.result
    print(parameter_table(fit))
    print(summary(title, summary_rows(outcome)))
    # the tracker's warnings were shown while tracking; the fit carries them prefixed with the track's name
    shown = {f"{c.track_path.name}: {w}" for c in outcome.clips for w in c.result.warnings}
    for w in fit.warnings:
        if w not in shown:
            warn(w)
    if not fit.converged:
        warn(f"the fit did not converge: {fit.reason} ({outcome.plan.fit_path} says converged: false)")
        return EXIT_UNEXPECTED
    return EXIT_OK


def run(args: argparse.Namespace) -> int:
    return report_outcome(execute(args))
