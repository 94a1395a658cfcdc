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
from hopscope.fitting.bb import BB, DEFAULT_DIAMETER_SIGMA_M, DEFAULT_MASS_REL_SIGMA, BBTolerance
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
    fraction_to_percent,
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


def _value_sigma(option: str, unit: str):
    """argparse action for ``VALUE[:SIGMA]``: the value goes to the option's dest (a float, as before),
    the standard uncertainty to ``<dest>_sigma`` (None when not given)."""

    class ValueSigma(argparse.Action):
        def __call__(self, parser, namespace, values, option_string=None):
            text = str(values)
            parts = text.split(":")
            try:
                nums = [float(p) for p in parts]
            except ValueError:
                nums = []
            if len(parts) > 2 or not nums or not all(math.isfinite(v) for v in nums):
                raise argparse.ArgumentError(self, f"expected VALUE or VALUE:SIGMA in {unit}, got {text!r}")
            setattr(namespace, self.dest, nums[0])
            setattr(namespace, f"{self.dest}_sigma", nums[1] if len(nums) == 2 else None)

    ValueSigma.__name__ = f"ValueSigma_{option}"
    return ValueSigma


def add_bb_options(parser: argparse._ActionsContainer, *, required: bool = True) -> None:
    """--mass-g M[:SIGMA] and --diameter-mm D[:SIGMA] (SIGMA: the standard uncertainty, in the same unit;
    default :data:`fitting.bb.DEFAULT_MASS_REL_SIGMA` of the mass and :data:`fitting.bb.DEFAULT_DIAMETER_SIGMA_M`).
    ``required=False`` (``simulate``, where a fit can give the BB): both default to None, and the command
    fills in the diameter's default before :func:`bb_from_args`."""
    parser.set_defaults(mass_g_sigma=None, diameter_mm_sigma=None)
    parser.add_argument(
        "--mass-g",
        required=required,
        action=_value_sigma("mass", "g"),
        metavar="M[:SIGMA]",
        help=f"BB mass and its standard uncertainty, g (default uncertainty "
        f"{fraction_to_percent(DEFAULT_MASS_REL_SIGMA):g} %% of the mass; common practice, no published source)",
    )
    parser.add_argument(
        "--diameter-mm",
        action=_value_sigma("diameter", "mm"),
        default=m_to_mm(DEFAULT_BB_DIAMETER_M) if required else None,
        metavar="D[:SIGMA]",
        help=f"BB diameter and its standard uncertainty, mm (default {m_to_mm(DEFAULT_BB_DIAMETER_M):g}:"
        f"{m_to_mm(DEFAULT_DIAMETER_SIGMA_M):g}; common practice, no published source)",
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


def bb_tolerance_from_args(args: argparse.Namespace, bb: BB) -> BBTolerance:
    """The BB's mass and diameter tolerance from ``--mass-g M:SIGMA`` / ``--diameter-mm D:SIGMA`` (SI),
    each defaulting to :meth:`fitting.bb.BBTolerance.default_for`; ``origin`` says which were given."""
    default = BBTolerance.default_for(bb)
    m_sig = getattr(args, "mass_g_sigma", None)
    d_sig = getattr(args, "diameter_mm_sigma", None)
    for option, sig, value, unit in (
        ("--mass-g", m_sig, args.mass_g, "g"),
        ("--diameter-mm", d_sig, args.diameter_mm, "mm"),
    ):
        if sig is not None and not 0 <= sig < value:
            raise ValueError(
                f"{option}: the standard uncertainty SIGMA must be >= 0 and below the value, "
                f"got {value:g}:{sig:g} {unit}"
            )
    mass_sigma = default.mass_sigma_kg if m_sig is None else grams_to_kg(m_sig)
    diameter_sigma = default.diameter_sigma_m if d_sig is None else mm_to_m(d_sig)
    given = [name for name, sig in (("mass", m_sig), ("diameter", d_sig)) if sig is not None]
    if len(given) == 2:
        origin = "given"
    elif given:
        origin = f"{given[0]} given, {'diameter' if given[0] == 'mass' else 'mass'} default"
    else:
        origin = "default"
    return BBTolerance(mass_sigma, diameter_sigma, origin)


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
        help="downrange position of the muzzle (or the chronograph), world x, m: speed and energy are "
        "flown back to it (default: at each shot's first tracked point); with --chrono-mps the prior applies there",
    )


def chrono_from_args(args: argparse.Namespace) -> ChronoPrior | None:
    if args.chrono_mps is None:
        return None
    return ChronoPrior(args.chrono_mps[0], args.chrono_mps[1], args.muzzle_x_m)


def add_limit_option(parser: argparse.ArgumentParser) -> None:
    """--limit-j: the field's muzzle-energy limit (``fit``, ``run``, ``report``, ``compare``)."""
    parser.add_argument(
        "--limit-j",
        type=positive_float,
        metavar="J",
        help="the field's muzzle-energy limit, J: verdict below / within the uncertainty of / above it "
        "(the field's own chronograph rules)",
    )


def add_forecast_options(parser: argparse.ArgumentParser) -> None:
    """The prediction's and the hop verdict's convention: muzzle height, band, engagement range."""
    from hopscope.fitting.forecast import DEFAULT_BAND_M, DEFAULT_MUZZLE_HEIGHT_M
    from hopscope.fitting.verdict import DEFAULT_ENGAGEMENT_M

    group = parser.add_argument_group("prediction and hop verdict")
    group.add_argument(
        "--muzzle-height-m",
        type=positive_float,
        default=DEFAULT_MUZZLE_HEIGHT_M,
        metavar="H",
        help=f"muzzle height above level ground, m; paths end at the ground (default {DEFAULT_MUZZLE_HEIGHT_M:g})",
    )
    group.add_argument(
        "--band-m",
        type=positive_float,
        default=DEFAULT_BAND_M,
        metavar="B",
        help=f"half-height of the band about the line of sight, m: flat distance and hop verdict (default {DEFAULT_BAND_M:g})",
    )
    group.add_argument(
        "--engagement-m",
        type=positive_float,
        default=DEFAULT_ENGAGEMENT_M,
        metavar="R",
        help=f"engagement range the hop verdict judges the path over, and where speed and energy are given, m "
        f"(default {DEFAULT_ENGAGEMENT_M:g})",
    )


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
    bb = bb_from_args(args)
    return FitSettings(
        bb,
        air,
        args.drag,
        args.lift,
        args.decay,
        chrono_from_args(args),
        args.loss,
        tuple(notes),
        bb_tolerance_from_args(args, bb),
        args.muzzle_x_m,
        getattr(args, "limit_j", None),
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
    add_limit_option(parser)
    add_forecast_options(parser)
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
    from hopscope.decisions import convention_from_args

    return RunRequest(
        videos, rig, settings, track, Path(args.out), args.range_m, title or args.title,
        convention_from_args(args),
    )  # fmt: skip
