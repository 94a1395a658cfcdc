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
import math
from dataclasses import replace
from pathlib import Path

import numpy as np

from fitting.air import Air
from fitting.bb import BB
from fitting.constants import (
    DEFAULT_BB_DIAMETER_M,
    DEFAULT_HUMIDITY_PCT,
    DEFAULT_PRESSURE_HPA,
    DEFAULT_TEMPERATURE_C,
)
from fitting.estimate import DEFAULT_LOSS, LOSSES, ChronoPrior, Estimate, FlightFit, fit_shots
from fitting.fitfile import fit_to_json
from fitting.laws import DECAY_LAWS, DRAG_LAWS, LIFT_LAWS
from fitting.observe import ShotData
from fitting.units import (
    celsius_to_kelvin,
    grams_to_kg,
    hpa_to_pa,
    m_to_mm,
    mm_to_m,
    mps_to_fps,
    percent_to_fraction,
    rad_to_deg,
    radps_to_rpm,
)
from hopscope.console import summary, warn
from hopscope.errors import EXIT_OK, EXIT_UNEXPECTED
from hopscope.fileio import write_text_atomic
from tracker.trackfile import read_track

NAME = "fit"
HELP = "fit exit speed, drag, lift and spin decay to tracked shots and write fit.json"
DESCRIPTION = (
    "Fit the flight model (gravity, drag, Magnus lift, spin decay) to one or more track files; shots of "
    "all files share C_D and the spin decay (one BB type). Writes fit.json and prints the parameters with "
    "their standard errors (noise, residual scatter and the calibration's share). Exit code 1 when the "
    "fit does not converge (fit.json then says converged: false and why), 2 for bad input."
)

#: Chronograph uncertainty when --chrono-mps gives none: 1 % of the reading.
#: # common practice, no published source
DEFAULT_CHRONO_REL_SIGMA = 0.01


def _positive_float(text: str) -> float:
    try:
        v = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a number, got {text!r}") from None
    if not (math.isfinite(v) and v > 0):
        raise argparse.ArgumentTypeError(f"expected a positive number, got {text!r}")
    return v


def _finite_float(text: str) -> float:
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


def register(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("tracks", nargs="+", metavar="TRACK.csv", help="track files (hopscope.track/1)")
    parser.add_argument("--mass-g", required=True, type=_finite_float, metavar="M", help="BB mass, g")
    parser.add_argument(
        "--diameter-mm",
        type=_finite_float,
        default=m_to_mm(DEFAULT_BB_DIAMETER_M),
        metavar="D",
        help=f"BB diameter, mm (default {m_to_mm(DEFAULT_BB_DIAMETER_M):g})",
    )
    air = parser.add_argument_group(
        f"air (default {DEFAULT_TEMPERATURE_C:g} °C, {DEFAULT_PRESSURE_HPA:g} hPa, {DEFAULT_HUMIDITY_PCT:g} %%)"
    )
    air.add_argument("--temp-c", type=_finite_float, metavar="T", help="air temperature, °C")
    air.add_argument("--pressure-hpa", type=_positive_float, metavar="P", help="absolute air pressure, hPa")
    air.add_argument("--humidity-pct", type=_finite_float, metavar="H", help="relative humidity, %%")
    parser.add_argument(
        "--chrono-mps",
        type=parse_chrono,
        metavar="V[:SIGMA]",
        help="chronograph speed (and its standard uncertainty, default 1 %%), m/s, a prior on every shot",
    )
    parser.add_argument(
        "--muzzle-x-m",
        type=_finite_float,
        metavar="X",
        help="downrange position of the muzzle/chronograph, m (the prior then applies there, not at the "
        "first tracked point)",
    )
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
    parser.add_argument("-o", "--output", required=True, metavar="FIT_JSON", help="the fit.json to write")


def shots_from_track(path: str) -> tuple[list[ShotData], dict, list[str]]:
    """ShotData for every shot of a track file, the file's input record and its warnings."""
    track = read_track(path)
    name = Path(path).name
    shots = []
    for sid in track.shot_ids:
        t = track.select_shot(sid)
        offsets = t.cal_offsets_m() if t.n_ensemble else None
        try:
            shots.append(
                ShotData(t.t_s, t.x_m, t.y_m, t.sigma_m, offsets, f"{name}#{sid}", t.meta.rig_digest)
            )
        except ValueError as exc:
            raise ValueError(f"{path}: {exc}") from None
    record = {"path": str(path), "rig_digest": track.meta.rig_digest, "shots": [s.label for s in shots]}
    warns = [f"{name}: {w}" for w in track.meta.warnings]
    return shots, record, warns


def _air(args) -> tuple[Air, list[str]]:
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


def _pm(e: Estimate | None, scale: float = 1.0, fmt: str = ".4g") -> str:
    if e is None or e.value is None:
        return "not determined"
    if e.stderr is None:
        return f"{e.value * scale:{fmt}} ± ?"
    return f"{e.value * scale:{fmt}} ± {e.stderr * scale:.2g}"


def _cal(e: Estimate | None) -> str:
    share = None if e is None else e.calibration_share
    return "" if share is None else f"  (calibration {100 * share:.0f} % of variance)"


def parameter_table(result: FlightFit) -> str:
    """The on-screen summary: parameters ± σ in user units, residual RMS, goodness of fit."""
    rows: list[tuple[str, str]] = []
    for s in result.shots:
        rows.append((f"{s.label}", f"{s.n_points} points, first at t = {s.t0_s:.6f} s"))
        rows.append(
            (
                "  speed",
                f"{_pm(s.speed_mps, fmt='.5g')} m/s = {_pm(s.speed_mps, mps_to_fps(1.0), '.5g')} fps{_cal(s.speed_mps)}",
            )
        )
        rows.append(("  elevation", f"{_pm(s.elevation_rad, rad_to_deg(1.0))}°"))
        rows.append(("  lift coefficient C_L0", _pm(s.lift_coefficient)))
        spin = s.spin_radps_model
        if spin.value is not None:
            rows.append(("  spin (model-based, k = 1)", f"{_pm(spin, radps_to_rpm(1.0), '.4g')} rpm"))
        rows.append(("  residual rms", f"{1e3 * s.residual_rms_m:.3g} mm = {s.residual_rms_sigma:.3g} σ"))
    rows.append(("C_D", f"{_pm(result.drag_coefficient)}{_cal(result.drag_coefficient)}"))
    if result.drag_scale is not None:
        rows.append(("C_D scale (sphere law)", _pm(result.drag_scale)))
    tau = result.spin_decay_time_s
    rows.append(("spin decay τ", f"{_pm(tau)} s" if tau.value is not None else "not determined by the data"))
    st = result.statistics
    rows.append(("residual rms", f"{1e3 * st.residual_rms_m:.3g} mm = {st.residual_rms_sigma:.3g} σ"))
    rows.append(("χ² / dof", f"{st.chi2:.4g} / {st.dof} (error bars ×{st.stderr_scale:.3g})"))
    rows.append(("AIC / BIC", f"{st.aic:.5g} / {st.bic:.5g}"))
    corr = result.correlation
    if corr.shape[0] > 1:
        off = np.abs(corr - np.diag(np.diag(corr)))
        i, j = np.unravel_index(int(np.argmax(off)), off.shape)
        names = result.free_names
        rows.append(
            ("strongest correlation", f"{names[i]} – {names[j]}: {corr[i, j]:+.2f} (all in fit.json)")
        )
    rows.append(("outliers", f"{st.n_outliers} of {st.n_points} points"))
    m = result.spec
    rows.append(("laws", f"drag {m.drag}, lift {m.lift}, decay {m.decay}; loss {result.loss}"))
    rows.append(("converged", "yes" if result.converged else f"NO: {result.reason}"))
    return summary("hopscope fit", rows)


def _mps_fps(v: float) -> str:
    return f"{v:.4g} m/s ({mps_to_fps(v):.4g} fps)"


def run(args: argparse.Namespace) -> int:
    try:
        bb = BB(grams_to_kg(args.mass_g), mm_to_m(args.diameter_mm))
    except ValueError as exc:
        raise ValueError(f"--mass-g/--diameter-mm: {exc}") from None
    air, air_notes = _air(args)
    if args.muzzle_x_m is not None and args.chrono_mps is None:
        raise ValueError("--muzzle-x-m: needs --chrono-mps (it says where the chronograph speed applies)")
    chrono = None
    if args.chrono_mps is not None:
        chrono = ChronoPrior(args.chrono_mps[0], args.chrono_mps[1], args.muzzle_x_m)
    out = Path(args.output)
    if not out.parent.is_dir() and str(out.parent):
        raise ValueError(f"{out}: output folder {out.parent} does not exist")
    shots: list[ShotData] = []
    records = []
    pre_warnings = list(air_notes)
    for path in args.tracks:
        s, rec, w = shots_from_track(path)
        shots += s
        records.append(rec)
        pre_warnings += w
    result = fit_shots(
        shots, bb=bb, air=air, drag=args.drag, lift=args.lift, decay=args.decay, chrono=chrono, loss=args.loss
    )
    if pre_warnings:
        result = replace(result, warnings=tuple(pre_warnings) + result.warnings)
    write_text_atomic(out, fit_to_json(result, inputs=records))
    print(parameter_table(result))
    for line in result.warnings:
        warn(line)
    if chrono is not None:
        print(f"chronograph prior: {_mps_fps(chrono.speed_mps)} ± {chrono.sigma_mps:.2g} m/s")
    print(f"wrote {out}")
    if not result.converged:
        warn(f"the fit did not converge: {result.reason} ({out} says converged: false)")
        return EXIT_UNEXPECTED
    return EXIT_OK
