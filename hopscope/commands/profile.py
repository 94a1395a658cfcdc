"""``hopscope profile``: pool shots of one BB type into a local drag/lift profile for simulators.

Shots at different speeds (track files, any number of shots each) → C_D per Reynolds-number bin and each
shot's lift coefficient, with uncertainties (:func:`fitting.profile.build_profile`). Writes
``PROFILE.json`` (schema ``hopscope.profile/1``) and a CSV with the same rows beside it.
"""

from __future__ import annotations

import argparse

from hopscope import options
from hopscope.console import summary, warn
from hopscope.fitting.profile import DEFAULT_BINS, build_profile, profile_to_csv, profile_to_json
from hopscope.folders import check_output_file
from hopscope.inputs import marked_shot_spins, shots_from_tracks
from hopscope.shared.fileio import atomic_path
from hopscope.summaries import profile_rows

NAME = "profile"
HELP = "pool shots of one BB type into a drag/lift profile (C_D vs Reynolds number, C_L per shot)"
DESCRIPTION = (
    "Fit shots of one BB type at different speeds and write its local aerodynamic profile: C_D per "
    "Reynolds-number bin and each shot's lift coefficient, with standard errors, as JSON and CSV that a "
    "trajectory simulator can load. The spin ratio is given only where the spin is known (measured, or "
    "model-based under --assumed-lift-k)."
)


def register(parser: argparse.ArgumentParser) -> None:
    options.add_track_inputs(parser)
    parser.add_argument(
        "--bins",
        type=int,
        default=DEFAULT_BINS,
        help=f"Reynolds-number bins for C_D (equal shot counts; default {DEFAULT_BINS})",
    )
    parser.add_argument(
        "--assumed-lift-k",
        type=options.positive_float,
        metavar="K",
        help="give spin ratios S = C_L/K under the linear law (model-based, marked as such)",
    )
    parser.add_argument("--label", default="", help="name of the BB type, written into the files")
    parser.add_argument(
        "-o",
        "--output",
        required=True,
        metavar="PROFILE_JSON",
        help="the profile JSON to write (the CSV goes beside it, same name, .csv)",
    )


def measured_spin_radps(records) -> dict[str, float]:
    """Spin (rad/s) from the brightness flicker of each shot of the marked-BB tracks (polarity ``marked``),
    by shot label: at the first tracked point where the flicker shows the decay, else over the shot's few
    milliseconds. A shot whose flicker gives no rate (aliased without a prior, too short, no significant
    flicker) is left out with a warning saying why."""
    out: dict[str, float] = {}
    for label, spin in marked_shot_spins(records).items():
        if spin.rate_radps is None:
            warn(f"{label}: spin not measured from the marked BB's flicker: {spin.reason}")
        else:
            out[label] = spin.rate_radps
    return out


def run(args: argparse.Namespace) -> int:
    out = check_output_file(args.output)
    if out.suffix.lower() != ".json":
        raise ValueError(f"{out}: -o must name a .json file (the .csv is written beside it)")
    if args.bins < 1:
        raise ValueError(f"--bins: expected a positive number of bins, got {args.bins}")
    bb = options.bb_from_args(args)
    air, notes = options.air_from_args(args)
    tracks = shots_from_tracks(args.tracks)
    shots = list(tracks.shots)
    if len(shots) < 2:
        raise ValueError(f"{', '.join(args.tracks)}: a profile needs at least two shots, found {len(shots)}")
    spins = measured_spin_radps(tracks.records)
    prof = build_profile(
        shots,
        bb=bb,
        air=air,
        label=args.label,
        n_bins=min(args.bins, len(shots)),
        spin_radps=[spins.get(s.label) for s in shots],
        assumed_lift_k=args.assumed_lift_k,
        tolerance=options.bb_tolerance_from_args(args, bb),
    )
    csv_path = out.with_suffix(".csv")
    with atomic_path(out) as tmp_json, atomic_path(csv_path) as tmp_csv:
        tmp_json.write_text(profile_to_json(prof), encoding="utf-8")
        tmp_csv.write_text(profile_to_csv(prof), encoding="utf-8")
    for w in (*notes, *tracks.warnings, *prof.warnings):
        warn(w)
    rows = profile_rows(prof, n_shots=len(shots), n_files=len(args.tracks), written=(out, csv_path))
    print(summary("hopscope profile", rows))
    return 0
