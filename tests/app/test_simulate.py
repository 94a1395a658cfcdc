"""``hopscope simulate``: the path CSV, its header and summary, the fit.json reader and bad input."""

from __future__ import annotations

import functools
import json
import math
import re

import numpy as np
import pytest

from hopscope.cli import main
from hopscope.fitting.air import Air, moist_air_density
from hopscope.fitting.bb import BB
from hopscope.fitting.estimate import fit_shots
from hopscope.fitting.fitfile import fit_to_json
from hopscope.fitting.observe import ModelSpec, simulate_shot
from hopscope.shared.constants import STANDARD_GRAVITY_MPS2

PARABOLA_TOL_M = 1e-6
TIME_TOL_S = 1e-8  # CSV writes t_s to 1e-9 s
COLUMNS = ["t_s", "x_m", "y_m", "z_m", "speed_mps", "spin_radps", "energy_j"]

BASE = [
    "--mass-g",
    "0.25",
    "--speed-mps",
    "100",
    "--elevation-deg",
    "1",
    "--cd",
    "0.45",
    "--lift-coefficient",
    "0.01",
]


def _read_path(path):
    lines = path.read_text(encoding="utf-8").splitlines()
    header = [ln for ln in lines if ln.startswith("#")]
    body = [ln for ln in lines if not ln.startswith("#")]
    names = body[0].split(",")
    data = np.array([[float(v) for v in ln.split(",")] for ln in body[1:]])
    return header, {n: data[:, i] for i, n in enumerate(names)}


def _run(capsys, argv):
    rc = main(["simulate", *argv])
    out, err = capsys.readouterr()
    return rc, out, err


def test_writes_path_with_header_and_summary(tmp_path, capsys):
    out_csv = tmp_path / "path.csv"
    rc, out, err = _run(capsys, [*BASE, "--spin-decay-s", "3", "--range-m", "30", "-o", str(out_csv)])
    assert rc == 0, err
    header, cols = _read_path(out_csv)
    for name in COLUMNS:
        assert name in cols
    text = "\n".join(header)
    rho = moist_air_density(293.15, 101325.0, 0.5)
    assert f"density {rho:.5f} kg/m3" in text
    assert "law drag: constant" in text and "law lift: linear" in text and "law decay: exponential" in text
    assert "tau = 3 s" in text
    # starts at the origin with the given speed; ends exactly at the range
    assert cols["t_s"][0] == 0.0 and cols["x_m"][0] == 0.0 and cols["speed_mps"][0] == pytest.approx(100.0)
    assert cols["x_m"][-1] == pytest.approx(30.0, abs=1e-6)
    assert np.all(np.diff(cols["t_s"]) > 0)
    # energy column is ½ m v² (translational), and spin decays as exp(−t/τ)
    np.testing.assert_allclose(cols["energy_j"], 0.5 * 2.5e-4 * cols["speed_mps"] ** 2, rtol=1e-5)
    np.testing.assert_allclose(
        cols["spin_radps"], cols["spin_radps"][0] * np.exp(-cols["t_s"] / 3.0), rtol=1e-5
    )
    # summary: muzzle energy in J, speeds also in fps, time of flight and drop at range
    assert "muzzle energy    1.250 J" in out
    assert "(328 fps)" in out
    assert f"{cols['t_s'][-1]:.3f} s to 30 m" in out
    drop = -cols["y_m"][-1]
    assert f"{abs(drop):.3f} m {'below' if drop >= 0 else 'above'} launch height" in out
    assert err == ""


def test_vacuum_path_is_the_parabola(tmp_path, capsys):
    # No drag, no lift: the projectile parabola y = x tanθ − g x² / (2 v² cos²θ), t = x / (v cosθ)
    # (Galileo; e.g. Halliday, Resnick & Walker, *Fundamentals of Physics*, projectile motion).
    out_csv = tmp_path / "vac.csv"
    v, el = 80.0, 5.0
    argv = [
        "--mass-g",
        "0.3",
        "--speed-mps",
        str(v),
        "--elevation-deg",
        str(el),
        "--cd",
        "0",
        "--lift-coefficient",
        "0",
    ]
    rc, _, err = _run(capsys, [*argv, "--range-m", "40", "-o", str(out_csv)])
    assert rc == 0, err
    _, cols = _read_path(out_csv)
    th = math.radians(el)
    x = cols["x_m"]
    y_ref = x * math.tan(th) - STANDARD_GRAVITY_MPS2 * x**2 / (2 * v**2 * math.cos(th) ** 2)
    np.testing.assert_allclose(cols["y_m"], y_ref, atol=PARABOLA_TOL_M)
    assert cols["t_s"][-1] == pytest.approx(40.0 / (v * math.cos(th)), abs=TIME_TOL_S)


def test_stops_at_the_ground_with_a_warning(tmp_path, capsys):
    out_csv = tmp_path / "ground.csv"
    argv = [*BASE[:4], "--elevation-deg", "-2", *BASE[6:], "--muzzle-height-m", "1.0", "-o", str(out_csv)]
    rc, out, err = _run(capsys, argv)
    assert rc == 0
    header, cols = _read_path(out_csv)
    assert cols["y_m"][-1] == pytest.approx(-1.0, abs=1e-9)
    assert cols["x_m"][-1] < 60.0
    assert any(h.startswith("# warning: the BB reached the ground") for h in header)
    assert err.startswith("warning: the BB reached the ground")
    assert "range 60 m not reached" in out


def test_crosswind_drifts_the_path_downwind(tmp_path, capsys):
    out_csv = tmp_path / "wind.csv"
    rc, out, _ = _run(capsys, [*BASE, "--crosswind-mps", "3", "--range-m", "20", "-o", str(out_csv)])
    assert rc == 0
    _, cols = _read_path(out_csv)
    assert cols["z_m"][-1] > 0.01
    assert "drift at range" in out


FIT_SPEED_MPS = 95.0
FIT_ELEVATION_DEG = 0.5
FIT_CL = 0.012
FIT_CD = 0.42
FIT_TAU_S = 2.5


@functools.cache
def _fit_text(n_shots: int = 1) -> str:
    """A real fit.json: the fitter run on a noise-free simulated 15 m track (so it recovers the inputs)."""
    spec = ModelSpec(BB(2.8e-4), Air.from_conditions(293.15, 101325.0, 0.5))
    shots = [simulate_shot(
        spec, t_s=np.linspace(0.01, 0.2, 120), speed_mps=FIT_SPEED_MPS,
        elevation_rad=math.radians(FIT_ELEVATION_DEG), lift_coefficient=FIT_CL, drag_param=FIT_CD,
        decay_param=1.0 / FIT_TAU_S, sigma_m=1e-4, rng=None, label=f"sim#{i}",
    ) for i in range(n_shots)]  # fmt: skip
    return fit_to_json(fit_shots(shots, bb=spec.bb, air=spec.air))


def _fit_doc(n_shots: int = 1) -> dict:
    return json.loads(_fit_text(n_shots))


def test_fit_json_drives_the_simulation(tmp_path, capsys):
    fit = tmp_path / "fit.json"
    fit.write_text(json.dumps(_fit_doc()), encoding="utf-8")
    out_csv = tmp_path / "from_fit.csv"
    rc, out, err = _run(capsys, ["--fit", str(fit), "--range-m", "25", "-o", str(out_csv)])
    assert rc == 0, err
    header, cols = _read_path(out_csv)
    text = "\n".join(header)
    rho = _fit_doc()["air"]["density_kgm3"]
    assert f"density {rho:.5f} kg/m3" in text and "C_D = 0.42" in text and "tau = 2.5 s" in text
    assert cols["speed_mps"][0] == pytest.approx(FIT_SPEED_MPS)
    assert math.degrees(math.atan2(cols["y_m"][1], cols["x_m"][1])) == pytest.approx(0.5, abs=0.05)
    v0 = _fit_doc()["shots"][0]["initial"]["speed_mps"]["value"]
    assert f"{0.5 * 2.8e-4 * v0**2:.3f} J" in out


def test_fit_json_without_decay_time_warns(tmp_path, capsys):
    fit = tmp_path / "fit.json"
    doc = _fit_doc()
    doc["aero"]["spin_decay_time_s"]["value"] = None
    doc["aero"]["spin_decay_time_s"]["stderr"] = None
    fit.write_text(json.dumps(doc), encoding="utf-8")
    out_csv = tmp_path / "p.csv"
    rc, _, err = _run(capsys, ["--fit", str(fit), "--range-m", "10", "-o", str(out_csv)])
    assert rc == 0
    header, _ = _read_path(out_csv)
    assert any("could not determine the spin decay time" in h for h in header if h.startswith("# warning:"))
    assert "warning:" in err


def _mutate(doc, key, value):
    node = doc
    parts = key.split(".")
    for p in parts[:-1]:
        node = node[int(p)] if isinstance(node, list) else node[p]
    if value is _DELETE:
        del node[parts[-1]]
    else:
        node[parts[-1]] = value


_DELETE = object()


@pytest.mark.parametrize(
    ("key", "value", "match"),
    [
        ("schema", "hopscope.fit/2", r"fit\.json: key schema: expected 'hopscope.fit/1'"),
        ("aero.drag_coefficient", _DELETE, r"fit\.json: key aero\.drag_coefficient"),
        ("shots.0.initial.speed_mps.value", float("nan"), r"fit\.json: key shots\[0\]\.initial\.speed_mps"),
        ("air.density_kgm3", float("inf"), r"fit\.json: key air\.density_kgm3"),
        ("bb.mass_kg", "heavy", r"fit\.json: key bb\.mass_kg"),
        ("bb.diameter_m", -1.0, r"fit\.json: .*diameter"),
        (
            "shots.0.lift_coefficient.value",
            None,
            r"fit\.json: key shots\[0\]\.lift_coefficient\.value: expected a finite",
        ),
        (
            "shots.0.initial.speed_mps.value",
            400.0,
            r"fit\.json: shots\[0\]\.initial\.speed_mps\.value: 400 m/s",
        ),
    ],
)
def test_bad_fit_json_is_one_line_exit_2(tmp_path, capsys, key, value, match):
    doc = _fit_doc()
    _mutate(doc, key, value)
    fit = tmp_path / "fit.json"
    fit.write_text(json.dumps(doc), encoding="utf-8")  # json writes NaN/Infinity literals for nan/inf
    out_csv = tmp_path / "p.csv"
    rc, _, err = _run(capsys, ["--fit", str(fit), "-o", str(out_csv)])
    assert rc == 2
    assert len(err.strip().splitlines()) == 1 and "Traceback" not in err
    assert re.search(match, err), err
    assert not out_csv.exists()
    assert list(tmp_path.iterdir()) == [fit]


def test_fit_json_not_json(tmp_path, capsys):
    fit = tmp_path / "fit.json"
    fit.write_text("{not json", encoding="utf-8")
    rc, _, err = _run(capsys, ["--fit", str(fit), "-o", str(tmp_path / "p.csv")])
    assert rc == 2 and "fit.json" in err and "JSON" in err and len(err.strip().splitlines()) == 1


def test_fit_json_missing_file(tmp_path, capsys):
    rc, _, err = _run(capsys, ["--fit", str(tmp_path / "nope.json"), "-o", str(tmp_path / "p.csv")])
    assert rc == 2 and "nope.json" in err and len(err.strip().splitlines()) == 1


def test_fit_cannot_be_combined_with_numbers(tmp_path, capsys):
    fit = tmp_path / "fit.json"
    fit.write_text(json.dumps(_fit_doc()), encoding="utf-8")
    rc, _, err = _run(capsys, ["--fit", str(fit), "--speed-mps", "90", "-o", str(tmp_path / "p.csv")])
    assert rc == 2 and "--fit: cannot be combined with --speed-mps" in err


def test_missing_option_without_fit(tmp_path, capsys):
    argv = [a for a in BASE]
    i = argv.index("--cd")
    del argv[i : i + 2]
    rc, _, err = _run(capsys, [*argv, "-o", str(tmp_path / "p.csv")])
    assert rc == 2 and "--cd: required unless --fit is given" in err


def _replace(argv, option, value):
    out = list(argv)
    if option in out:
        out[out.index(option) + 1] = value
    else:
        out += [option, value]
    return out


BAD_INPUT = [
    ("--mass-g", "0", "--mass-g: expected a positive mass in grams"),
    ("--mass-g", "-0.2", "--mass-g: expected a positive mass in grams"),
    ("--diameter-mm", "0", "--diameter-mm: expected a positive diameter in millimetres"),
    ("--diameter-mm", "-6", "--diameter-mm: expected a positive diameter in millimetres"),
    ("--humidity-pct", "-1", "--humidity-pct: relative_humidity must lie in 0..1"),
    ("--humidity-pct", "100.5", "--humidity-pct: relative_humidity must lie in 0..1"),
    ("--speed-mps", "0", "--speed-mps: 0 m/s is outside"),
    ("--speed-mps", "-50", "--speed-mps: -50 m/s is outside"),
    ("--speed-mps", "300", "--speed-mps: 300 m/s is outside"),
    ("--speed-mps", "1e4", "--speed-mps: 10000 m/s is outside"),
    ("--speed-mps", "nan", "--speed-mps: must be a finite number"),
    ("--speed-mps", "inf", "--speed-mps: must be a finite number"),
    ("--elevation-deg", "nan", "--elevation-deg: must be a finite number"),
    ("--cd", "inf", "--cd: must be a finite number"),
    ("--cd", "-0.1", "--cd: -0.1 is outside the accepted range [0, 5]"),
    ("--lift-coefficient", "nan", "--lift-coefficient: must be a finite number"),
    ("--spin-decay-s", "0", "--spin-decay-s: must be positive"),
    ("--spin-decay-s", "inf", "--spin-decay-s: must be a finite number"),
    ("--range-m", "0", "--range-m: 0 m is outside"),
    ("--range-m", "nan", "--range-m: must be a finite number"),
    ("--wind-mps", "inf", "--wind-mps: must be a finite number"),
    ("--muzzle-height-m", "-1", "--muzzle-height-m: -1 m is outside"),
    ("--muzzle-height-m", "0", "--muzzle-height-m: 0 m is outside the accepted range (0, 100] m"),
]


@pytest.mark.parametrize(("option", "value", "message"), BAD_INPUT)
def test_bad_input_is_one_line_exit_2_and_no_file(tmp_path, capsys, option, value, message):
    out_csv = tmp_path / "p.csv"
    rc, out, err = _run(capsys, [*_replace(BASE, option, value), "-o", str(out_csv)])
    assert rc == 2
    lines = err.strip().splitlines()
    assert len(lines) == 1, err
    assert lines[0].startswith("hopscope simulate: error: ")
    assert message in lines[0]
    assert "Traceback" not in err and out == ""
    assert not out_csv.exists() and list(tmp_path.iterdir()) == []


#: Non-finite BB and air values are rejected by the shared options' types (argparse usage errors).
USAGE_ERRORS = [
    ("--mass-g", "nan", "argument --mass-g: expected"),
    ("--mass-g", "inf", "argument --mass-g: expected"),
    ("--diameter-mm", "nan", "argument --diameter-mm: expected"),
    ("--humidity-pct", "nan", "--humidity-pct: expected a finite number"),
    ("--temp-c", "nan", "--temp-c: expected a finite number"),
    ("--pressure-hpa", "inf", "--pressure-hpa: expected a positive number"),
]


@pytest.mark.parametrize(("option", "value", "message"), USAGE_ERRORS)
def test_non_finite_bb_and_air_are_usage_errors(tmp_path, capsys, option, value, message):
    out_csv = tmp_path / "p.csv"
    with pytest.raises(SystemExit) as exc:
        main(["simulate", *_replace(BASE, option, value), "-o", str(out_csv)])
    assert exc.value.code == 2
    lines = capsys.readouterr().err.strip().splitlines()
    assert len(lines) == 1 and message in lines[0] and repr(value) in lines[0]
    assert not out_csv.exists()


def test_not_a_number_is_a_usage_error(tmp_path, capsys):
    with pytest.raises(SystemExit) as exc:
        main(["simulate", *_replace(BASE, "--speed-mps", "fast"), "-o", str(tmp_path / "p.csv")])
    assert exc.value.code == 2
    err = capsys.readouterr().err
    assert "--speed-mps" in err and "invalid float value" in err
    assert list(tmp_path.iterdir()) == []


def test_missing_output_folder(tmp_path, capsys):
    rc, _, err = _run(capsys, [*BASE, "-o", str(tmp_path / "no" / "p.csv")])
    assert rc == 2 and "does not exist" in err


def test_output_is_a_folder(tmp_path, capsys):
    rc, _, err = _run(capsys, [*BASE, "-o", str(tmp_path)])
    assert rc == 2 and f"-o: {tmp_path} is a folder" in err
    assert list(tmp_path.iterdir()) == []


def test_heavier_bb_keeps_more_of_its_speed(tmp_path, capsys):
    # common practice, no published source: at the same exit speed and C_D a heavier BB slows less.
    speeds = []
    for mass in ("0.20", "0.40"):
        out_csv = tmp_path / f"m{mass}.csv"
        rc, _, _ = _run(capsys, [*_replace(BASE, "--mass-g", mass), "--range-m", "30", "-o", str(out_csv)])
        assert rc == 0
        speeds.append(_read_path(out_csv)[1]["speed_mps"][-1])
    assert speeds[1] > speeds[0]
    assert BB(4e-4).kinetic_energy_j(speeds[1]) > BB(2e-4).kinetic_energy_j(speeds[0])


def test_fit_air_can_be_overridden_and_extra_shots_are_named(tmp_path, capsys):
    doc = _fit_doc(n_shots=2)
    doc["model"]["drag"] = "sphere"
    fit = tmp_path / "fit.json"
    fit.write_text(json.dumps(doc), encoding="utf-8")
    out_csv = tmp_path / "p.csv"
    argv = [
        "--fit",
        str(fit),
        "--temp-c",
        "30",
        "--pressure-hpa",
        "950",
        "--humidity-pct",
        "80",
        "--range-m",
        "10",
    ]
    rc, _, err = _run(capsys, [*argv, "-o", str(out_csv)])
    assert rc == 0, err
    header, _ = _read_path(out_csv)
    text = "\n".join(header)
    rho = moist_air_density(303.15, 95000.0, 0.8)  # CIPM-2007 (Picard et al. 2008), tested in test_air.py
    fit_rho = doc["air"]["density_kgm3"]
    assert f"density {rho:.5f} kg/m3" in text and f"instead of the fit's {fit_rho:.5g} kg/m³" in text
    warnings = [h for h in header if h.startswith("# warning:")]
    assert any("holds 2 shots; simulating the first" in w for w in warnings)
    assert any("drag law 'sphere'" in w for w in warnings)
    assert err.count("warning:") == len(warnings)


def test_fit_with_undetermined_drag_is_one_line_exit_2(tmp_path, capsys):
    doc = _fit_doc()
    doc["converged"] = False
    doc["reason"] = "parameter drag_coefficient ran to its bound 2"
    doc["aero"]["drag_coefficient"] = {"value": None, "stderr": None}
    fit = tmp_path / "fit.json"
    fit.write_text(json.dumps(doc), encoding="utf-8")
    rc, _, err = _run(capsys, ["--fit", str(fit), "-o", str(tmp_path / "p.csv")])
    assert rc == 2 and "aero.drag_coefficient" in err and len(err.strip().splitlines()) == 1
    assert not (tmp_path / "p.csv").exists()
