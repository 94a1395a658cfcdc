"""Command-line options shared by several commands, defined once: BB, air, laws, chronograph, timing.

Each ``add_*`` function adds a group of options to a parser; the matching ``*_from_args`` turns the parsed
values (user units: g, mm, °C, hPa, %, ms) into the stages' SI objects, raising ``ValueError`` with the
option's name for values out of range.
"""

from __future__ import annotations

import argparse
import math

from hopscope.fitting.air import Air
from hopscope.fitting.bb import BB
from hopscope.fitting.estimate import DEFAULT_LOSS, LOSSES, ChronoPrior
from hopscope.fitting.laws import DECAY_LAWS, DRAG_LAWS, LIFT_LAWS
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

#: Chronograph uncertainty when --chrono-mps gives none: 1 % of the reading.
#: # common practice, no published source
DEFAULT_CHRONO_REL_SIGMA = 0.01


def positive_float(text: str) -> float:
    """argparse type: a finite number > 0."""
    try:
        v = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a number, got {text!r}") from None
    if not (math.isfinite(v) and v > 0):
        raise argparse.ArgumentTypeError(f"expected a positive number, got {text!r}")
    return v


def finite_float(text: str) -> float:
    """argparse type: a finite number."""
    try:
        v = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a number, got {text!r}") from None
    if not math.isfinite(v):
        raise argparse.ArgumentTypeError(f"expected a finite number, got {text!r}")
    return v


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


def add_bb_options(parser: argparse.ArgumentParser, *, required: bool = True) -> None:
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
        "--fps", type=float, default=None, help="capture frame rate, Hz: replaces the container's timestamps"
    )
    timing.add_argument(
        "--readout-ms",
        type=float,
        default=0.0,
        help="rolling-shutter readout time, top to bottom row (default 0)",
    )
    timing.add_argument(
        "--exposure-ms", type=float, default=None, help="exposure time: times become mid-exposure"
    )
    parser.add_argument(
        "--polarity",
        choices=tuple(polarities),
        default="auto",
        help="BB brighter (bright) or darker (dark) than the background; auto decides from the clip",
    )


def timing_seconds(args: argparse.Namespace) -> tuple[float | None, float, float | None]:
    """(fps override Hz, readout s, exposure s) from the timing options."""
    return (
        args.fps,
        ms_to_s(args.readout_ms),
        None if args.exposure_ms is None else ms_to_s(args.exposure_ms),
    )
