"""Command-line options shared by several commands, defined once: BB, air, laws, chronograph, timing.

Each ``add_*`` function adds a group of options to a parser; the matching ``*_from_args`` turns the parsed
values (user units: g, mm, °C, hPa, %, ms) into the stages' SI objects, raising ``ValueError`` with the
option's name for values out of range.
"""

from __future__ import annotations

import argparse
import math
from pathlib import Path
from typing import TYPE_CHECKING

from hopscope.fitting.air import Air
from hopscope.fitting.bb import BB
from hopscope.fitting.estimate import DEFAULT_LOSS, LOSSES, ChronoPrior
from hopscope.fitting.laws import DECAY_LAWS, DRAG_LAWS, LIFT_LAWS
from hopscope.fitting.predict import DEFAULT_RANGE_M
from hopscope.shared.constants import (
    DEFAULT_BB_DIAMETER_M,
    DEFAULT_HUMIDITY_PCT,
    DEFAULT_PRESSURE_HPA,
    DEFAULT_TEMPERATURE_C,
)
from hopscope.shared.units import (
    celsius_to_kelvin,
    grams_to_kg,
    hpa_to_pa,
    m_to_mm,
    mm_to_m,
    ms_to_s,
    percent_to_fraction,
)

if TYPE_CHECKING:  # the app's glue and the tracker are imported when used (simulate needs neither)
    from hopscope.pipeline import FitSettings, RunRequest
    from hopscope.tracker.pipeline import TrackOptions

#: Chronograph uncertainty when --chrono-mps gives none: 1 % of the reading.
#: # common practice, no published source
DEFAULT_CHRONO_REL_SIGMA = 0.01


def _number(text: str, convert, ok, expected: str):
    """argparse type helper: ``convert(text)`` when it parses and passes ``ok``, else a usage error."""
    try:
        v = convert(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected {expected}, got {text!r}") from None
    if not ok(v):
        raise argparse.ArgumentTypeError(f"expected {expected}, got {text!r}")
    return v


def positive_float(text: str) -> float:
    """argparse type: a finite number > 0."""
    return _number(text, float, lambda v: math.isfinite(v) and v > 0, "a positive number")


def finite_float(text: str) -> float:
    """argparse type: a finite number."""
    return _number(text, float, math.isfinite, "a finite number")


def count(text: str) -> int:
    """argparse type: a whole number >= 0."""
    return _number(text, int, lambda v: v >= 0, "a whole number >= 0")


def parse_chrono(text: str) -> tuple[float, float]:
    """``V[:SIGMA]`` in m/s → (speed, sigma); sigma defaults to 1 % of V."""
    parts = text.split(":")
    if len(parts) > 2:
        raise argparse.ArgumentTypeError(f"expected V or V:SIGMA in m/s, got {text!r}")
    try:
        vals = [float(p) for p in parts]
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected V or V:SIGMA in m/s, got {text!r}") from None
    if not all(math.isfinite(v) and v > 0 for v in vals):
        raise argparse.ArgumentTypeError(f"speed and sigma must be positive, got {text!r}")
    speed = vals[0]
    sigma = vals[1] if len(vals) == 2 else DEFAULT_CHRONO_REL_SIGMA * speed
    return speed, sigma


# ---------------------------------------------------------------------------------------------- BB, air


def add_bb_options(parser: argparse._ActionsContainer, *, required: bool = True) -> None:
    """--mass-g and --diameter-mm. ``required=False`` (``simulate``, where a fit can give the BB): both
    default to None, and the command fills in the diameter's default before :func:`bb_from_args`."""
    parser.add_argument("--mass-g", required=required, type=finite_float, metavar="M", help="BB mass, g")
    parser.add_argument(
        "--diameter-mm",
        type=finite_float,
        default=m_to_mm(DEFAULT_BB_DIAMETER_M) if required else None,
        metavar="D",
        help=f"BB diameter, mm (default {m_to_mm(DEFAULT_BB_DIAMETER_M):g})",
    )


def bb_from_args(args: argparse.Namespace) -> BB:
    # checked in the user's units, so the message echoes what was typed (not kilograms)
    if not args.mass_g > 0:
        raise ValueError(f"--mass-g: expected a positive mass in grams, got {args.mass_g:g} g")
    if not args.diameter_mm > 0:
        raise ValueError(
            f"--diameter-mm: expected a positive diameter in millimetres, got {args.diameter_mm:g} mm"
        )
    try:
        return BB(grams_to_kg(args.mass_g), mm_to_m(args.diameter_mm))
    except ValueError as exc:
        raise ValueError(f"--mass-g/--diameter-mm: {exc}") from None


def add_air_options(parser: argparse.ArgumentParser) -> None:
    air = parser.add_argument_group(
        f"air (default {DEFAULT_TEMPERATURE_C:g} °C, {DEFAULT_PRESSURE_HPA:g} hPa, {DEFAULT_HUMIDITY_PCT:g} %)"
    )
    air.add_argument("--temp-c", type=finite_float, metavar="T", help="air temperature, °C")
    air.add_argument("--pressure-hpa", type=positive_float, metavar="P", help="absolute air pressure, hPa")
    air.add_argument("--humidity-pct", type=finite_float, metavar="H", help="relative humidity, %%")


def air_from_args(args: argparse.Namespace) -> tuple[Air, list[str]]:
    """CIPM-2007 air from --temp-c/--pressure-hpa/--humidity-pct (defaults for those not given), and notes."""
    given = [args.temp_c, args.pressure_hpa, args.humidity_pct]
    notes = []
    if any(v is None for v in given):
        missing = [
            n
            for n, v in zip(("--temp-c", "--pressure-hpa", "--humidity-pct"), given, strict=True)
            if v is None
        ]
        notes.append(
            f"air conditions not given ({', '.join(missing)}): using {DEFAULT_TEMPERATURE_C:g} °C, "
            f"{DEFAULT_PRESSURE_HPA:g} hPa, {DEFAULT_HUMIDITY_PCT:g} % for those; C_D scales as 1/density"
        )
    t_c = DEFAULT_TEMPERATURE_C if args.temp_c is None else args.temp_c
    p_hpa = DEFAULT_PRESSURE_HPA if args.pressure_hpa is None else args.pressure_hpa
    h_pct = DEFAULT_HUMIDITY_PCT if args.humidity_pct is None else args.humidity_pct
    try:
        air = Air.from_conditions(celsius_to_kelvin(t_c), hpa_to_pa(p_hpa), percent_to_fraction(h_pct))
    except ValueError as exc:
        raise ValueError(f"--temp-c/--pressure-hpa/--humidity-pct: {exc}") from None
    return air, notes


# ---------------------------------------------------------------------------------------------- fit


def add_law_options(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--drag", choices=DRAG_LAWS, default="constant", help="drag law (default constant)")
    parser.add_argument("--lift", choices=LIFT_LAWS, default="linear", help="lift law (default linear)")
    parser.add_argument(
        "--decay", choices=DECAY_LAWS, default="exponential", help="spin-decay law (default exponential)"
    )
    parser.add_argument(
        "--loss",
        choices=LOSSES,
        default=DEFAULT_LOSS,
        help=f"robust loss against outliers (default {DEFAULT_LOSS})",
    )


def add_chrono_options(parser: argparse.ArgumentParser) -> None:
    parser.add_argument(
        "--chrono-mps",
        type=parse_chrono,
        metavar="V[:SIGMA]",
        help="chronograph speed (and its standard uncertainty, default 1 %%), m/s, a prior on every shot",
    )
    parser.add_argument(
        "--muzzle-x-m",
        type=finite_float,
        metavar="X",
        help="downrange position of the muzzle/chronograph, m (the prior then applies there, not at the "
        "first tracked point)",
    )


def chrono_from_args(args: argparse.Namespace) -> ChronoPrior | None:
    if args.muzzle_x_m is not None and args.chrono_mps is None:
        raise ValueError("--muzzle-x-m: needs --chrono-mps (it says where the chronograph speed applies)")
    if args.chrono_mps is None:
        return None
    return ChronoPrior(args.chrono_mps[0], args.chrono_mps[1], args.muzzle_x_m)


# ---------------------------------------------------------------------------------------------- timing


def add_timing_options(parser: argparse.ArgumentParser, *, polarities) -> None:
    """--fps, --readout-ms, --exposure-ms and --polarity (as for ``hopscope track``)."""
    timing = parser.add_argument_group("timing")
    timing.add_argument(
        "--fps",
        type=float,
        default=None,
        metavar="F",
        help="capture frame rate, frames/s (Hz): replaces the container's timestamps",
    )
    timing.add_argument(
        "--readout-ms",
        type=float,
        default=0.0,
        help="rolling-shutter readout time, top to bottom row, ms (default 0)",
    )
    timing.add_argument(
        "--exposure-ms", type=float, default=None, help="exposure time, ms: times become mid-exposure"
    )
    parser.add_argument(
        "--polarity",
        choices=tuple(polarities),
        default="auto",
        help="BB brighter (bright) or darker (dark) than the background; auto decides from the clip",
    )
    parser.add_argument(
        "--speed-band-mps",
        default="20:200",
        metavar="LOW:HIGH",
        help="speeds a BB can have, m/s (default 20:200): slower or faster tracks are not taken for the BB",
    )


def timing_seconds(args: argparse.Namespace) -> tuple[float | None, float, float | None]:
    """(fps override Hz, readout s, exposure s) from the timing options."""
    return (
        args.fps,
        ms_to_s(args.readout_ms),
        None if args.exposure_ms is None else ms_to_s(args.exposure_ms),
    )


def track_options(args: argparse.Namespace) -> TrackOptions:
    """The tracker's options from the timing options (SI)."""
    from hopscope.tracker.pipeline import TrackOptions

    fps, readout_s, exposure_s = timing_seconds(args)
    text = str(getattr(args, "speed_band_mps", "20:200"))
    try:
        lo, hi = (float(x) for x in text.split(":"))
    except ValueError:
        raise ValueError(f"--speed-band-mps: expected LOW:HIGH in m/s, got {text!r}") from None
    return TrackOptions(
        fps_override=fps,
        readout_s=readout_s,
        exposure_s=exposure_s,
        polarity=args.polarity,
        speed_band_mps=(lo, hi),
    )


# ---------------------------------------------------------------------------------------------- commands


def add_track_inputs(parser: argparse.ArgumentParser) -> None:
    """Track files and the BB and air they flew in (``fit`` and ``profile``)."""
    parser.add_argument("tracks", nargs="+", metavar="TRACK.csv", help="track files (hopscope.track/1)")
    add_bb_options(parser)
    add_air_options(parser)


def add_fit_options(parser: argparse.ArgumentParser) -> None:
    """The chronograph prior and the laws (``fit`` and ``run``)."""
    add_chrono_options(parser)
    add_law_options(parser)


def fit_settings(args: argparse.Namespace) -> FitSettings:
    """How to fit, from the BB, air, chronograph and law options."""
    from hopscope.pipeline import FitSettings

    air, notes = air_from_args(args)
    return FitSettings(
        bb_from_args(args),
        air,
        args.drag,
        args.lift,
        args.decay,
        chrono_from_args(args),
        args.loss,
        tuple(notes),
    )


def add_run_options(parser: argparse.ArgumentParser) -> None:
    """``hopscope run``'s options (the demo parses the command line it builds with them)."""
    from hopscope.tracker.pipeline import POLARITIES

    parser.add_argument(
        "videos", nargs="+", metavar="VIDEO", help="clips, or folders of clips (tracked in name order)"
    )
    parser.add_argument("--rig", required=True, help="rig.json from 'hopscope calibrate'")
    add_bb_options(parser)
    add_air_options(parser)
    add_timing_options(parser, polarities=POLARITIES)
    add_fit_options(parser)
    parser.add_argument(
        "--range-m",
        type=positive_float,
        default=DEFAULT_RANGE_M,
        metavar="R",
        help=f"distance of the report's predicted path, m (default {DEFAULT_RANGE_M:g})",
    )
    parser.add_argument("--title", help="title of the report (default: the first clip's name)")
    parser.add_argument(
        "--out",
        required=True,
        metavar="DIR",
        help="output folder (created if missing; the files of an earlier run into it are replaced)",
    )


def run_request(args: argparse.Namespace, *, title: str | None = None) -> RunRequest:
    """A checked :class:`hopscope.pipeline.RunRequest` from ``hopscope run``'s options (before slow work)."""
    from hopscope.inputs import expand_videos
    from hopscope.pipeline import RunRequest

    settings = fit_settings(args)
    track = track_options(args)
    videos = expand_videos(args.videos)
    rig = Path(args.rig)
    if not rig.is_file():
        raise FileNotFoundError(f"--rig {rig}: no such rig file")
    return RunRequest(videos, rig, settings, track, Path(args.out), args.range_m, title or args.title)
