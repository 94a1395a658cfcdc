"""``hopscope demo`` end to end on the built-in scenes (demo data, invented), and its bad input.

The truth is the scene's own ``truth.json`` (the renderer flies the BB with the project's flight model,
which has outside checks of its own in tests/fitting). The tolerances are those of the fitter issue:
lane-close speed within 0.15 % and C_D within 2 %; lane-long speed 0.15 %, C_D 1 %, C_L0 3 %, τ 10 %.
Speed is compared with the truth path's speed at the first tracked time.
"""

from __future__ import annotations

import contextlib
import io
import json

import numpy as np
import pytest

from hopscope import cli
from hopscope.commands import demo
from hopscope.errors import EXIT_BAD_INPUT, EXIT_OK
from hopscope.fitting.air import Air
from hopscope.fitting.bb import BB
from hopscope.fitting.fitfile import read_fit
from hopscope.pipeline import FitSettings, fit_track_files
from hopscope.scenes import load_truth
from hopscope.shared.units import celsius_to_kelvin, grams_to_kg, hpa_to_pa, mm_to_m, percent_to_fraction

#: Fitter-issue tolerances (relative to the truth).
CLOSE_SPEED_REL_TOL = 0.0015
CLOSE_CD_REL_TOL = 0.02
LONG_SPEED_REL_TOL = 0.0015
LONG_CD_REL_TOL = 0.01
LONG_CL0_REL_TOL = 0.03
LONG_TAU_REL_TOL = 0.10

DEMO_FILES = ("rig.json", "track.csv", "overlay.png", "fit.json", "report.html")


def _demo(argv: list[str]) -> tuple[int, str, str]:
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        try:
            rc = cli.main(["demo", *argv])
        except SystemExit as exc:
            rc = int(exc.code or 0)
    return rc, out.getvalue(), err.getvalue()


def _comparisons(folder, scene: str) -> dict[str, demo.Comparison]:
    fit = read_fit(folder / "fit.json")
    truth = load_truth(folder / f"scene-{scene}" / "truth.json")
    # read from fit.json (the file users get), independently of demo.compare_with_truth
    shot = fit.data["shots"][0]
    flight = truth["flight"]
    path = flight["path"]
    t = np.asarray(path["t_s"])
    t0 = float(shot["initial"]["t_s"])
    laws = flight["laws"]
    aero = fit.data["aero"]

    def est(d):
        return (None, None) if d is None or d["value"] is None else (d["value"], d["stderr"])

    return {
        "speed": demo.Comparison(
            "speed", "m/s", *est(shot["initial"]["speed_mps"]), float(np.interp(t0, t, path["speed_mps"]))
        ),
        "cd": demo.Comparison("C_D", "", *est(aero["drag_coefficient"]), laws["drag_coefficient"]),
        "cl0": demo.Comparison(
            "C_L0", "", *est(shot["lift_coefficient"]), laws["lift_coefficient"]["first_in_view"]
        ),
        "tau": demo.Comparison("tau", "s", *est(aero["spin_decay_time_s"]), laws["spin_decay_time_s"]),
    }


# ------------------------------------------------------------------------------------------ lane-close


@pytest.fixture(scope="module")
def close(tmp_path_factory):
    folder = tmp_path_factory.mktemp("demo-close")
    first = _demo(["--out", str(folder)])
    fit_text = (folder / "fit.json").read_text()
    second = _demo(["--out", str(folder)])  # the render is cached; calibration, tracking, fit run again
    return {"dir": folder, "first": first, "second": second, "fit_text": fit_text}


@pytest.mark.slow
def test_demo_close_succeeds_and_writes_everything(close):
    rc, out, err = close["first"]
    assert rc == EXIT_OK, err
    for name in DEMO_FILES:
        assert (close["dir"] / name).stat().st_size > 0
    assert not list(close["dir"].rglob("*.partial*"))
    assert "recovered vs true (lane-close, demo data, invented)" in out
    for label in (
        "speed at first point",
        "drag coefficient C_D",
        "lift coefficient C_L0",
        "spin decay time τ",
    ):
        assert label in out
    assert "s CPU" in out and "drop check" in out


@pytest.mark.slow
def test_demo_close_speed_within_tolerance(close):
    c = _comparisons(close["dir"], "lane-close")["speed"]
    assert abs(c.relative_error) < CLOSE_SPEED_REL_TOL


@pytest.mark.slow
def test_demo_close_drag_within_tolerance(close):
    c = _comparisons(close["dir"], "lane-close")["cd"]
    assert abs(c.relative_error) < CLOSE_CD_REL_TOL


@pytest.mark.slow
def test_demo_close_report_has_the_parameter_table(close):
    html = (close["dir"] / "report.html").read_text(encoding="utf-8")
    assert "demo data, invented" in html
    for needle in ("C_D", 'href="overlay.png"', 'href="fit.json"'):
        assert needle in html


@pytest.mark.slow
def test_demo_is_deterministic(close):
    rc, _, err = close["second"]
    assert rc == EXIT_OK, err
    assert (close["dir"] / "fit.json").read_text() == close["fit_text"]


@pytest.mark.slow
def test_demo_fit_step_repeats_exactly(close, tmp_path):
    """The fit step alone, with the BB and air parsed from the demo's own command line, gives fit.json."""
    d = close["dir"]
    rendered_truth = load_truth(d / "scene-lane-close" / "truth.json")

    class _R:  # the parts of RenderedScene that run_argv reads
        truth = rendered_truth
        flight_clip_path = d / "scene-lane-close" / "flight.mp4"

    args = demo.parse_run_argv(demo.run_argv(_R, d / "rig.json", d))
    bb = BB(grams_to_kg(args.mass_g), mm_to_m(args.diameter_mm))
    air = Air.from_conditions(
        celsius_to_kelvin(args.temp_c), hpa_to_pa(args.pressure_hpa), percent_to_fraction(args.humidity_pct)
    )
    assert bb.mass_kg == pytest.approx(rendered_truth["flight"]["bb"]["mass_kg"], rel=1e-15)
    fit_track_files([d / "track.csv"], tmp_path / "fit.json", FitSettings(bb, air))
    assert json.loads((tmp_path / "fit.json").read_text()) == json.loads(close["fit_text"])


# ------------------------------------------------------------------------------------------ lane-long


@pytest.mark.slow
def test_demo_long_recovers_speed_drag_lift_and_decay(tmp_path):
    rc, _, err = _demo(["--scene", "lane-long", "--out", str(tmp_path)])
    assert rc == EXIT_OK, err
    c = _comparisons(tmp_path, "lane-long")
    assert abs(c["speed"].relative_error) < LONG_SPEED_REL_TOL
    assert abs(c["cd"].relative_error) < LONG_CD_REL_TOL
    assert abs(c["cl0"].relative_error) < LONG_CL0_REL_TOL
    assert c["tau"].recovered is not None and abs(c["tau"].relative_error) < LONG_TAU_REL_TOL


# ------------------------------------------------------------------------------------------ bad input


def test_demo_unknown_scene(tmp_path):
    rc, _, err = _demo(["--scene", "lane-nowhere", "--out", str(tmp_path / "d")])
    assert rc == EXIT_BAD_INPUT and "--scene" in err and len(err.strip().splitlines()) == 1
    assert not (tmp_path / "d").exists()


def test_demo_out_is_a_file(tmp_path):
    taken = tmp_path / "taken"
    taken.write_text("mine")
    rc, _, err = _demo(["--out", str(taken)])
    assert rc == EXIT_BAD_INPUT and "taken" in err and len(err.strip().splitlines()) == 1
    assert "Traceback" not in err and taken.read_text() == "mine"


def test_demo_seed_not_a_number(tmp_path):
    rc, _, err = _demo(["--seed", "lucky", "--out", str(tmp_path / "d")])
    assert rc == EXIT_BAD_INPUT and "--seed" in err and len(err.strip().splitlines()) == 1
    assert not (tmp_path / "d").exists()


def test_run_argv_round_trips_the_truth_through_the_cli_units(tmp_path):
    truth = {
        "camera": {"readout_s": 3.6e-3, "exposure_s": 1.0e-3},
        "flight": {
            "bb": {"mass_kg": 2.5e-4, "diameter_m": 5.95e-3},
            "air": {"temperature_k": 288.15, "pressure_pa": 99800.0, "relative_humidity": 0.7},
            "path": {"z_m": [0.002, 0.004]},
        },
    }

    class _R:
        flight_clip_path = tmp_path / "flight.mp4"

    _R.truth = truth
    args = demo.parse_run_argv(demo.run_argv(_R, tmp_path / "rig.json", tmp_path))
    assert grams_to_kg(args.mass_g) == pytest.approx(2.5e-4, rel=1e-15)
    assert mm_to_m(args.diameter_mm) == pytest.approx(5.95e-3, rel=1e-15)
    assert celsius_to_kelvin(args.temp_c) == pytest.approx(288.15, rel=1e-15)
    assert hpa_to_pa(args.pressure_hpa) == pytest.approx(99800.0, rel=1e-15)
    assert percent_to_fraction(args.humidity_pct) == pytest.approx(0.7, rel=1e-15)
    assert args.readout_ms == pytest.approx(3.6) and args.exposure_ms == pytest.approx(1.0)
    assert args.fps is None  # the frame rate comes from the container
    assert demo.flight_line_offset_mm(truth) == pytest.approx(3.0)
