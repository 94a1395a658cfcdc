"""fit.json: layout of the contract, round trip, and one-line errors naming file and key."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from hopscope.fitting.air import Air
from hopscope.fitting.bb import BB
from hopscope.fitting.estimate import fit_shots
from hopscope.fitting.fitfile import SCHEMA, fit_from_json, fit_to_json, read_fit
from hopscope.fitting.observe import ModelSpec, simulate_shot

BB_025 = BB(2.5e-4)
AIR = Air.standard()
TRUTH = {
    "speed_mps": 100.0,
    "elevation_rad": 0.01,
    "lift_coefficient": 0.2,
    "drag_param": 0.45,
    "decay_param": 0.3,
}
#: The elevation read back lies within this many of its σ of the truth.
Z_TOL = 5.0
#: A JSON round trip of doubles is exact up to the last bit.
ROUND_TRIP_REL_TOL = 1e-15


@pytest.fixture(scope="module")
def fit():
    spec = ModelSpec(BB_025, AIR)
    shots = [
        simulate_shot(spec, t_s=np.arange(40) / 2000.0 + i, sigma_m=5e-4, rng=i, label=f"t.csv#{i}", **TRUTH)
        for i in range(2)
    ]
    return fit_shots(shots, bb=BB_025, air=AIR)


@pytest.fixture(scope="module")
def text(fit):
    return fit_to_json(fit, inputs=[{"path": "t.csv", "rig_digest": "d1", "shots": ["t.csv#0", "t.csv#1"]}])


def test_contract_fields_are_present(text):
    d = json.loads(text)
    assert d["schema"] == SCHEMA
    for key in ("t_s", "x_m", "y_m", "speed_mps", "elevation_deg"):
        assert key in d["shots"][0]["initial"]
    assert set(d["shots"][0]["lift_coefficient"]) >= {"value", "stderr"}
    assert set(d["aero"]["drag_coefficient"]) >= {"value", "stderr", "stderr_calibration"}
    assert d["aero"]["spin_decay_time_s"]["value"] is None  # 20 ms cannot see the decay
    assert d["air"]["density_kgm3"] == pytest.approx(AIR.density_kgm3)
    assert d["bb"] == {"mass_kg": 2.5e-4, "diameter_m": BB_025.diameter_m}
    assert d["model"]["drag"] == "constant" and "spin is not measured" in d["model"]["spin_note"]
    assert isinstance(d["warnings"], list) and d["converged"] is True
    assert {"aic", "bic", "chi2", "n_points", "residual_rms_m", "residual_rms_sigma"} <= set(d["statistics"])
    n_free = sum(d["parameters"]["free"])
    assert len(d["parameters"]["correlation"]) == n_free
    assert len(d["shots"][1]["residuals"]["dy_m"]) == 40
    assert d["inputs"]["tracks"][0]["rig_digest"] == "d1"
    el = d["shots"][0]["initial"]["elevation_deg"]
    assert el["value"] == pytest.approx(math.degrees(0.01), abs=Z_TOL * el["stderr"])


def test_round_trip_keeps_the_model_and_parameters(fit, text, tmp_path):
    p = tmp_path / "fit.json"
    p.write_text(text, encoding="utf-8")
    ff = read_fit(p)
    assert ff.labels == ("t.csv#0", "t.csv#1") and ff.converged
    assert ff.drag_coefficient == pytest.approx(fit.drag_coefficient.value, rel=ROUND_TRIP_REL_TOL)
    assert ff.spin_decay_time_s is None
    fm, fm0 = ff.fitted_model(), fit.fitted_model()
    np.testing.assert_array_equal(fm.theta, fm0.theta)
    np.testing.assert_array_equal(fm.free, fm0.free)
    np.testing.assert_allclose(fm.covariance, fm0.covariance, rtol=ROUND_TRIP_REL_TOL)
    assert fm.spec == fm0.spec
    assert ff.value("shots", 0, "initial", "speed_mps") == fit.shots[0].speed_mps.value


def _mutated(text, path, value):
    d = json.loads(text)
    node = d
    for k in path[:-1]:
        node = node[k]
    if value is KeyError:
        del node[path[-1]]
    else:
        node[path[-1]] = value
    return json.dumps(d)


@pytest.mark.parametrize(
    ("path", "value", "match"),
    [
        (("schema",), "hopscope.fit/2", r"key schema: expected 'hopscope.fit/1'"),
        (("aero", "drag_coefficient"), KeyError, r"key aero.drag_coefficient: missing"),
        (
            ("shots", 0, "initial", "speed_mps", "value"),
            "fast",
            r"shots\[0\].initial.speed_mps.value: expected a finite",
        ),
        (("bb", "mass_kg"), -1.0, r"key bb: BB mass"),
        (("air", "density_kgm3"), None, r"key air.density_kgm3: expected a finite number"),
        (("model", "drag"), "cubic", r"key model: drag law: unknown"),
        (("parameters", "values"), [1.0], r"key parameters.values: expected a list of 12 numbers"),
        (("parameters", "covariance"), [[1.0]], r"key parameters.covariance: expected a 11×11 matrix"),
        (("converged",), "yes", r"key converged: expected true or false"),
    ],
)
def test_bad_files_raise_one_line_errors_naming_file_and_key(text, path, value, match):
    with pytest.raises(ValueError, match=match) as exc:
        fit_from_json(_mutated(text, path, value), "f.json")
    assert str(exc.value).startswith("f.json: ") and "\n" not in str(exc.value)


def test_not_json_and_missing_file(tmp_path):
    with pytest.raises(ValueError, match=r"x.json: not valid JSON"):
        fit_from_json("{", "x.json")
    with pytest.raises(OSError):
        read_fit(tmp_path / "none.json")


def test_non_converged_fit_round_trips_with_its_reason():
    spec = ModelSpec(BB_025, AIR)
    shot = simulate_shot(spec, t_s=np.arange(40) / 2000.0, sigma_m=5e-4, rng=1, **TRUTH)
    bad = fit_shots([shot], bb=BB(8e-3), air=AIR)
    text = fit_to_json(bad)
    assert "NaN" not in text and "Infinity" not in text
    ff = fit_from_json(text, "bad.json")
    assert not ff.converged and "ran to its bound" in ff.reason
