"""A rig kept with ``--keep-failed-drop``: every later command repeats its ``warning:`` and the report marks it.

The rig is the small scene's own calibration with a failed drop check attached (as ``calibrate
--keep-failed-drop`` writes it); a twin without the check is the control, whose commands stay silent about
it.
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from hopscope import cli
from hopscope.calibration.dropcheck import DROP_FAILED_MARK, DropCheck, Measured
from hopscope.calibration.rig import read_rig, rig_to_json
from hopscope.errors import EXIT_OK
from hopscope.fitting.fitfile import read_fit
from hopscope.pipeline import calibrate_scene
from hopscope.scenes import LensViewsSpec, render_scene, small_scene
from hopscope.tracker.trackfile import read_track

from .browser import open_report

#: Lens views of the small scene (the lens calibration needs at least 5 with the grid found).
N_LENS_VIEWS = 8
#: The small scene's BB mass, g, and exposure, ms (as a user would type them).
MASS_G = "0.25"
EXPOSURE_MS = "0.05"
ARTIFACTS = Path(__file__).resolve().parents[2] / "test-artifacts"

FAILED_CHECK = DropCheck(
    clip="drop.mp4",
    timing="container timestamps",
    fps=500.0,
    frames=150,
    g_expected_mps2=9.80665,
    verdict="inconsistent",
    reason="the frame rate is probably wrong",
    g_measured_mps2=Measured(2.46, 0.02),
    likely_cause="frame rate",
    kept_by_user=True,
)


@pytest.fixture(scope="module")
def rigs(tmp_path_factory):
    d = tmp_path_factory.mktemp("failed-drop")
    scene = render_scene(small_scene(lens=LensViewsSpec(n_views=N_LENS_VIEWS)), d / "scene", rng=0)
    good = d / "good_rig.json"
    calibrate_scene(scene, good, seed=0)
    bad = d / "kept_rig.json"
    bad.write_text(rig_to_json(read_rig(good).with_drop_check(FAILED_CHECK)), encoding="utf-8")
    return {"good": good, "bad": bad, "clip": scene.flight_clip_path, "dir": d}


def _cli(capsys, argv: list[str]) -> tuple[int, str]:
    rc = cli.main(argv)
    return rc, capsys.readouterr().err


def _drop_warnings(err: str) -> list[str]:
    return [ln for ln in err.splitlines() if ln.startswith("warning:") and DROP_FAILED_MARK in ln]


def _track(capsys, rigs, which: str, out: Path) -> str:
    argv = [
        "track",
        str(rigs["clip"]),
        "--rig",
        str(rigs[which]),
        "--exposure-ms",
        EXPOSURE_MS,
        "-o",
        str(out),
    ]
    rc, err = _cli(capsys, argv)
    assert rc == EXIT_OK, err
    return err


@pytest.fixture(scope="module")
def tracked(rigs, tmp_path_factory):
    d = tmp_path_factory.mktemp("tracked")
    out = {}
    for which in ("good", "bad"):
        path = d / f"{which}_track.csv"
        rc = cli.main(
            [
                "track",
                str(rigs["clip"]),
                "--rig",
                str(rigs[which]),
                "--exposure-ms",
                EXPOSURE_MS,
                "-o",
                str(path),
            ]
        )
        assert rc == EXIT_OK
        out[which] = path
    return out


def test_track_repeats_the_warning_and_carries_it_into_the_track(rigs, tmp_path, capsys):
    bad_err = _track(capsys, rigs, "bad", tmp_path / "bad.csv")
    good_err = _track(capsys, rigs, "good", tmp_path / "good.csv")
    lines = _drop_warnings(bad_err)
    assert len(lines) == 1 and "kept_rig.json" in lines[0] and "g = 2.46" in lines[0], bad_err
    assert _drop_warnings(good_err) == []
    carried = [w for w in read_track(tmp_path / "bad.csv").meta.warnings if DROP_FAILED_MARK in w]
    assert carried and "likely cause: frame rate" in carried[0]
    assert not [w for w in read_track(tmp_path / "good.csv").meta.warnings if DROP_FAILED_MARK in w]


def test_fit_of_tracks_from_the_kept_rig_repeats_it(tracked, tmp_path, capsys):
    for which, expected in (("bad", 1), ("good", 0)):
        out = tmp_path / f"{which}_fit.json"
        rc, err = _cli(capsys, ["fit", str(tracked[which]), "--mass-g", MASS_G, "-o", str(out)])
        assert rc == EXIT_OK, err
        assert len(_drop_warnings(err)) == expected, err
        in_file = [w for w in read_fit(out).warnings if DROP_FAILED_MARK in w]
        assert len(in_file) == expected


def _report(capsys, rigs, tracked, which: str, out: Path) -> str:
    fit = out.with_suffix(".json")
    assert cli.main(["fit", str(tracked[which]), "--mass-g", MASS_G, "-o", str(fit)]) == EXIT_OK
    capsys.readouterr()
    argv = ["report", str(fit), "--track", str(tracked[which]), "--rig", str(rigs[which]), "-o", str(out)]
    rc, err = _cli(capsys, argv)
    assert rc == EXIT_OK, err
    return err


def test_report_with_the_kept_rig_warns_and_marks_the_page(rigs, tracked, tmp_path, capsys):
    err = _report(capsys, rigs, tracked, "bad", tmp_path / "bad.html")
    # the fit's own (carried from the track) and the rig's, named by the rig file
    lines = _drop_warnings(err)
    assert len(lines) == 2 and any(
        ln.startswith(f"warning: {rigs['bad']}: {DROP_FAILED_MARK}") for ln in lines
    )
    html = (tmp_path / "bad.html").read_text(encoding="utf-8")
    assert 'id="drop-failed"' in html and "Calibration failed its drop check" in html
    good = _report(capsys, rigs, tracked, "good", tmp_path / "good.html")
    assert _drop_warnings(good) == []
    assert 'id="drop-failed"' not in (tmp_path / "good.html").read_text(encoding="utf-8")


def test_report_without_rig_marks_the_page_from_the_tracks(rigs, tracked, tmp_path, capsys):
    fit = tmp_path / "fit.json"
    assert cli.main(["fit", str(tracked["bad"]), "--mass-g", MASS_G, "-o", str(fit)]) == EXIT_OK
    out = tmp_path / "report.html"
    rc, err = _cli(capsys, ["report", str(fit), "-o", str(out)])
    assert rc == EXIT_OK and _drop_warnings(err), err
    assert 'id="drop-failed"' in out.read_text(encoding="utf-8")


@pytest.mark.browser
def test_run_with_the_kept_rig_warns_and_the_page_shows_it(rigs, tmp_path, capsys):
    out = tmp_path / "out"
    argv = ["run", str(rigs["clip"]), "--rig", str(rigs["bad"]), "--mass-g", MASS_G]
    rc, err = _cli(capsys, [*argv, "--exposure-ms", EXPOSURE_MS, "--out", str(out)])
    assert rc == EXIT_OK, err
    assert _drop_warnings(err), err
    data = json.loads((out / "fit.json").read_text(encoding="utf-8"))
    assert any(DROP_FAILED_MARK in w for w in data["warnings"])
    page = open_report(out / "report.html", ARTIFACTS / "report_failed_drop.png")
    assert "Calibration failed its drop check" in page.headings
    assert "Every number on this page may be scaled wrong." in page.text
    assert sum(DROP_FAILED_MARK in w for w in page.warnings) == 1, page.warnings  # said once, not per source
