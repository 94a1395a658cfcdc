"""``hopscope fit``: track files in, fit.json out, the parameter table, bad input and non-convergence."""

from __future__ import annotations

import json
import math
import re
from pathlib import Path

import pytest

from hopscope import cli
from hopscope.errors import EXIT_BAD_INPUT, EXIT_OK, EXIT_UNEXPECTED
from hopscope.fitting.air import Air
from hopscope.fitting.fitfile import read_fit
from hopscope.tracker.trackfile import track_to_csv

from .tracks_synth import TRUTH, Z_TOL, synthetic_track

_track = synthetic_track


def _write(tmp_path, name="track.csv", **kw):
    p = tmp_path / name
    p.write_text(track_to_csv(_track(**kw)), encoding="utf-8")
    return p


def _run(capsys, argv):
    try:
        rc = cli.main(["fit", *argv])
    except SystemExit as exc:  # argparse usage errors
        rc = exc.code
    cap = capsys.readouterr()
    return rc, cap.out, cap.err


def test_fit_writes_fit_json_and_prints_table(tmp_path, capsys):
    track = _write(tmp_path)
    out = tmp_path / "fit.json"
    rc, text, err = _run(capsys, [str(track), "--mass-g", "0.25", "-o", str(out)])
    assert rc == EXIT_OK, err
    fit = read_fit(out)
    d = fit.data
    assert d["schema"] == "hopscope.fit/1" and d["converged"] is True
    speed = d["shots"][0]["initial"]["speed_mps"]
    assert abs(speed["value"] - TRUTH["speed_mps"]) < Z_TOL * speed["stderr"]
    assert speed["stderr_calibration"] > 0  # the ensemble reached the error bars
    assert d["inputs"]["tracks"][0]["rig_digest"] == "abc123"
    assert d["aero"]["spin_decay_time_s"]["value"] is None  # 20 ms cannot see the decay
    assert any("spin decay not determined" in w for w in d["warnings"])
    assert len(d["shots"][0]["residuals"]["dx_m"]) == 40
    assert d["air"]["density_kgm3"] == pytest.approx(Air.standard().density_kgm3)
    # the table in user units, the warnings on stderr
    assert "m/s" in text and "fps" in text and "C_D" in text and "spin decay τ" in text
    assert "warning: spin decay not determined" in err
    assert "warning: air conditions not given" in err


def test_fit_prints_the_hop_verdict_read_off_the_predicted_path(tmp_path, capsys):
    from hopscope.decision_summaries import verdict_text
    from hopscope.decisions import Convention, decide_file

    track = _write(tmp_path, n_shots=2)
    out = tmp_path / "fit.json"
    argv = [str(track), "--mass-g", "0.25", "--engagement-m", "25", "--band-m", "0.1", "-o", str(out)]
    rc, text, err = _run(capsys, argv)
    assert rc == EXIT_OK, err
    # the same verdicts as the report's, judged by the options given (group first, then each shot)
    decided = decide_file(read_fit(out), convention=Convention(band_m=0.1, engagement_m=25.0))
    assert decided is not None
    group = decided.group_verdict
    assert group.engagement_m == 25.0 and group.band_m == 0.1
    line = next(ln for ln in text.splitlines() if "group (mean shot)" in ln)
    assert line.split("group (mean shot)", 1)[1].strip() == verdict_text(group)
    assert group.adjuster in line  # which way to turn the adjuster
    assert "within ±0.1 m of the line of sight to 25 m" in text
    for v in decided.shot_verdicts:
        assert f"{v.label}" in text and verdict_text(v) in text
    assert "spin (measured)" not in text  # an unmarked BB: no measured spin row


def test_two_files_fit_jointly_and_share_drag(tmp_path, capsys):
    a = _write(tmp_path, "a.csv", seed=1)
    b = _write(tmp_path, "b.csv", n_shots=2, seed=2)
    out = tmp_path / "fit.json"
    rc, _, err = _run(
        capsys,
        [
            str(a),
            str(b),
            "--mass-g",
            "0.25",
            "--temp-c",
            "20",
            "--pressure-hpa",
            "1013.25",
            "--humidity-pct",
            "50",
            "-o",
            str(out),
        ],
    )
    assert rc == EXIT_OK, err
    d = json.loads(out.read_text())
    assert [s["label"] for s in d["shots"]] == ["a.csv#0", "b.csv#0", "b.csv#1"]
    assert len(d["parameters"]["names"]) == 5 * 3 + 2
    assert "air conditions not given" not in err


def test_chronograph_prior_tightens_speed(tmp_path, capsys):
    track = _write(tmp_path, k_cal=0)
    out1, out2 = tmp_path / "a.json", tmp_path / "b.json"
    assert _run(capsys, [str(track), "--mass-g", "0.25", "-o", str(out1)])[0] == EXIT_OK
    rc, text, _ = _run(capsys, [str(track), "--mass-g", "0.25", "--chrono-mps", "95:0.02", "-o", str(out2)])
    assert rc == EXIT_OK
    s1 = json.loads(out1.read_text())["shots"][0]["initial"]["speed_mps"]["stderr"]
    s2 = json.loads(out2.read_text())["shots"][0]["initial"]["speed_mps"]["stderr"]
    assert s2 < s1
    assert json.loads(out2.read_text())["inputs"]["chronograph"]["sigma_mps"] == 0.02
    assert "chronograph prior" in text


@pytest.mark.parametrize(
    ("args", "match"),
    [
        (["--mass-g", "0"], r"--mass-g"),
        (["--mass-g", "-1"], r"--mass-g"),
        (["--mass-g", "0.25", "--chrono-mps", "abc"], r"--chrono-mps"),
        (["--mass-g", "0.25", "--muzzle-x-m", "5"], r"--muzzle-x-m: 5 m lies downrange"),
        (["--mass-g", "0.25", "--drag", "cubic"], r"--drag"),
        (["--mass-g", "0.25", "--temp-c", "500"], r"--temp-c"),
    ],
)
def test_bad_options_exit_2_and_write_nothing(tmp_path, capsys, args, match):
    track = _write(tmp_path)
    out = tmp_path / "fit.json"
    rc, _, err = _run(capsys, [str(track), *args, "-o", str(out)])
    assert rc == EXIT_BAD_INPUT
    assert len(err.strip().splitlines()) == 1
    assert re.search(match, err), err
    assert not out.exists()


def _corrupt(tmp_path, how):
    p = _write(tmp_path)
    lines = p.read_text().splitlines()
    head = [i for i, ln in enumerate(lines) if not ln.startswith("#")][0]
    if how == "nan":
        cells = lines[head + 3].split(",")
        cells[4] = "nan"
        lines[head + 3] = ",".join(cells)
    elif how == "missing":
        cols = lines[head].split(",")
        drop = cols.index("sigma_m")
        lines = [
            ln if ln.startswith("#") else ",".join(c for j, c in enumerate(ln.split(",")) if j != drop)
            for ln in lines
        ]
    elif how == "schema":
        lines[0] = "# schema: hopscope.track/9"
    elif how == "order":
        a, b = lines[head + 5], lines[head + 6]
        lines[head + 5], lines[head + 6] = b, a
    elif how == "short":
        lines = lines[: head + 4]
    p.write_text("\n".join(lines) + "\n")
    return p


@pytest.mark.parametrize("how", ["nan", "missing", "schema", "order", "short"])
def test_bad_track_files_exit_2_with_one_line(tmp_path, capsys, how):
    p = _corrupt(tmp_path, how)
    out = tmp_path / "fit.json"
    rc, _, err = _run(capsys, [str(p), "--mass-g", "0.25", "-o", str(out)])
    assert rc == EXIT_BAD_INPUT, err
    lines = err.strip().splitlines()
    assert len(lines) == 1 and "track.csv" in lines[0] and "Traceback" not in err
    assert not out.exists()
    assert not list(tmp_path.glob(".fit*"))  # no partial file left behind


def test_missing_track_file_exits_2(tmp_path, capsys):
    rc, _, err = _run(
        capsys, [str(tmp_path / "nope.csv"), "--mass-g", "0.25", "-o", str(tmp_path / "f.json")]
    )
    assert rc == EXIT_BAD_INPUT and "nope.csv" in err


def test_non_converged_fit_writes_converged_false_and_exits_1(tmp_path, capsys):
    # a BB mass far from the data's: the fitted C_D is driven to its upper bound
    track = _write(tmp_path)
    out = tmp_path / "fit.json"
    rc, text, err = _run(capsys, [str(track), "--mass-g", "8", "-o", str(out)])
    assert rc == EXIT_UNEXPECTED
    d = json.loads(out.read_text())
    assert d["converged"] is False and "ran to its bound" in d["reason"]
    assert "drag_coefficient" in d["reason"]
    assert "did not converge" in err and "NO:" in text
    assert math.isfinite(d["aero"]["drag_coefficient"]["value"])


# ------------------------------------------------------------------------------------------ rough edges


def test_same_named_tracks_from_two_folders_get_unique_labels_and_a_rig_warning(tmp_path, capsys):
    (tmp_path / "a").mkdir()
    (tmp_path / "b").mkdir()
    a = _write(tmp_path / "a", seed=1, rig="rigA")
    b = _write(tmp_path / "b", seed=2, rig="rigB")
    out = tmp_path / "fit.json"
    rc, text, err = _run(capsys, [str(a), str(b), "--mass-g", "0.25", "-o", str(out)])
    assert rc == EXIT_OK, err
    labels = [s["label"] for s in json.loads(out.read_text())["shots"]]
    assert labels == ["a/track.csv#0", "b/track.csv#0"]
    assert "a/track.csv#0" in text and "b/track.csv#0" in text
    warning = [ln for ln in err.splitlines() if "different rigs" in ln]
    assert len(warning) == 1 and "rigA" in warning[0] and "rigB" in warning[0]
    assert any("different rigs" in w for w in read_fit(out).warnings)


def test_tracks_of_one_rig_get_no_rig_warning(tmp_path, capsys):
    a, b = _write(tmp_path, "a.csv", seed=1), _write(tmp_path, "b.csv", seed=2)
    rc, _, err = _run(capsys, [str(a), str(b), "--mass-g", "0.25", "-o", str(tmp_path / "fit.json")])
    assert rc == EXIT_OK and "different rigs" not in err


def test_summary_says_the_loss_asked_for_and_the_loss_used(tmp_path, capsys):
    # clean Gaussian data: the robust loss asked for (the default soft_l1) is not needed
    track = _write(tmp_path)
    rc, text, _ = _run(capsys, [str(track), "--mass-g", "0.25", "-o", str(tmp_path / "fit.json")])
    assert rc == EXIT_OK
    fit = read_fit(tmp_path / "fit.json").data["model"]
    assert fit["loss_requested"] == "soft_l1" and fit["loss"] == "linear"
    assert "loss soft_l1 asked, linear used" in text
    rc, text, _ = _run(
        capsys, [str(track), "--mass-g", "0.25", "--loss", "linear", "-o", str(tmp_path / "f2.json")]
    )
    assert rc == EXIT_OK and "loss linear" in text and "asked" not in text


def test_negative_mass_is_echoed_in_grams(tmp_path, capsys):
    track = _write(tmp_path)
    rc, _, err = _run(capsys, [str(track), "--mass-g", "-0.25", "-o", str(tmp_path / "fit.json")])
    assert rc == EXIT_BAD_INPUT
    assert "--mass-g" in err and "-0.25 g" in err and "0.00025" not in err


@pytest.mark.parametrize("where", ["folder", "unwritable"])
def test_output_at_a_folder_or_an_unwritable_place_names_it_not_a_temp_file(tmp_path, capsys, where):
    track = _write(tmp_path)
    # /sys refuses new files even to root (os.access cannot tell beforehand): the write itself fails
    target = tmp_path if where == "folder" else Path("/sys/fit.json")
    rc, _, err = _run(capsys, [str(track), "--mass-g", "0.25", "-o", str(target)])
    lines = err.strip().splitlines()
    assert rc == EXIT_BAD_INPUT and len(lines) == 1, err
    assert str(target) in lines[0] and ".partial" not in lines[0] and "Traceback" not in err
    assert not [p for p in tmp_path.iterdir() if ".partial" in p.name]


def test_one_shot_group_rows_say_one_shot_instead_of_an_unknown_sd(tmp_path, capsys):
    from hopscope.decision_summaries import ONE_SHOT_TEXT

    track = _write(tmp_path, n_shots=1)
    rc, text, err = _run(capsys, [str(track), "--mass-g", "0.25", "-o", str(tmp_path / "fit.json")])
    assert rc == EXIT_OK, err
    for name in ("group speed", "group energy"):
        line = next(ln for ln in text.splitlines() if name in ln)
        assert ONE_SHOT_TEXT in line and "SD" not in line.replace(ONE_SHOT_TEXT, ""), line
    assert "SD ?" not in text
