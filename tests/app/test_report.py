"""The HTML report: content, escaping, figures, and the page as a real browser shows it."""

from __future__ import annotations

import dataclasses
import json
import re
import sys
from pathlib import Path

import numpy as np
import pytest
from markupsafe import escape

from hopscope import cli
from hopscope.calibration.rig import rig_to_json
from hopscope.fitting.air import Air
from hopscope.fitting.bb import BB
from hopscope.fitting.estimate import fit_shots
from hopscope.fitting.fitfile import fit_to_json
from hopscope.fitting.observe import ModelSpec, simulate_shot
from hopscope.report import CAUTIONS, figures, load_report_inputs, render_report
from hopscope.tracker.trackfile import track_to_csv

from .browser import open_report
from .tracks_synth import synthetic_track

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tracker"))
from track_synth import simple_rig

ROOT = Path(__file__).resolve().parents[2]
ARTIFACTS = ROOT / "test-artifacts"
PNG_MAGIC = b"\x89PNG\r\n\x1a\n"
#: plane, residuals, speed/lift, range, (two shots or more) the spread behind the effective range, and the
#: predicted paths from the muzzle height (when the fit converged)
N_FIGURES = 6


@pytest.fixture(scope="module")
def fit_json(tmp_path_factory) -> Path:
    """A converged two-shot fit of simulated tracks (the report needs nothing but fit.json)."""
    spec = ModelSpec(BB(2.8e-4), Air.standard())
    shots = [
        simulate_shot(
            spec,
            t_s=np.linspace(0.010, 0.040, 60),
            speed_mps=v,
            elevation_rad=0.004,
            lift_coefficient=0.02,
            drag_param=0.42,
            decay_param=0.5,
            sigma_m=3e-4,
            rng=i,
            label=f"lane<b>#{i}",
        )
        for i, v in enumerate((94.0, 96.0))
    ]
    fit = fit_shots(shots, bb=spec.bb, air=spec.air)
    path = tmp_path_factory.mktemp("report") / "fit.json"
    path.write_text(fit_to_json(fit))
    return path


def test_report_has_cautions_table_and_figures(fit_json):
    html = render_report(load_report_inputs(fit_json, range_m=40.0))
    for caution in CAUTIONS:
        assert str(escape(caution)) in html
    assert 'id="parameters"' in html
    assert len(re.findall(r'<img src="data:image/png;base64,', html)) == N_FIGURES
    assert "drag coefficient C_D" in html


def test_one_shot_report_has_no_spread_figure(tmp_path):
    spec = ModelSpec(BB(2.8e-4), Air.standard())
    shot = simulate_shot(spec, t_s=np.linspace(0.010, 0.040, 60), speed_mps=95.0, elevation_rad=0.004,
                         lift_coefficient=0.02, drag_param=0.42, decay_param=0.5, sigma_m=3e-4, rng=7)  # fmt: skip
    path = tmp_path / "one.json"
    path.write_text(fit_to_json(fit_shots([shot], bb=spec.bb, air=spec.air)))
    html = render_report(load_report_inputs(path))
    assert len(re.findall(r'<img src="data:image/png;base64,', html)) == N_FIGURES - 1
    assert "needs ≥ 2 shots" in html


def test_effective_range_card_for_two_shots(fit_json):
    html = render_report(load_report_inputs(fit_json))
    assert re.search(r"effective range</div><div class=\"value\">\d+\.\d m", html)


def test_labels_are_escaped(fit_json):
    html = render_report(load_report_inputs(fit_json, title="<script>alert(1)</script>"))
    assert "<script>alert(1)</script>" not in html
    assert "&lt;script&gt;" in html
    assert "lane<b>#0" not in html and "lane&lt;b&gt;#0" in html


def test_bad_range_is_rejected(fit_json):
    with pytest.raises(ValueError, match="--range-m"):
        load_report_inputs(fit_json, range_m=-1.0)


def test_figures_render_png():
    x = np.linspace(0, 40, 50)
    png = figures.range_figure(
        x, -0.001 * x**2, -0.001 * x**2 - 0.01, -0.001 * x**2 + 0.01, launch_height_m=0.0
    )
    assert png.startswith(PNG_MAGIC) and len(png) > 5000
    png = figures.speed_lift_figure(x, 95 - x, 1.2 - 0.02 * x)
    assert png.startswith(PNG_MAGIC)


def test_report_command_writes_file_and_rejects_other_schema(fit_json, tmp_path, capsys):
    out = tmp_path / "r.html"
    assert cli.main(["report", str(fit_json), "-o", str(out)]) == 0
    assert out.read_text().startswith("<!DOCTYPE html>")
    capsys.readouterr()
    bad = tmp_path / "other.json"
    bad.write_text('{"schema": "hopscope.fit/9"}')
    out2 = tmp_path / "r2.html"
    assert cli.main(["report", str(bad), "-o", str(out2)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "other.json" in err[0] and "schema" in err[0]
    assert not out2.exists()


@pytest.mark.parametrize(
    ("content", "expect"),
    [("", "other.json"), ("{not json", "other.json"), ('{"schema": "hopscope.fit/1"}', "other.json")],
    ids=["empty", "corrupt", "missing-keys"],
)
def test_report_command_bad_fit_files(tmp_path, capsys, content, expect):
    bad = tmp_path / "other.json"
    bad.write_text(content)
    out = tmp_path / "r.html"
    assert cli.main(["report", str(bad), "-o", str(out)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and expect in err[0]
    assert not out.exists() and sorted(p.name for p in tmp_path.iterdir()) == ["other.json"]


def test_report_command_missing_fit(tmp_path, capsys):
    out = tmp_path / "r.html"
    assert cli.main(["report", str(tmp_path / "absent.json"), "-o", str(out)]) == 2
    err = capsys.readouterr().err
    assert "absent.json" in err and "No such file" in err and not out.exists()


#: The calibration's own warning written into the test rig (the report must list it).
RIG_WARNING = "lens views leave the frame's corners uncovered (test rig)"
#: Chronograph reading given to the fit, m/s (the synthetic shots fly at 95 m/s).
CHRONO = "95.5:0.5"


@pytest.fixture(scope="module")
def rigged(tmp_path_factory):
    """A rig with a warning of its own, a two-shot track mapped with it, and a fit with a chronograph."""
    d = tmp_path_factory.mktemp("rigged")
    rig = dataclasses.replace(simple_rig(1920, 1080), warnings=(RIG_WARNING,))
    (d / "rig.json").write_text(rig_to_json(rig))
    (d / "track.csv").write_text(track_to_csv(synthetic_track(n_shots=2, rig=rig.digest)))
    argv = [
        "fit",
        str(d / "track.csv"),
        "--mass-g",
        "0.25",
        "--chrono-mps",
        CHRONO,
        "-o",
        str(d / "fit.json"),
    ]
    assert cli.main(argv) == 0
    return d


def _report_argv(d: Path, out: Path) -> list[str]:
    return ["report", str(d / "fit.json"), "--track", str(d / "track.csv"), "--rig", str(d / "rig.json"),
            "-o", str(out)]  # fmt: skip


@pytest.fixture(scope="module")
def rigged_html(rigged, tmp_path_factory) -> str:
    """The report of the rigged fit with its track and rig, as the report command writes it."""
    out = tmp_path_factory.mktemp("rigged_report") / "r.html"
    assert cli.main(_report_argv(rigged, out)) == 0
    return out.read_text(encoding="utf-8")


def test_report_lists_the_rigs_warnings_and_compares_the_chronograph(rigged_html):
    html = rigged_html
    warnings = html[html.index('id="warnings"') : html.index("</ul>", html.index('id="warnings"'))]
    assert f"rig.json: {escape(RIG_WARNING)}" in warnings
    table = html[html.index('id="chronograph"') :]
    assert "95.5 ± 0.5 m/s" in table and "from the chronograph" in table
    # each shot's video speed against the chronograph, with the difference in σ
    assert len(re.findall(r"video speed track\.csv#\d.*?m/s from the chronograph, [+-]\d+\.\d σ", table)) == 2


def test_report_figures_have_titles(rigged_html):
    titles = re.findall(r'<figure id="fig-[\w-]+">\s*<h3>([^<]+)</h3>', rigged_html)
    assert len(titles) == N_FIGURES and all(titles) and len(set(titles)) == N_FIGURES


def test_report_with_a_track_that_is_not_in_the_fit_names_the_file(rigged, tmp_path, capsys):
    other = tmp_path / "other.csv"
    other.write_text(track_to_csv(synthetic_track(rig=simple_rig(1920, 1080).digest)))
    out = tmp_path / "r.html"
    assert cli.main(["report", str(rigged / "fit.json"), "--track", str(other), "-o", str(out)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "other.csv" in err[0] and "none of its shots is in the fit" in err[0]
    # same name as the fitted track, other points (another folder's track.csv)
    (tmp_path / "b").mkdir()
    (tmp_path / "b" / "track.csv").write_text(track_to_csv(synthetic_track(n=30, rig="x")))
    assert cli.main(["report", str(rigged / "fit.json"), "--track", str(tmp_path / "b" / "track.csv"),
                     "-o", str(out)]) == 2  # fmt: skip
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "b/track.csv" in err[0] and "not the track the fit was made from" in err[0]
    assert not out.exists()


def test_report_css_does_not_change_the_case_of_text():
    # upper-casing turns τ into Τ and χ² into Χ²: the page shows labels as written
    css = (ROOT / "hopscope" / "report" / "templates" / "report.css").read_text(encoding="utf-8")
    assert not re.search(r"text-transform\s*:\s*(uppercase|capitalize)", css)


@pytest.mark.browser
def test_report_in_headless_chromium(rigged, tmp_path):
    out = tmp_path / "report.html"
    assert cli.main([*_report_argv(rigged, out), "--range-m", "40"]) == 0
    page = open_report(out, ARTIFACTS / "report.png")
    assert page.console_errors == ()
    assert page.images_total == N_FIGURES and page.images_loaded == N_FIGURES
    assert page.parameter_rows >= 10
    assert "Eye protection" in page.text and "chronograph" in page.text
    assert (ARTIFACTS / "report.png").stat().st_size > 10_000
    # headings and labels as the browser shows them (after CSS): Greek letters keep their case
    assert "spin decay time τ" in page.headings
    assert any("χ²" in h for h in page.headings)
    assert "Warnings" in page.headings and "Chronograph and video" in page.headings
    assert sum(h.startswith(("Tracked points", "Residuals", "Speed and", "Predicted", "Shots inside"))
               for h in page.headings) == N_FIGURES  # fmt: skip
    # the calibration's own warning is in the page's Warnings list
    assert f"rig.json: {RIG_WARNING}" in page.warnings


def test_report_command_rejects_a_non_finite_value(fit_json, tmp_path, capsys):
    doc = json.loads(fit_json.read_text())
    doc["aero"]["drag_coefficient"]["value"] = float("nan")
    bad = tmp_path / "nan.json"
    bad.write_text(json.dumps(doc))  # json writes the NaN literal
    out = tmp_path / "r.html"
    assert cli.main(["report", str(bad), "-o", str(out)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "nan.json" in err[0] and "drag_coefficient" in err[0]
    assert not out.exists()


def test_report_command_rejects_a_track_of_another_schema(fit_json, tmp_path, capsys):
    track = tmp_path / "track.csv"
    track.write_text("# schema: hopscope.track/7\nframe,t_s\n")
    out = tmp_path / "r.html"
    assert cli.main(["report", str(fit_json), "--track", str(track), "-o", str(out)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "track.csv" in err[0] and "schema" in err[0]
    assert not out.exists()


def test_report_with_a_null_stderr_renders(fit_json, tmp_path):
    # a fit may leave a standard error null (the reader allows it); the page shows "± ?" instead
    doc = json.loads(fit_json.read_text())
    doc["shots"][0]["initial"]["speed_mps"]["stderr"] = None
    doc["aero"]["drag_coefficient"]["stderr"] = None
    path = tmp_path / "nulls.json"
    path.write_text(json.dumps(doc))
    html = render_report(load_report_inputs(path))
    assert "± ?" in html


# ---------------------------------------------------------------------------------------------- measured spin

#: Invented records of a marked BB's flicker (layout of fitting.spin.shot_spin_to_json): an aliased shot whose
#: prior picked the second candidate, with a per-time decay fit, and an aliased shot no prior could settle.
PICKED_RADPS = (13823.0, 17593.0)
PICKED_PRIOR = "fitted C_L 0.0545 ± 0.001 under the test lift law"
UNPICKED_REASON = "aliased: the prior 1000 ± 250 rad/s (test prior) matches no candidate within 3 σ"
#: Flicker decay constant of the first record, 1/s (and its σ).
FLICKER_LAMBDA = (0.5, 0.05)


def _spin_records() -> list[dict]:
    decay = {
        "per": "time",
        "reference": 0.01,
        "rate0_radps": {"value": PICKED_RADPS[1], "stderr": 40.0},
        "decay_constant": {"value": FLICKER_LAMBDA[0], "stderr": FLICKER_LAMBDA[1]},
        "scale": {"value": 1.0, "stderr": 0.01},
        "n_windows": 4,
        "reduced_chi2": 1.1,
        "reason": None,
    }
    picked = {
        "rate_radps": {"value": PICKED_RADPS[1], "stderr": 40.0},
        "at_t_s": 0.0104,
        "candidates_radps": list(PICKED_RADPS),
        "marking": "half-axis-toward-camera",
        "method": f"lomb-scargle, alias chosen by prior ({PICKED_PRIOR})",
        "reason": None,
        "decay": decay,
        "decay_reason": None,
    }
    unpicked = {
        "rate_radps": {"value": None, "stderr": None},
        "at_t_s": 0.025,
        "candidates_radps": list(PICKED_RADPS),
        "marking": "half-axis-toward-camera",
        "method": "lomb-scargle",
        "reason": UNPICKED_REASON,
        "decay": None,
        "decay_reason": "decay not measured: no spin rate",
    }
    return [picked, unpicked]


@pytest.fixture(scope="module")
def spin_fit_json(fit_json, tmp_path_factory) -> Path:
    """The two-shot fit with a measured spin on each shot and ``aero.spin_decay`` remade from them."""
    from hopscope.fitting.decay_source import with_decay_source

    doc = json.loads(fit_json.read_text(encoding="utf-8"))
    for shot, rec in zip(doc["shots"], _spin_records(), strict=True):
        shot["spin_measured"] = rec
    path = tmp_path_factory.mktemp("spin") / "fit.json"
    path.write_text(json.dumps(with_decay_source(doc), allow_nan=False), encoding="utf-8")
    return path


def _spin_table(html: str) -> str:
    start = html.index('id="spin"')
    return html[start : html.index("</table>", start)]


def test_report_shows_each_measured_spin_with_its_candidates_and_choice(spin_fit_json):
    from hopscope.shared.units import radps_to_rpm

    html = render_report(load_report_inputs(spin_fit_json))
    rows = re.findall(r"<tr><td>(.*?)</td></tr>", _spin_table(html), flags=re.S)
    assert len(rows) == 2  # one per shot with spin_measured
    picked, unpicked = rows
    # rate in rpm and rad/s with σ, its time, the marking and the method naming the prior
    assert f"{radps_to_rpm(PICKED_RADPS[1]):.0f} ± {radps_to_rpm(40.0):.2g} rpm" in picked
    assert f"{PICKED_RADPS[1]:.5g} ± 40 rad/s" in picked and "10.400 ms" in picked
    assert "half-axis-toward-camera" in picked and str(escape(PICKED_PRIOR)) in picked
    for c in PICKED_RADPS:  # both candidates, in both units
        assert f"{radps_to_rpm(c):.0f} rpm ({c:.0f} rad/s)" in picked and f"({c:.0f} rad/s)" in unpicked
    assert "picked by a stated prior" in picked
    # no rate: the record's reason, and that no candidate was picked
    assert "not measured" in unpicked and "none picked" in unpicked
    assert str(escape(UNPICKED_REASON)) in unpicked and "rpm (" not in unpicked.split("</td>")[1]


def test_report_shows_the_shared_spin_decay_with_its_source(spin_fit_json):
    from hopscope.fitting.decay_source import SOURCES

    doc = json.loads(spin_fit_json.read_text(encoding="utf-8"))
    block = doc["aero"]["spin_decay"]
    # the flicker's decay is one of the parts, so the source is "measured" or "combined", never "assumed"
    assert block["source"] in SOURCES and block["source"] in ("measured", "combined")
    html = render_report(load_report_inputs(spin_fit_json))
    start = html.index('id="spin-decay"')
    line = html[start : html.index("</p>", start)]
    lam = block["rate_per_s"]
    assert f"source {block['source']}" in line
    assert f"λ = {lam['value']:.3g} ± {lam['stderr']:.2g} 1/s" in line


def test_report_without_measured_spin_has_no_spin_section(fit_json):
    assert 'id="spin"' not in render_report(load_report_inputs(fit_json))


def test_spin_screen_rows_one_per_measured_shot_then_the_decay(spin_fit_json):
    from hopscope.summaries import measured_spin_rows

    doc = json.loads(spin_fit_json.read_text(encoding="utf-8"))
    rows = measured_spin_rows(doc)
    labels = [s["label"] for s in doc["shots"]]
    assert [r[0] for r in rows] == [f"{lbl} spin (measured)" for lbl in labels] + ["spin decay (shared)"]
    assert "rpm" in rows[0][1] and PICKED_PRIOR in rows[0][1]
    assert rows[1][1].startswith(f"not measured: {UNPICKED_REASON}")
    assert f"source {doc['aero']['spin_decay']['source']}" in rows[2][1]
    doc_plain = {**doc, "shots": [{k: v for k, v in s.items() if k != "spin_measured"} for s in doc["shots"]]}
    assert measured_spin_rows(doc_plain) == []


@pytest.mark.browser
def test_measured_spin_in_headless_chromium(spin_fit_json, tmp_path):
    from hopscope.shared.units import radps_to_rpm

    out = tmp_path / "spin.html"
    assert cli.main(["report", str(spin_fit_json), "-o", str(out)]) == 0
    page = open_report(out, ARTIFACTS / "report-spin.png")
    assert page.console_errors == ()
    assert "Measured spin" in page.headings
    assert f"{radps_to_rpm(PICKED_RADPS[1]):.0f} ±" in page.text and "none picked" in page.text
    assert "Spin decay (shared by all shots): source" in page.text
