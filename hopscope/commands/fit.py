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
from pathlib import Path

import numpy as np

from hopscope import options
from hopscope.console import summary, warn
from hopscope.errors import EXIT_OK, EXIT_UNEXPECTED
from hopscope.fitting.estimate import Estimate, FlightFit
from hopscope.pipeline import fit_track_files
from hopscope.shared.units import (
    mps_to_fps,
    rad_to_deg,
    radps_to_rpm,
)

NAME = "fit"
HELP = "fit exit speed, drag, lift and spin decay to tracked shots and write fit.json"
DESCRIPTION = (
    "Fit the flight model (gravity, drag, Magnus lift, spin decay) to one or more track files; shots of "
    "all files share C_D and the spin decay (one BB type). Writes fit.json and prints the parameters with "
    "their standard errors (noise, residual scatter and the calibration's share). Exit code 1 when the "
    "fit does not converge (fit.json then says converged: false and why), 2 for bad input."
)


def register(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("tracks", nargs="+", metavar="TRACK.csv", help="track files (hopscope.track/1)")
    options.add_bb_options(parser)
    options.add_air_options(parser)
    options.add_chrono_options(parser)
    options.add_law_options(parser)
    parser.add_argument("-o", "--output", required=True, metavar="FIT_JSON", help="the fit.json to write")


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
    bb = options.bb_from_args(args)
    air, air_notes = options.air_from_args(args)
    chrono = options.chrono_from_args(args)
    out = Path(args.output)
    if not out.parent.is_dir() and str(out.parent):
        raise ValueError(f"{out}: output folder {out.parent} does not exist")
    result = fit_track_files(
        args.tracks, out, bb=bb, air=air, drag=args.drag, lift=args.lift, decay=args.decay, chrono=chrono,
        loss=args.loss, notes=air_notes,
    ).result  # fmt: skip
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
