"""``hopscope demo``: the whole job on a built-in synthetic scene (demo data, invented), no data needed.

Renders the scene (cached in ``DIR/scene-<name>``), calibrates from its lens and plane views (and the drop
clip's g / level check; the BB flies a few mm in front of the board, which a user would tape and enter as
the calibration's parallax, ±0.5 mm), then runs ``hopscope run`` on its flight clip with the options a user would type:
the scene's readout and exposure in ms, the BB's mass in g and diameter in mm, the air's temperature in
°C, pressure in hPa and humidity in % (the frame rate comes from the container). Nothing from the truth
reaches the stages except through those options. Finally it prints the recovered values beside the true
ones: speed and elevation at the first tracked point, C_D, C_L0 and τ, each with the fit's ±σ and the
deviation in σ units, plus the wall and CPU time.

Outputs in DIR: ``rig.json``, ``track.csv``, ``overlay.png``, ``fit.json``, ``report.html`` and the
scene's folder. Exit codes as for ``hopscope run``.
"""

from __future__ import annotations

import argparse
import math
import time
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from hopscope.commands import run as run_command
from hopscope.commands.calibrate import summary_rows as calibration_rows
from hopscope.console import progress, summary, warn
from hopscope.fitting.estimate import Estimate
from hopscope.pipeline import RIG_NAME, calibrate_scene
from hopscope.scenes import builtin_scene, render_scene
from hopscope.shared.units import (
    fraction_to_percent,
    kelvin_to_celsius,
    kg_to_grams,
    m_to_mm,
    pa_to_hpa,
    rad_to_deg,
    s_to_ms,
)

NAME = "demo"
HELP = "render a built-in demo scene (invented data) and run the whole job on it: recovered vs true values"
DESCRIPTION = (
    "On a fresh install with no data: render a built-in synthetic scene (demo data, invented), calibrate "
    "from its grid views, track its flight clip, fit, write the report, and print the recovered values "
    "beside the true ones."
)

#: Scenes the demo offers (the built-in lanes with a flight clip the default laws describe).
DEMO_SCENES = ("lane-close", "lane-long")
DEFAULT_SCENE = "lane-close"
DEFAULT_OUT = "hopscope-demo"

#: Uncertainty of the taped distance between the board and the flight line, mm (the demo enters it as
#: ``--parallax-sigma-mm``). # common practice, no published source
PARALLAX_SIGMA_MM = 0.5


@dataclass(frozen=True)
class Comparison:
    """One recovered quantity beside its true value (user units).

    Attributes
    ----------
    name, unit : what and in which unit.
    recovered, stderr : the fit's value and standard error (None when not determined).
    truth : the scene's true value.
    """

    name: str
    unit: str
    recovered: float | None
    stderr: float | None
    truth: float

    @property
    def relative_error(self) -> float | None:
        """(recovered − truth) / truth, or None."""
        if self.recovered is None or self.truth == 0:
            return None
        return (self.recovered - self.truth) / self.truth

    @property
    def deviation_sigma(self) -> float | None:
        """(recovered − truth) / σ, or None."""
        if self.recovered is None or not self.stderr:
            return None
        return (self.recovered - self.truth) / self.stderr


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
    argv = [
        str(rendered.flight_clip_path),
        "--rig",
        str(rig_path),
        "--mass-g",
        repr(kg_to_grams(float(bb["mass_kg"]))),
        "--diameter-mm",
        repr(m_to_mm(float(bb["diameter_m"]))),
        "--temp-c",
        repr(kelvin_to_celsius(float(air["temperature_k"]))),
        "--pressure-hpa",
        repr(pa_to_hpa(float(air["pressure_pa"]))),
        "--humidity-pct",
        repr(fraction_to_percent(float(air["relative_humidity"]))),
        "--readout-ms",
        repr(s_to_ms(float(cam["readout_s"]))),
        "--exposure-ms",
        repr(s_to_ms(float(cam["exposure_s"]))),
        "--out",
        str(out),
    ]
    return argv


def parse_run_argv(argv: list[str]) -> argparse.Namespace:
    """Parse a ``hopscope run`` command line with the run command's own option definitions."""
    parser = argparse.ArgumentParser(prog="hopscope run", add_help=False)
    run_command.register(parser)
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


def comparison_rows(rows: list[Comparison]) -> list[tuple[str, str]]:
    """Lines of the recovered-vs-true table."""
    out = []
    for c in rows:
        unit = f" {c.unit}" if c.unit else ""
        if c.recovered is None:
            out.append((c.name, f"not determined (true {c.truth:.6g}{unit})"))
            continue
        sig = "± ?" if c.stderr is None else f"± {c.stderr:.2g}"
        rel = "" if c.relative_error is None else f", {100 * c.relative_error:+.3f} %"
        dev = "" if c.deviation_sigma is None else f", {c.deviation_sigma:+.2f} σ"
        out.append((c.name, f"{c.recovered:.6g} {sig}{unit}  true {c.truth:.6g}{unit}{rel}{dev}"))
    return out


def run(args: argparse.Namespace) -> int:
    wall0, cpu0 = time.perf_counter(), time.process_time()
    out = Path(args.out)
    if out.exists() and not out.is_dir():
        raise ValueError(f"--out {out}: exists and is not a folder")
    spec = builtin_scene(args.scene)
    out.mkdir(parents=True, exist_ok=True)
    bars = _StageBars()
    try:
        rendered = render_scene(spec, out / f"scene-{args.scene}", rng=args.seed, progress=bars)
    finally:
        bars.close()
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
    for w in cal.rig.warnings:
        warn(w)
    t_cal = time.perf_counter() - wall0 - t_render
    print(summary(f"calibration ({args.scene}, demo data, invented): {rig_path}", calibration_rows(cal)))
    run_args = parse_run_argv(run_argv(rendered, rig_path, out))
    outcome = run_command.execute(run_args, title=f"hopscope demo: {args.scene} (demo data, invented)")
    t_run = time.perf_counter() - wall0 - t_render - t_cal
    code = run_command.report_outcome(outcome, title=f"hopscope demo: {args.scene}")
    rows = comparison_rows(compare_with_truth(outcome.fitted.result, rendered.truth))
    rows.append(
        (
            "time",
            f"{time.perf_counter() - wall0:.1f} s wall (render {t_render:.1f}, calibrate {t_cal:.1f}, "
            f"track+fit+report {t_run:.1f}), {time.process_time() - cpu0:.1f} s CPU",
        )
    )
    print(summary(f"recovered vs true ({args.scene}, demo data, invented)", rows))
    return code
