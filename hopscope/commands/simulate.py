"""``hopscope simulate``: fly one BB with the project's flight model and write its path as CSV.

The shot comes either from a fit (``--fit fit.json``: the first shot's exit speed, elevation and lift
coefficient, the fitted C_D and spin decay, the fit's air density and BB) or from the command line. The laws
are the defaults of the fitter: constant drag, linear lift C_L = k·S, exponential spin decay. Under the
linear law only k·ω₀ shapes the path, so the spin is computed for a nominal k (:data:`NOMINAL_LIFT_SLOPE`)
and reported as model-based.

World frame: x downrange, y up, z = x × y (toward the camera), metres; the path starts at the origin at
t = 0 (for ``--fit``, the shot's first tracked point).
"""

from __future__ import annotations

import argparse
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from hopscope.console import summary, warn
from hopscope.decisions import tolerance_of_file
from hopscope.fitting.air import Air
from hopscope.fitting.bb import BB, DEFAULT_MASS_REL_SIGMA
from hopscope.fitting.fitfile import read_fit
from hopscope.fitting.flyto import MAX_FLIGHT_S, fly_shots_to
from hopscope.fitting.laws import LinearLift, SaturatingLift
from hopscope.fitting.observe import ModelSpec, RowParams
from hopscope.options import (
    add_air_options,
    add_bb_options,
    air_from_args,
    bb_from_args,
    bb_tolerance_from_args,
)
from hopscope.shared.constants import (
    DEFAULT_BB_DIAMETER_M,
    MAX_PLAUSIBLE_SPEED_MPS,
    MIN_PLAUSIBLE_SPEED_MPS,
)
from hopscope.shared.fileio import write_text_atomic
from hopscope.shared.units import (
    deg_to_rad,
    fraction_to_percent,
    kelvin_to_celsius,
    kg_to_grams,
    m_to_mm,
    mps_to_fps,
    pa_to_hpa,
    rad_to_deg,
    radps_to_rpm,
)

NAME = "simulate"
HELP = "fly a BB with the flight model (from a fit or given numbers) and write its path as CSV"
DESCRIPTION = (
    "Simulate one shot with the project's flight model (constant drag, linear lift C_L = k*S, exponential "
    "spin decay) from a fit.json or from numbers given here, and write the path to CSV. The path stops at "
    "--range-m or where it reaches the ground (--muzzle-height-m below the launch point)."
)

#: Nominal lift slope k of C_L = k·S used to turn the lift coefficient into a spin rate. Under the linear
#: law the path depends on k·ω₀ only, so any k gives the same path; the spin column scales as 1/k.
NOMINAL_LIFT_SLOPE = 1.0
DEFAULT_RANGE_M = 60.0
#: Height of the muzzle above the ground, m; the ground is this far below the launch point.
#: # common practice, no published source (a shoulder-height shot)
DEFAULT_MUZZLE_HEIGHT_M = 1.5
DEFAULT_SAMPLE_MS = 1.0
#: |C_L| above which the path carries a warning: the ceiling cl_max of the published saturating form.
SATURATING_CL_CEILING = float(SaturatingLift().cl_max)
PATH_SCHEMA = "hopscope.path/1"
DEFAULT_LAWS = {"drag": "constant", "lift": "linear", "decay": "exponential"}

_MANUAL_OPTIONS = ("mass_g", "speed_mps", "elevation_deg", "cd", "lift_coefficient")
_AIR_OPTIONS = ("temp_c", "pressure_hpa", "humidity_pct")


def register(parser: argparse.ArgumentParser) -> None:
    src = parser.add_argument_group("shot (either --fit, or the numbers below)")
    src.add_argument(
        "--fit", metavar="FIT_JSON", help="take the shot, C_D, spin decay, air and BB from a fit.json"
    )
    add_bb_options(src, required=False)
    src.add_argument("--speed-mps", type=float, metavar="V", help="exit speed, m/s")
    src.add_argument(
        "--elevation-deg", type=float, metavar="A", help="launch elevation above horizontal, degrees"
    )
    src.add_argument("--cd", type=float, metavar="CD", help="drag coefficient C_D (constant)")
    src.add_argument(
        "--lift-coefficient",
        type=float,
        metavar="CL",
        help="lift coefficient C_L at the start (backspin > 0)",
    )
    src.add_argument(
        "--spin-decay-s", type=float, metavar="TAU", help="spin decay time constant, s (default: no decay)"
    )
    flight = parser.add_argument_group("flight")
    flight.add_argument(
        "--range-m",
        type=float,
        default=DEFAULT_RANGE_M,
        metavar="R",
        help=f"stop at this downrange distance, m (default {DEFAULT_RANGE_M:g})",
    )
    flight.add_argument(
        "--muzzle-height-m",
        type=float,
        default=DEFAULT_MUZZLE_HEIGHT_M,
        metavar="H",
        help=f"muzzle height above the ground, m; the path stops at the ground (default {DEFAULT_MUZZLE_HEIGHT_M:g})",
    )
    flight.add_argument(
        "--wind-mps",
        type=float,
        default=0.0,
        metavar="W",
        help="wind along the line of fire, m/s (tailwind > 0)",
    )
    flight.add_argument(
        "--crosswind-mps", type=float, default=0.0, metavar="C", help="wind across the line of fire (+z), m/s"
    )
    flight.add_argument(
        "--sample-ms",
        type=float,
        default=DEFAULT_SAMPLE_MS,
        metavar="DT",
        help=f"time between CSV rows, ms (default {DEFAULT_SAMPLE_MS:g})",
    )
    add_air_options(parser)  # with --fit and none of them given: the fit's air
    parser.add_argument("-o", "--output", required=True, metavar="PATH_CSV", help="the path CSV to write")


@dataclass(frozen=True)
class ShotInputs:
    """Everything the simulation needs, SI, plus where it came from (for the header)."""

    bb: BB
    air: Air
    air_note: str
    speed_mps: float
    elevation_rad: float
    drag_coefficient: float
    lift_coefficient: float
    spin_decay_s: float  # inf: no decay
    source: str
    warnings: tuple[str, ...]
    #: the BB mass's relative standard uncertainty (--mass-g M:SIGMA, the fit's, or the default)
    mass_rel_sigma: float = DEFAULT_MASS_REL_SIGMA


# --------------------------------------------------------------------------------------------- validation


def _finite(option: str, value: float) -> float:
    if not math.isfinite(value):
        raise ValueError(f"{option}: must be a finite number, got {value!r}")
    return float(value)


def _in_range(
    option: str, value: float, lo: float, hi: float, unit: str, *, open_lo=False, open_hi=False
) -> float:
    _finite(option, value)
    bad_lo = value <= lo if open_lo else value < lo
    bad_hi = value >= hi if open_hi else value > hi
    if bad_lo or bad_hi:
        lo_s = "(" if open_lo else "["
        hi_s = ")" if open_hi else "]"
        u = f" {unit}" if unit else ""
        raise ValueError(
            f"{option}: {value:g}{u} is outside the accepted range {lo_s}{lo:g}, {hi:g}{hi_s}{u}"
        )
    return float(value)


def _check_speed(option: str, value: float) -> float:
    return _in_range(
        option, value, MIN_PLAUSIBLE_SPEED_MPS, MAX_PLAUSIBLE_SPEED_MPS, "m/s", open_lo=True, open_hi=True
    )


def _check_common(args: argparse.Namespace) -> None:
    _in_range("--range-m", args.range_m, 0.0, 1000.0, "m", open_lo=True)
    _in_range("--muzzle-height-m", args.muzzle_height_m, 0.0, 100.0, "m", open_lo=True)
    _in_range("--wind-mps", args.wind_mps, -50.0, 50.0, "m/s")
    _in_range("--crosswind-mps", args.crosswind_mps, -50.0, 50.0, "m/s")
    _in_range("--sample-ms", args.sample_ms, 0.0, 1000.0, "ms", open_lo=True)


def _air_from_args(args: argparse.Namespace) -> tuple[Air, str]:
    """The air from the shared air options, and a note for the header."""
    air, _ = air_from_args(args)
    note = f"CIPM-2007 from {kelvin_to_celsius(air.temperature_k):g} °C, {pa_to_hpa(air.pressure_pa):g} hPa, "
    note += f"{fraction_to_percent(air.relative_humidity):g} % RH"
    defaulted = [
        n
        for n, k in zip(("temperature", "pressure", "humidity"), _AIR_OPTIONS, strict=True)
        if getattr(args, k) is None
    ]
    if defaulted:
        note += f" (default {', '.join(defaulted)})"
    return air, note


def _manual_inputs(args: argparse.Namespace) -> ShotInputs:
    for key in _MANUAL_OPTIONS:
        if getattr(args, key) is None:
            raise ValueError(f"--{key.replace('_', '-')}: required unless --fit is given")
    if args.diameter_mm is None:
        args.diameter_mm = m_to_mm(DEFAULT_BB_DIAMETER_M)
    bb = bb_from_args(args)
    speed = _check_speed("--speed-mps", args.speed_mps)
    elevation = _in_range(
        "--elevation-deg", args.elevation_deg, -90.0, 90.0, "degrees", open_lo=True, open_hi=True
    )
    cd = _in_range("--cd", args.cd, 0.0, 5.0, "")
    cl = _in_range("--lift-coefficient", args.lift_coefficient, -2.0, 2.0, "")
    tau = math.inf
    if args.spin_decay_s is not None:
        _finite("--spin-decay-s", args.spin_decay_s)
        if args.spin_decay_s <= 0:
            raise ValueError(
                f"--spin-decay-s: must be positive (omit it for no decay), got {args.spin_decay_s:g}"
            )
        tau = float(args.spin_decay_s)
    air, note = _air_from_args(args)
    rel = bb_tolerance_from_args(args, bb).mass_rel(bb)
    return ShotInputs(bb, air, note, speed, deg_to_rad(elevation), cd, cl, tau, "command line", (), rel)


# ---------------------------------------------------------------------------------------------- fit.json


def _fit_error(path: str, key: str, problem: str) -> ValueError:
    return ValueError(f"{path}: {key}: {problem}")


def _fit_inputs(args: argparse.Namespace) -> ShotInputs:
    """The first shot of a fit file (read and validated by :func:`fitting.fitfile.read_fit`)."""
    path = args.fit
    manual = [
        f"--{k.replace('_', '-')}"
        for k in (*_MANUAL_OPTIONS, "diameter_mm", "spin_decay_s")
        if getattr(args, k) is not None
    ]
    if manual:
        raise ValueError(f"--fit: cannot be combined with {', '.join(manual)} (the fit gives them)")
    fit = read_fit(path)
    warnings: list[str] = []
    speed = fit.value("shots", 0, "initial", "speed_mps")
    elevation_deg = fit.value("shots", 0, "initial", "elevation_deg")
    cl = fit.value("shots", 0, "lift_coefficient")
    if speed is None or elevation_deg is None or cl is None:
        raise _fit_error(path, "shots[0]", "the first shot's speed, elevation or lift coefficient is null")
    cd = fit.value("aero", "drag_coefficient")
    if cd is None:
        raise _fit_error(path, "aero.drag_coefficient", "is null (the fit did not determine it)")
    if not MIN_PLAUSIBLE_SPEED_MPS < speed < MAX_PLAUSIBLE_SPEED_MPS:
        raise _fit_error(
            path, "shots[0].initial.speed_mps.value", f"{speed:g} m/s is not a plausible BB speed"
        )
    if not -90.0 < elevation_deg < 90.0:
        raise _fit_error(
            path, "shots[0].initial.elevation_deg.value", f"{elevation_deg:g} degrees is outside (-90, 90)"
        )
    if not 0.0 <= cd <= 5.0:
        raise _fit_error(path, "aero.drag_coefficient.value", f"{cd:g} is outside [0, 5]")
    if not -2.0 <= cl <= 2.0:
        raise _fit_error(path, "shots[0].lift_coefficient.value", f"{cl:g} is outside [-2, 2]")
    tau = fit.spin_decay_time_s
    model = fit.data["model"]
    if tau is None:
        fixed = model.get("decay_fixed_value")
        if model.get("decay") == "exponential" and isinstance(fixed, int | float) and fixed > 0:
            tau = 1.0 / float(fixed)
            warnings.append(
                f"{path}: the fit could not determine the spin decay time; simulating with the fit's assumed "
                f"{tau:.3g} s"
            )
        else:
            tau = math.inf
            warnings.append(
                f"{path}: the fit could not determine the spin decay time; simulating without decay"
            )
    elif tau <= 0:
        raise _fit_error(path, "aero.spin_decay_time_s.value", f"must be positive, got {tau:g}")
    for key, default in DEFAULT_LAWS.items():
        law = model.get(key)
        if isinstance(law, str) and law != default:
            warnings.append(
                f"{path}: the fit used {key} law {law!r}; simulate uses {default!r} with the fit's coefficients"
            )
    if fit.n_shots > 1:
        warnings.append(f"{path}: the fit holds {fit.n_shots} shots; simulating the first")
    if any(getattr(args, k) is not None for k in _AIR_OPTIONS):
        air, note = _air_from_args(args)
        note += f"; given on the command line instead of the fit's {fit.air.density_kgm3:.5g} kg/m³"
    else:
        air = fit.air
        note = f"from the fit ({path})"
    source = f"{path} (shots[0]; path starts at its first tracked point)"
    tol = tolerance_of_file(fit)
    rel = DEFAULT_MASS_REL_SIGMA if tol is None else tol.mass_rel(fit.bb)
    return ShotInputs(
        fit.bb, air, note, speed, deg_to_rad(elevation_deg), cd, cl, tau, source, tuple(warnings), rel
    )


# ---------------------------------------------------------------------------------------------- simulation


@dataclass(frozen=True)
class SimulatedPath:
    """Sampled path (SI) and how it ended."""

    t_s: np.ndarray
    state: np.ndarray  # (k, 7): x, y, z, vx, vy, vz, omega
    spin0_radps: float
    stop_reason: str  # "range" or "ground"
    t_range_s: float  # NaN if the range was not reached
    ground_y_m: float


def simulate(
    shot: ShotInputs, *, range_m: float, muzzle_height_m: float, wind_mps, sample_s: float
) -> SimulatedPath:
    """Fly the shot from the origin until it reaches ``range_m`` downrange or the ground."""
    spec = ModelSpec(
        shot.bb,
        shot.air,
        lift_k=NOMINAL_LIFT_SLOPE,
        wind_mps=(float(wind_mps[0]), float(wind_mps[1]), float(wind_mps[2])),
    )
    rate = 0.0 if math.isinf(shot.spin_decay_s) else 1.0 / shot.spin_decay_s
    one = np.ones(1)
    rows = RowParams(
        0.0 * one,
        0.0 * one,
        shot.speed_mps * one,
        shot.elevation_rad * one,
        shot.lift_coefficient * one,
        shot.drag_coefficient * one,
        rate * one,
    )
    ground = -float(muzzle_height_m)
    path = fly_shots_to(
        spec, rows, range_m=range_m, ground_y_m=ground, sample_s=sample_s, max_time_s=MAX_FLIGHT_S
    )
    if path.reached == "time":
        raise ValueError(
            f"--range-m: the BB neither reached {range_m:g} m downrange nor the ground within {MAX_FLIGHT_S:g} s"
        )
    t_range = float(path.t_s[-1]) if path.reached == "range" else math.nan
    return SimulatedPath(path.t_s, path.state, float(path.state[0, 6]), path.reached, t_range, ground)


def _lift_coefficients(shot: ShotInputs, path: SimulatedPath, wind_mps) -> np.ndarray:
    """C_L along the path under the linear law (independent of the nominal k)."""
    u = np.linalg.norm(path.state[:, 3:6] - np.asarray(wind_mps, dtype=float), axis=1)
    return LinearLift(NOMINAL_LIFT_SLOPE).coefficient(shot.bb.radius_m * path.state[:, 6] / u)


def _csv_text(shot: ShotInputs, path: SimulatedPath, args: argparse.Namespace, warnings: list[str]) -> str:
    bb = shot.bb
    speed = np.linalg.norm(path.state[:, 3:6], axis=1)
    energy = 0.5 * bb.mass_kg * speed**2
    cl = _lift_coefficients(shot, path, (args.wind_mps, 0.0, args.crosswind_mps))
    tau = "no decay" if math.isinf(shot.spin_decay_s) else f"tau = {shot.spin_decay_s:g} s"
    header = [
        f"# {PATH_SCHEMA} written by hopscope simulate (model output, not a measurement)",
        f"# source: {shot.source}",
        f"# air: density {shot.air.density_kgm3:.5f} kg/m3, {shot.air_note}",
        f"# bb: mass {bb.mass_kg:.6g} kg ({kg_to_grams(bb.mass_kg):g} g), diameter {bb.diameter_m:.6g} m",
        f"# launch: speed {shot.speed_mps:.6g} m/s ({mps_to_fps(shot.speed_mps):.1f} fps), elevation "
        f"{rad_to_deg(shot.elevation_rad):.6g} deg, at x = y = z = 0",
        f"# law drag: constant, C_D = {shot.drag_coefficient:.6g}",
        f"# law lift: linear, C_L = k*S with nominal k = {NOMINAL_LIFT_SLOPE:g}; C_L at start {shot.lift_coefficient:.6g} "
        f"gives spin {path.spin0_radps:.6g} rad/s ({radps_to_rpm(path.spin0_radps):.0f} rpm), model-based: "
        "only k*spin is fixed by C_L",
        f"# law decay: exponential in time, {tau}",
        f"# wind: {args.wind_mps:g} m/s downrange, {args.crosswind_mps:g} m/s across (+z); gravity 9.80665 m/s2 (-y)",
        f"# stop: {'range ' + format(args.range_m, 'g') + ' m reached' if path.stop_reason == 'range' else 'ground reached'}"
        f"; ground at y = {path.ground_y_m:g} m (muzzle height {args.muzzle_height_m:g} m)",
        "# frame: x downrange, y up, z = x cross y, metres; t since launch, s; energy_j = translational kinetic energy",
    ]
    header += [f"# warning: {w}" for w in warnings]
    cols = "t_s,x_m,y_m,z_m,vx_mps,vy_mps,vz_mps,speed_mps,spin_radps,energy_j,lift_coefficient"
    rows = [
        f"{t:.9f},{s[0]:.6f},{s[1]:.6f},{s[2]:.6f},{s[3]:.6f},{s[4]:.6f},{s[5]:.6f},{v:.6f},{s[6]:.6g},{e:.6g},{c:.6g}"
        for t, s, v, e, c in zip(path.t_s, path.state, speed, energy, cl, strict=True)
    ]
    return "\n".join([*header, cols, *rows]) + "\n"


def run(args: argparse.Namespace) -> int:
    if Path(args.output).is_dir():
        raise ValueError(f"-o: {args.output} is a folder; give the path of the CSV file to write")
    _check_common(args)
    shot = _fit_inputs(args) if args.fit is not None else _manual_inputs(args)
    wind = (args.wind_mps, 0.0, args.crosswind_mps)
    path = simulate(
        shot,
        range_m=args.range_m,
        muzzle_height_m=args.muzzle_height_m,
        wind_mps=wind,
        sample_s=args.sample_ms * 1e-3,
    )
    warnings = list(shot.warnings)
    cl_max = float(np.max(np.abs(_lift_coefficients(shot, path, wind))))
    if cl_max > SATURATING_CL_CEILING:
        warnings.append(
            f"the lift coefficient reaches {cl_max:.2g} along the path, beyond {SATURATING_CL_CEILING:.2f} "
            "(the ceiling of the published saturating lift form); the linear law is extrapolated there"
        )
    if path.stop_reason == "ground":
        warnings.append(
            f"the BB reached the ground at {path.state[-1, 0]:.2f} m downrange, before the range of {args.range_m:g} m"
        )
    text = _csv_text(shot, path, args, warnings)
    write_text_atomic(args.output, text)
    for w in warnings:
        warn(w)
    print(_summary(shot, path, args))
    return 0


def _summary(shot: ShotInputs, path: SimulatedPath, args: argparse.Namespace) -> str:
    m = shot.bb.mass_kg
    v0 = shot.speed_mps
    end = path.state[-1]
    v_end = float(np.linalg.norm(end[3:6]))
    rows = [
        ("muzzle speed", f"{v0:.1f} m/s ({mps_to_fps(v0):.0f} fps)"),
        (
            "muzzle energy",
            f"{0.5 * m * v0 * v0:.3f} J ± {0.5 * m * v0 * v0 * shot.mass_rel_sigma:.2g} J (BB mass tolerance)",
        ),
        ("air density", f"{shot.air.density_kgm3:.4f} kg/m³"),
        ("max height", f"{float(np.max(path.state[:, 1])):+.3f} m (above launch)"),
    ]
    if path.stop_reason == "range":
        rows += [
            ("time of flight", f"{path.t_s[-1]:.3f} s to {args.range_m:g} m"),
            (
                "drop at range" if end[1] <= 0 else "rise at range",
                f"{abs(end[1]):.3f} m {'below' if end[1] <= 0 else 'above'} launch height",
            ),
            ("drift at range", f"{end[2]:+.3f} m (+z)"),
            ("speed at range", f"{v_end:.1f} m/s ({mps_to_fps(v_end):.0f} fps)"),
            ("energy at range", f"{0.5 * m * v_end * v_end:.3f} J"),
        ]
    else:
        rows += [
            ("time of flight", f"{path.t_s[-1]:.3f} s to the ground"),
            ("ground reached at", f"{end[0]:.2f} m downrange (range {args.range_m:g} m not reached)"),
            ("speed at the ground", f"{v_end:.1f} m/s ({mps_to_fps(v_end):.0f} fps)"),
            ("energy at the ground", f"{0.5 * m * v_end * v_end:.3f} J"),
        ]
    rows.append(("path", f"{args.output} ({path.t_s.size} rows)"))
    text = summary("hopscope simulate (model output)", rows)
    return (
        text
        + "\n  note: field and local rules on muzzle energy govern; the field's chronograph is the reference."
    )
