"""The decisions on the command line (issue 13): BB tolerance, muzzle state per shot and group, the
energy limit's verdict, plausibility warnings, and the report's decision sections.

Synthetic groups (``groups_synth``): shots fired level from a muzzle at x = 0 and tracked from 1 m on, so
the true muzzle speed and energy are known.
"""

from __future__ import annotations

import json
import math
import re
from pathlib import Path

import numpy as np
import pytest

from hopscope import cli
from hopscope.decisions import VERDICT_SAMPLES as DECISION_VERDICT_SAMPLES
from hopscope.errors import EXIT_BAD_INPUT, EXIT_OK
from hopscope.fitting.bb import DEFAULT_DIAMETER_SIGMA_M, DEFAULT_MASS_REL_SIGMA

from .groups_synth import MASS_KG, write_group
from .groups_synth import run_cli as _cli

SPEED_MPS = 95.0
TRUE_ENERGY_J = 0.5 * MASS_KG * SPEED_MPS**2
#: The muzzle speed flown back from 1 m agrees with the true one within this many of its standard errors.
MUZZLE_Z_TOL = 4.0
#: The same number two ways (relative).
SAME_REL_TOL = 1e-9
#: Energy within this fraction of the limit (either side) must read "within" (issue 13: within 2 %; with the
#: default 1 % mass tolerance and the k = 2 rule the boundary sits at about 2.0 %, so probe inside it).
WITHIN_FRACTION = 0.015


@pytest.fixture(scope="module")
def track(tmp_path_factory):
    return write_group(tmp_path_factory.mktemp("decisions") / "group.csv", n_shots=3, rng=1)


def _fit(capsys, tmp_path, track, *extra):
    out = tmp_path / "fit.json"
    rc, text, err = _cli(capsys, ["fit", str(track), "--mass-g", "0.25", "-o", str(out), *extra])
    return rc, text, err, (json.loads(out.read_text()) if out.exists() else None)


def test_mass_and_diameter_tolerance_enter_the_error_bars_as_their_own_share(tmp_path, capsys, track):
    rc, text, _, doc = _fit(capsys, tmp_path, track, "--mass-g", "0.25:0.005", "--diameter-mm", "5.95:0.02")
    assert rc == EXIT_OK
    bb = doc["bb"]
    assert bb["mass_sigma_kg"] == pytest.approx(5e-6, rel=SAME_REL_TOL)
    assert bb["diameter_sigma_m"] == pytest.approx(2e-5, rel=SAME_REL_TOL)
    assert bb["tolerance_origin"] == "given"
    cd = doc["aero"]["drag_coefficient"]
    rel = math.hypot(0.005 / 0.25, 2 * 0.02 / 5.95)  # C_D ∝ m/d² at a fixed measured path
    assert cd["stderr_bb"] == pytest.approx(abs(cd["value"]) * rel, rel=1e-6)
    assert cd["stderr"] ** 2 == pytest.approx(
        cd["stderr_noise"] ** 2 + (cd["stderr_calibration"] or 0.0) ** 2 + cd["stderr_bb"] ** 2, rel=1e-6
    )
    energy = doc["shots"][0]["muzzle"]["energy_j"]
    assert energy["stderr_bb"] == pytest.approx(energy["value"] * 0.005 / 0.25, rel=1e-6)
    assert "BB (1σ tolerance)" in text and "BB mass/diameter tolerance" in text


def test_default_tolerance_is_stated(tmp_path, capsys, track):
    rc, text, _, doc = _fit(capsys, tmp_path, track)
    assert rc == EXIT_OK
    assert doc["bb"]["tolerance_origin"] == "default"
    assert doc["bb"]["mass_sigma_kg"] == pytest.approx(DEFAULT_MASS_REL_SIGMA * MASS_KG, rel=SAME_REL_TOL)
    assert doc["bb"]["diameter_sigma_m"] == pytest.approx(DEFAULT_DIAMETER_SIGMA_M, rel=SAME_REL_TOL)
    assert "(default)" in text


def test_muzzle_state_per_shot_and_group(tmp_path, capsys, track):
    rc, text, _, doc = _fit(capsys, tmp_path, track, "--muzzle-x-m", "0")
    assert rc == EXIT_OK
    speeds, energies = [], []
    for s in doc["shots"]:
        m = s["muzzle"]
        assert m["x_m"] == 0.0
        v = m["speed_mps"]
        assert abs(v["value"] - SPEED_MPS) < MUZZLE_Z_TOL * v["stderr"]
        assert v["value"] > s["initial"]["speed_mps"]["value"]  # drag slowed it before the first point
        speeds.append(v["value"])
        energies.append(m["energy_j"]["value"])
    g = doc["group"]
    assert g["n_shots"] == 3 and g["muzzle_x_m"] == 0.0
    assert g["speed_mps"]["mean"]["value"] == pytest.approx(np.mean(speeds), rel=SAME_REL_TOL)
    assert g["speed_mps"]["sd"] == pytest.approx(np.std(speeds, ddof=1), rel=1e-6)
    assert g["speed_mps"]["extreme_spread"] == pytest.approx(np.ptp(speeds), rel=1e-6)
    assert g["energy_j"]["extreme_spread"] == pytest.approx(np.ptp(energies), rel=1e-6)
    assert "at the muzzle, x = 0 m" in text and "group speed" in text and "extreme spread" in text


def test_without_a_muzzle_the_values_are_at_the_first_point_and_say_so(tmp_path, capsys, track):
    rc, text, _, doc = _fit(capsys, tmp_path, track)
    assert rc == EXIT_OK
    s = doc["shots"][0]
    assert s["muzzle"]["x_m"] is None
    assert s["muzzle"]["speed_mps"]["value"] == pytest.approx(s["initial"]["speed_mps"]["value"], rel=1e-12)
    assert "at each shot's first tracked point" in text


@pytest.mark.parametrize(
    ("limit_factor", "verdict"),
    [
        (1 / (1 - WITHIN_FRACTION), "within"),  # energy 1.5 % below the limit
        (1 / (1 + WITHIN_FRACTION), "within"),  # 1.5 % above
        (1 / 1.05, "above"),  # 5 % above
        (1 / 0.95, "below"),  # 5 % below
    ],
)
def test_energy_limit_verdict(tmp_path, capsys, track, limit_factor, verdict):
    limit = TRUE_ENERGY_J * limit_factor
    rc, text, err, doc = _fit(capsys, tmp_path, track, "--muzzle-x-m", "0", "--limit-j", f"{limit:.6f}")
    assert rc == EXIT_OK, err
    e = doc["energy_limit"]
    assert e["verdict"] == verdict and e["mean"]["verdict"] == verdict
    assert e["limit_j"] == pytest.approx(limit, rel=1e-6)
    top = max(doc["shots"], key=lambda s: s["muzzle"]["energy_j"]["value"])
    assert e["shot"] == top["label"]
    assert e["margin_j"]["value"] == pytest.approx(
        e["limit_j"] - top["muzzle"]["energy_j"]["value"], rel=1e-9
    )
    # the mass tolerance is in the margin
    assert e["margin_j"]["stderr_bb"] == pytest.approx(
        DEFAULT_MASS_REL_SIGMA * e["energy_j"]["value"], rel=1e-6
    )
    assert e["margin_sigma"] == pytest.approx(e["margin_j"]["value"] / e["margin_j"]["stderr"], rel=1e-9)
    words = {
        "below": "below the limit",
        "within": "within the uncertainty of the limit",
        "above": "above the limit",
    }
    line = next(ln for ln in text.splitlines() if "highest-energy shot" in ln)
    assert words[verdict] in line
    assert "the field's own chronograph is the reference" in text
    assert "no --muzzle-x-m" not in err


def test_limit_without_muzzle_warns_that_it_may_read_low(tmp_path, capsys, track):
    rc, _, err, doc = _fit(capsys, tmp_path, track, "--limit-j", "1.2")
    assert rc == EXIT_OK
    assert re.search(r"warning: --limit-j: no --muzzle-x-m given.*may read low", err)
    assert any("may read low" in w for w in doc["warnings"])


def test_an_implausible_drag_coefficient_names_the_mass(tmp_path, capsys, track):
    # the 0.25 g BB's track fitted as a 1 g BB: C_D four times too large
    out = tmp_path / "fit.json"
    rc, _, err = _cli(capsys, ["fit", str(track), "--mass-g", "1.0", "-o", str(out)])
    assert rc == EXIT_OK
    assert re.search(r"warning: C_D = 1\.\d+ is outside .*BB mass", err), err
    assert any(w.startswith("C_D = ") for w in json.loads(out.read_text())["warnings"])


@pytest.mark.parametrize(
    ("args", "match"),
    [
        (["--mass-g", "0.25:-0.01"], r"--mass-g: the standard uncertainty SIGMA must be >= 0"),
        (["--mass-g", "0.25:0.3"], r"--mass-g: the standard uncertainty SIGMA must be >= 0 and below"),
        (["--mass-g", "0.25:abc"], r"--mass-g.*expected VALUE or VALUE:SIGMA in g"),
        (["--mass-g", "0.25", "--diameter-mm", "5.95:0.01:1"], r"--diameter-mm.*VALUE:SIGMA in mm"),
        (["--mass-g", "0.25", "--diameter-mm", "5.95:nan"], r"--diameter-mm"),
        (["--mass-g", "0.25", "--limit-j", "0"], r"--limit-j"),
        (["--mass-g", "0.25", "--limit-j", "abc"], r"--limit-j"),
        (
            ["--mass-g", "0.25", "--muzzle-x-m", "3"],
            r"--muzzle-x-m: 3 m lies downrange of the first tracked point",
        ),
    ],
)
def test_bad_decision_options_exit_2_with_one_line(tmp_path, capsys, track, args, match):
    out = tmp_path / "fit.json"
    rc, _, err = _cli(capsys, ["fit", str(track), *args, "-o", str(out)])
    assert rc == EXIT_BAD_INPUT
    assert len(err.strip().splitlines()) == 1, err
    assert re.search(match, err), err
    assert not out.exists()


def test_run_takes_the_limit_and_the_prediction_convention():
    parser = cli.build_parser()
    args = parser.parse_args(
        ["run", "clip.mp4", "--rig", "rig.json", "--mass-g", "0.25:0.004", "--out", "o", "--limit-j", "1.14",
         "--muzzle-height-m", "1.2", "--band-m", "0.1", "--engagement-m", "40", "--muzzle-x-m", "-0.5"]
    )  # fmt: skip
    from hopscope import options
    from hopscope.decisions import convention_from_args

    settings = options.fit_settings(args)
    assert settings.limit_j == 1.14 and settings.muzzle_x_m == -0.5
    assert settings.tolerance is not None and settings.tolerance.mass_sigma_kg == pytest.approx(4e-6)
    c = convention_from_args(args)
    assert (c.muzzle_height_m, c.band_m, c.engagement_m) == (1.2, 0.1, 40.0)


@pytest.mark.slow
def test_report_shows_the_group_the_limit_the_path_verdict_and_the_prediction(tmp_path, capsys, track):
    rc, _, _, _ = _fit(capsys, tmp_path, track, "--muzzle-x-m", "0", "--limit-j", "1.5")
    assert rc == EXIT_OK
    page = tmp_path / "report.html"
    limit = f"{TRUE_ENERGY_J * 1.05:.4f}"  # the report's own limit replaces the fit's
    rc, _, err = _cli(
        capsys,
        ["report", str(tmp_path / "fit.json"), "-o", str(page), "--limit-j", limit, "--engagement-m", "25"],
    )
    assert rc == EXIT_OK, err
    html = page.read_text(encoding="utf-8")
    assert "group of 3 shots, mean" in html and "not one shot" in html
    assert 'id="energy-limit"' in html and "below the limit" in html and f"{float(limit):g} J" in html
    assert "the field&#39;s own chronograph is the reference" in html
    assert 'id="hop-verdict"' in html and "hop-up adjuster" in html
    assert html.count("group.csv#") >= 3 * 3  # each shot in the verdict, muzzle and prediction tables
    assert "speed at 25 m" in html and 'id="prediction"' in html
    assert 'id="bb-tolerance"' in html and 'id="fig-prediction"' in html
    assert "lift/weight" not in html  # the ratio verdict is replaced by the path's


def test_simulate_shows_the_mass_tolerance_in_the_energy(tmp_path, capsys):
    argv = ["simulate", "--mass-g", "0.25:0.005", "--speed-mps", "95", "--elevation-deg", "0", "--cd", "0.42",
            "--lift-coefficient", "0.03", "--range-m", "20", "-o", str(tmp_path / "p.csv")]  # fmt: skip
    rc, text, err = _cli(capsys, argv)
    assert rc == EXIT_OK, err
    m = re.search(r"muzzle energy +([\d.]+) J ± ([\d.]+) J \(BB mass tolerance\)", text)
    assert m, text
    assert float(m[2]) == pytest.approx(float(m[1]) * 0.005 / 0.25, rel=0.05)  # shown to two digits
    argv[2] = "0.25:0.25"
    rc, _, err = _cli(capsys, argv)
    assert rc == EXIT_BAD_INPUT and "--mass-g" in err and len(err.strip().splitlines()) == 1


def test_readme_states_the_conventions_the_code_uses():
    from hopscope.fitting import compare, energy_limit, forecast, plausibility, verdict

    readme = (Path(__file__).resolve().parents[2] / "README.md").read_text(encoding="utf-8")
    section = readme[readme.index("## Decisions: our conventions") :]
    section = section[: section.index("\n## ", 5)]
    assert f"exceeds {energy_limit.COVERAGE_FACTOR:g}σ" in section
    assert f"`--muzzle-height-m` (default {forecast.DEFAULT_MUZZLE_HEIGHT_M:g} m)" in section
    assert f"`--engagement-m` (default {verdict.DEFAULT_ENGAGEMENT_M:g} m)" in section
    assert f"`--band-m` (default {forecast.DEFAULT_BAND_M:g} m)" in section
    assert (
        f"at least {100 * verdict.MIN_VERDICT_PROBABILITY:g} % of {DECISION_VERDICT_SAMPLES} draws" in section
    )
    assert f"(default {compare.DEFAULT_ALPHA:g}" in section
    assert f"slope exceeds {compare.SLOPE_MIN_SIGMAS:g} standard" in section
    assert f"good to {100 * DEFAULT_MASS_REL_SIGMA:g} %" in section
    assert f"{1e3 * DEFAULT_DIAMETER_SIGMA_M:g} mm" in section
    lo, hi = plausibility.PLAUSIBLE_CD
    assert (
        f"C_D outside {lo:.2f}–{hi:.2f}" in section and f"to {plausibility.PLAUSIBLE_CL_MAX:.2f}" in section
    )
