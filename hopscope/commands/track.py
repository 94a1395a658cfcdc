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
from hopscope.pipeline import track_to_files
from hopscope.shared.units import mps_to_fps
from hopscope.tracker.overlay import check_overlay_path
from hopscope.tracker.pipeline import POLARITIES, TrackOptions

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
    out = Path(args.output)
    if args.overlay:
        check_overlay_path(args.overlay)
        if Path(args.overlay).resolve() == out.resolve():
            raise ValueError(f"--overlay {args.overlay}: must differ from the output file")
    for target, what in ((out, "-o"), (Path(args.overlay) if args.overlay else None, "--overlay")):
        if target is not None and not (target.parent if str(target.parent) else Path(".")).is_dir():
            raise FileNotFoundError(f"{what} {target}: output folder {target.parent} does not exist")
    if not Path(video).exists():
        raise FileNotFoundError(f"{video}: no such video file")
    rig = read_rig(args.rig)
    fps, readout_s, exposure_s = options.timing_seconds(args)
    track_options = TrackOptions(
        fps_override=fps, readout_s=readout_s, exposure_s=exposure_s, polarity=args.polarity
    )

    def bar(frames, total):
        return progress(frames, total=total, desc="tracking", unit="frame")

    clip = track_to_files(
        video, rig, track_options, track_path=out, overlay_path=args.overlay or None, rig_name=str(args.rig),
        progress=bar, on_warning=warn,
    )  # fmt: skip
    result = clip.result
    track = result.track
    if track is None:  # track_to_files raises first; this keeps the types honest
        raise RuntimeError(f"{video}: the tracker returned no track")
    s = result.summary
    rows = [
        ("video", f"{video} ({result.info.width}x{result.info.height} px, {s.frames_read} frames)"),
        ("timing", f"{track.meta.timing_source}, {s.frame_rate_hz:.6g} fps"),
        (
            "readout / exposure",
            f"{args.readout_ms:g} ms / "
            + ("unknown" if args.exposure_ms is None else f"{args.exposure_ms:g} ms"),
        ),
        ("polarity", s.polarity),
        ("shots", str(len(track.shot_ids))),
        ("points", f"{s.points} in {s.frames_with_points} frames"),
        (
            "candidates",
            f"{s.candidates} found, {s.fitted} localised, {s.rejected_candidates} rejected, {s.outliers} outliers dropped",
        ),
        (
            "median sigma",
            f"{float(_median(track.sigma_px)):.3f} px, {float(_median(track.sigma_m)) * 1e3:.3f} mm",
        ),
    ]
    for i, sp in enumerate(s.shot_speeds_mps):
        rows.append(
            (
                f"shot {i} speed",
                f"{sp:.1f} m/s ({mps_to_fps(sp):.0f} ft/s), at its first point (local quadratic)",
            )
        )
    rows.append(("written", str(out) + (f", overlay {args.overlay}" if args.overlay else "")))
    print(summary("hopscope track", rows))
    return 0


def _median(a) -> float:
    import numpy as np

    return float(np.median(a)) if len(a) else float("nan")
