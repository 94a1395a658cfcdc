"""``hopscope track``: find the BB in every frame of a clip and write its positions, times and σ.

Times come from the container's per-frame timestamps (variable frame rate handled) unless ``--fps``
overrides them; each point's time adds its row's rolling-shutter offset (``--readout-ms``) and, with
``--exposure-ms``, half the exposure (mid-exposure). Pixels become metres on the flight plane through the
rig. Output: ``track.csv`` (schema ``hopscope.track/1``, see :mod:`tracker.trackfile`), optionally an
overlay (contact sheet PNG/JPEG or annotated video).
"""

from __future__ import annotations

import argparse
from pathlib import Path

from hopscope import options
from hopscope.calibration.rig import read_rig
from hopscope.console import progress, summary, warn
from hopscope.folders import check_output_file
from hopscope.pipeline import track_to_files
from hopscope.summaries import track_rows
from hopscope.tracker.overlay import check_overlay_path
from hopscope.tracker.pipeline import POLARITIES

NAME = "track"
HELP = "find the BB in every frame of a clip: positions, times and uncertainties (track.csv)"
DESCRIPTION = (
    "Track the BB through a clip with a static camera: per-frame container timestamps (or --fps), a "
    "temporal-median background, sub-pixel spot/streak fits with per-point uncertainty, physics-gated "
    "linking into shots, and the mapping to metres on the flight plane through the rig. Writes track.csv."
)


def register(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("video", help="the clip (any format FFmpeg reads)")
    parser.add_argument("--rig", required=True, help="rig.json from 'hopscope calibrate'")
    options.add_timing_options(parser, polarities=POLARITIES)
    parser.add_argument("-o", "--output", required=True, help="track file to write (CSV)")
    parser.add_argument(
        "--overlay",
        default=None,
        help="also write a contact sheet (.png/.jpg) or annotated video (.mp4/.mkv/.avi/.mov)",
    )


def run(args: argparse.Namespace) -> int:
    video = str(args.video)
    out = check_output_file(args.output)
    if args.overlay:
        check_overlay_path(args.overlay)
        check_output_file(args.overlay, "--overlay")
        if Path(args.overlay).resolve() == out.resolve():
            raise ValueError(f"--overlay {args.overlay}: must differ from the output file")
    if not Path(video).exists():
        raise FileNotFoundError(f"{video}: no such video file")
    rig = read_rig(args.rig)
    track_options = options.track_options(args)

    def bar(frames, total):
        return progress(frames, total=total, desc="tracking", unit="frame")

    clip = track_to_files(
        video, rig, track_options, track_path=out, overlay_path=args.overlay or None, rig_name=str(args.rig),
        progress=bar, on_warning=warn,
    )  # fmt: skip
    written = str(out) + (f", overlay {args.overlay}" if args.overlay else "")
    rows = track_rows(
        video, clip.result, readout_ms=args.readout_ms, exposure_ms=args.exposure_ms, written=written
    )
    print(summary("hopscope track", rows))
    return 0
