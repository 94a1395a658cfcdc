"""``hopscope demo``: the whole job on a built-in synthetic scene (demo data, invented), no data needed.

Renders the scene (cached in ``DIR/scene-<name>``), calibrates from its lens and plane views (and the drop
clip's g / level check; the BB flies a few mm in front of the board, which a user would tape and enter as
the calibration's parallax, ±0.5 mm), then runs ``hopscope run`` on its flight clip with the options a user would type:
the scene's readout and exposure in ms, the BB's mass in g and diameter in mm, the air's temperature in
°C, pressure in hPa and humidity in % (the frame rate comes from the container). Nothing from the truth
reaches the stages except through those options. Finally it prints the recovered values beside the true
ones: speed and elevation at the first tracked point, C_D, C_L0 and τ, each with the fit's ±σ and the
deviation in σ units, plus the wall and CPU time.

Outputs in DIR: ``rig.json``, ``track.csv``, ``overlay.png``, ``fit.json``, ``report.html`` (with its
figures) and the scene's folder; DIR is held like a run's folder (lock, manifest of what was written:
:mod:`hopscope.folders`). A render that fails or is interrupted removes its half-written scene folder.
Exit codes as for ``hopscope run``; Ctrl-C exits 130.
"""

from __future__ import annotations

import argparse
import json
import math
import shutil
import time
from collections.abc import Iterator
from pathlib import Path

import numpy as np

from hopscope import options
from hopscope.console import progress, summary, warn
from hopscope.errors import EXIT_OK, EXIT_UNEXPECTED
from hopscope.fitting.estimate import Estimate
from hopscope.folders import run_folder
from hopscope.pipeline import RIG_NAME, calibrate_scene, run_to_folder
from hopscope.scenes import builtin_scene, render_scene
from hopscope.shared.units import (
    fraction_to_percent,
    kelvin_to_celsius,
    kg_to_grams,
    m_to_mm,
    pa_to_hpa,
    rad_to_deg,
    radps_to_rpm,
    s_to_ms,
)
from hopscope.summaries import Comparison, calibration_rows, comparison_rows, show_run

NAME = "demo"
HELP = "render a built-in demo scene (invented data) and run the whole job on it: recovered vs true values"
DESCRIPTION = (
    "On a fresh install with no data: render a built-in synthetic scene (demo data, invented), calibrate "
    "from its grid views, track its flight clip, fit, write the report, and print the recovered values "
    "beside the true ones."
)

#: Scenes the demo offers (the built-in lanes with a flight clip the default laws describe).
DEMO_SCENES = ("lane-close", "lane-long", "lane-spin", "lane-spin-aliased")
DEFAULT_SCENE = "lane-close"
DEFAULT_OUT = "hopscope-demo"

#: Uncertainty of the taped distance between the board and the flight line, mm (the demo enters it as
#: ``--parallax-sigma-mm``). # common practice, no published source
PARALLAX_SIGMA_MM = 0.5


__all__ = ["Comparison"]  # the recovered-vs-true row, defined with its presenter


def register(parser: argparse.ArgumentParser) -> None:
    parser.add_argument(
        "--out", default=DEFAULT_OUT, metavar="DIR", help=f"output folder (default ./{DEFAULT_OUT})"
    )
    parser.add_argument(
        "--scene",
        choices=DEMO_SCENES,
        default=DEFAULT_SCENE,
        help=f"built-in scene (default {DEFAULT_SCENE})",
    )
    parser.add_argument(
        "--seed", type=int, default=0, help="seed of the rendering and calibration (default 0)"
    )


class _StageBars:
    """Adapts the renderer's ``progress(stage, done, total)`` callback to one progress bar per stage."""

    def __init__(self) -> None:
        self._stage: str | None = None
        self._bar: Iterator[int] | None = None

    def __call__(self, stage: str, done: int, total: int) -> None:
        if stage != self._stage:
            self.close()
            self._stage = stage
            unit = "frame" if "clip" in stage else "image"
            self._bar = iter(progress(range(total), total=total, desc=f"rendering {stage}", unit=unit))
        if self._bar is not None:
            next(self._bar, None)
            if done >= total:
                self.close()

    def close(self) -> None:
        if self._bar is not None:
            for _ in self._bar:  # finish (and close) the bar
                pass
        self._bar, self._stage = None, None


def flight_line_offset_mm(truth: dict) -> float:
    """How far in front of the board the BB flew, mm, as a user would tape it: the mean distance of the
    visible flight path from the board's plane (``--parallax-mm`` of the calibration)."""
    return m_to_mm(float(np.mean(np.asarray(truth["flight"]["path"]["z_m"], float))))


def run_argv(rendered, rig_path: Path, out: Path) -> list[str]:
    """The ``hopscope run`` command line a user would type for the scene's flight clip.

    SI values of the truth are written in the CLI's units (g, mm, °C, hPa, %, ms) with ``repr`` (shortest
    round-trip text), so the command's own parsing turns them back into SI exactly as for a user.
    """
    flight = rendered.truth["flight"]
    cam = rendered.truth["camera"]
    bb, air = flight["bb"], flight["air"]
    given = {
        "--rig": str(rig_path),
        "--mass-g": kg_to_grams(float(bb["mass_kg"])),
        "--diameter-mm": m_to_mm(float(bb["diameter_m"])),
        "--temp-c": kelvin_to_celsius(float(air["temperature_k"])),
        "--pressure-hpa": pa_to_hpa(float(air["pressure_pa"])),
        "--humidity-pct": fraction_to_percent(float(air["relative_humidity"])),
        "--readout-ms": s_to_ms(float(cam["readout_s"])),
        "--exposure-ms": s_to_ms(float(cam["exposure_s"])),
        "--out": str(out),
    }
    argv = [str(rendered.flight_clip_path)]
    for option, value in given.items():
        argv += [option, value if isinstance(value, str) else repr(value)]
    return argv


def parse_run_argv(argv: list[str]) -> argparse.Namespace:
    """Parse a ``hopscope run`` command line with the run command's own option definitions."""
    parser = argparse.ArgumentParser(prog="hopscope run", add_help=False)
    options.add_run_options(parser)
    return parser.parse_args(argv)


def _est(e: Estimate | None, scale: float = 1.0) -> tuple[float | None, float | None]:
    if e is None or e.value is None:
        return None, None
    return e.value * scale, None if e.stderr is None else e.stderr * scale


def compare_with_truth(fit, truth: dict) -> list[Comparison]:
    """Recovered vs true values for the first shot of ``fit`` (a :class:`fitting.estimate.FlightFit`).

    The true speed and elevation are read off the truth's path samples (every 0.1 ms) at the first tracked
    time, by linear interpolation of the sampled speed and of the path's finite-difference direction.
    """
    flight = truth["flight"]
    laws = flight["laws"]
    path = flight["path"]
    shot = fit.shots[0]
    t = np.asarray(path["t_s"], float)
    t0 = float(shot.t0_s)
    true_speed = float(np.interp(t0, t, np.asarray(path["speed_mps"], float)))
    vx = np.gradient(np.asarray(path["x_m"], float), t)
    vy = np.gradient(np.asarray(path["y_m"], float), t)
    true_elev = rad_to_deg(math.atan2(float(np.interp(t0, t, vy)), float(np.interp(t0, t, vx))))
    return [
        Comparison("speed at first point", "m/s", *_est(shot.speed_mps), true_speed),
        Comparison("elevation at first point", "deg", *_est(shot.elevation_rad, rad_to_deg(1.0)), true_elev),
        Comparison("drag coefficient C_D", "", *_est(fit.drag_coefficient), float(laws["drag_coefficient"])),
        Comparison(
            "lift coefficient C_L0",
            "",
            *_est(shot.lift_coefficient),
            float(laws["lift_coefficient"]["first_in_view"]),
        ),
        Comparison("spin decay time τ", "s", *_est(fit.spin_decay_time_s), float(laws["spin_decay_time_s"])),
    ]


def render_into(spec, folder: Path, *, seed: int):
    """Render the scene into ``folder`` (a cache hit when it is complete); a render that fails or is
    interrupted removes the folder again, so no half-rendered scene is left behind.

    A scene folder is complete when it holds ``truth.json``: the renderer removes it before rendering and
    writes it last (atomically).
    """
    bars = _StageBars()
    try:
        return render_scene(spec, folder, rng=seed, progress=bars)
    except BaseException:
        if not (folder / "truth.json").is_file():
            shutil.rmtree(folder, ignore_errors=True)
        raise
    finally:
        bars.close()


def measured_spin_rows(fit_path: Path, truth) -> list[tuple[str, str]]:
    """Rows for the shots with a measured spin (marked BB) against the scene's true spin at the same time,
    in rad/s and rpm."""
    frames = [f for f in truth["flight"]["frames"] if f["visible"]]
    t_true = np.array([f["t_mid_s"] for f in frames])
    w_true = np.array([f["spin_radps"] for f in frames])
    rows = []
    for shot in json.loads(Path(fit_path).read_text(encoding="utf-8"))["shots"]:
        sm = shot.get("spin_measured")
        if sm is None:
            continue
        value, err = sm["rate_radps"]["value"], sm["rate_radps"]["stderr"]
        if value is None:
            rows.append(("spin (measured)", f"none: {sm['reason']}"))
            continue
        true = float(np.interp(sm["at_t_s"], t_true, w_true))
        rows.append(
            (
                "spin (measured)",
                f"{value:.0f} ± {err:.0f} rad/s = {radps_to_rpm(value):.0f} ± {radps_to_rpm(err):.0f} rpm "
                f"at t = {s_to_ms(sm['at_t_s']):.2f} ms  true {true:.0f} rad/s, "
                f"{fraction_to_percent(value / true - 1.0):+.2f} %, {(value - true) / err:+.2f} σ",
            )
        )
    return rows


def run(args: argparse.Namespace) -> int:
    wall0, cpu0 = time.perf_counter(), time.process_time()
    out = Path(args.out)
    spec = builtin_scene(args.scene)
    with run_folder(out, on_warning=warn) as folder:
        rendered = render_into(spec, out / f"scene-{args.scene}", seed=args.seed)
        if rendered.flight_clip_path is None:  # pragma: no cover - the demo scenes all have a flight clip
            raise ValueError(f"scene {args.scene}: has no flight clip")
        t_render = time.perf_counter() - wall0
        rig_path = out / RIG_NAME
        cal = calibrate_scene(
            rendered,
            rig_path,
            seed=args.seed,
            parallax_mm=flight_line_offset_mm(rendered.truth),
            parallax_sigma_mm=PARALLAX_SIGMA_MM,
            progress=lambda items: progress(items, desc="lens views", unit="view"),
        )
        folder.own(rig_path)
        for w in cal.rig.warnings:
            warn(w)
        t_cal = time.perf_counter() - wall0 - t_render
        print(summary(f"calibration ({args.scene}, demo data, invented): {rig_path}", calibration_rows(cal)))
        request = options.run_request(
            parse_run_argv(run_argv(rendered, rig_path, out)),
            title=f"hopscope demo: {args.scene} (demo data, invented)",
        )
        outcome = run_to_folder(request, folder=folder, on_warning=warn)
    t_run = time.perf_counter() - wall0 - t_render - t_cal
    show_run(outcome, f"hopscope demo: {args.scene}")
    rows = comparison_rows(compare_with_truth(outcome.fitted.result, rendered.truth))
    rows += measured_spin_rows(outcome.fitted.fit_path, rendered.truth)
    rows.append(
        (
            "time",
            f"{time.perf_counter() - wall0:.1f} s wall (render {t_render:.1f}, calibrate {t_cal:.1f}, "
            f"track+fit+report {t_run:.1f}), {time.process_time() - cpu0:.1f} s CPU",
        )
    )
    print(summary(f"recovered vs true ({args.scene}, demo data, invented)", rows))
    return EXIT_OK if outcome.fitted.result.converged else EXIT_UNEXPECTED
