"""``hopscope run`` on the command line: one clip, a folder of clips (joint fit), and every bad input.

Bad input (one case per test) exits 2 with one stderr line naming the file or option, no traceback, and
leaves no output behind (the output folder is not created, or is left as it was).
"""

from __future__ import annotations

import json
import os
import re
import shutil
import socket
from pathlib import Path

import cv2
import numpy as np
import pytest

from hopscope import cli
from hopscope.calibration.rig import read_rig
from hopscope.errors import EXIT_BAD_INPUT, EXIT_OK
from hopscope.fitting.estimate import fit_shots
from hopscope.fitting.fitfile import read_fit
from hopscope.folders import LOCK_NAME, MANIFEST_NAME
from hopscope.pipeline import calibrate_scene, fitted_paths_px, shots_from_track
from hopscope.scenes import LensViewsSpec, render_scene, small_scene
from hopscope.tracker.overlay import FIT_COLOUR
from hopscope.tracker.trackfile import read_track

#: Lens views of the small scene (the lens calibration needs at least 5 with the grid found).
N_LENS_VIEWS = 8
#: The small scene's BB mass, g, and exposure, ms (as a user would type them).
MASS_G = "0.25"
EXPOSURE_MS = "0.05"


@pytest.fixture(scope="module")
def inputs(tmp_path_factory):
    d = tmp_path_factory.mktemp("run-inputs")
    spec = small_scene(lens=LensViewsSpec(n_views=N_LENS_VIEWS))
    first = render_scene(spec, d / "scene", rng=0)
    # a second shot through the same camera (the camera does not depend on the seed), another noise draw
    second = render_scene(spec, d / "scene2", rng=1, parts=("flight",))
    rig = d / "rig.json"
    calibrate_scene(first, rig, seed=0)
    clips = d / "clips"
    clips.mkdir()
    shutil.copy(first.flight_clip_path, clips / "shot_a.mp4")
    shutil.copy(second.flight_clip_path, clips / "shot_b.mp4")
    return {"rig": rig, "clip": clips / "shot_a.mp4", "clips": clips, "dir": d}


def _run(argv: list[str]) -> int:
    """The exit code of ``hopscope run ARGV`` (usage errors exit through argparse)."""
    try:
        return cli.main(["run", *argv])
    except SystemExit as exc:
        return int(exc.code or 0)


def _base(inputs, out: Path, *, video: str | None = None, rig: str | None = None) -> list[str]:
    return [
        video or str(inputs["clip"]),
        "--rig",
        rig or str(inputs["rig"]),
        "--mass-g",
        MASS_G,
        "--exposure-ms",
        EXPOSURE_MS,
        "--out",
        str(out),
    ]


def _bad(capsys, argv: list[str], out: Path, needle: str) -> None:
    """Exit 2, one stderr line naming ``needle``, no traceback, no output folder."""
    rc = _run(argv)
    err = capsys.readouterr().err
    lines = [ln for ln in err.splitlines() if ln.strip()]
    assert rc == EXIT_BAD_INPUT, err
    assert len(lines) == 1, err
    assert needle in lines[0] and "Traceback" not in err
    assert not out.exists()


# ------------------------------------------------------------------------------------------ success


@pytest.fixture(scope="module")
def one_run(inputs, tmp_path_factory):
    out = tmp_path_factory.mktemp("one") / "out"
    rc = _run([*_base(inputs, out), "--temp-c", "20", "--pressure-hpa", "1013.25", "--humidity-pct", "50"])
    return rc, out


def test_run_one_clip_writes_everything(one_run):
    rc, out = one_run
    assert rc == EXIT_OK
    assert sorted(p.name for p in out.iterdir()) == [
        MANIFEST_NAME,
        *ONE_SHOT_FIGURES,
        "fit.json",
        "overlay.png",
        "report.html",
        "rig.json",
        "track.csv",
    ]
    for name in ONE_SHOT_FIGURES:
        assert (out / name).read_bytes().startswith(b"\x89PNG")
    fit = read_fit(out / "fit.json")
    assert fit.n_shots == 1 and fit.converged
    assert read_track(out / "track.csv").n_points > 5


#: The report's figures, also written beside it (sorted by name; two shots or more add the spread figure).
ONE_SHOT_FIGURES = [
    "figure_plane.png", "figure_prediction.png", "figure_range.png", "figure_residuals.png",
    "figure_speed-lift.png",
]  # fmt: skip

#: The fitted path, projected back into the image, passes the tracked points within this (px): the fit's
#: residuals are a few tenths of a pixel on the small scene.
FITTED_PATH_TOL_PX = 1.0


def test_fitted_path_projects_onto_the_tracked_points_and_is_drawn(inputs, one_run):
    _, out = one_run
    fit = read_fit(out / "fit.json")
    shots, _, _ = shots_from_track(out / "track.csv")
    result = fit_shots(shots, bb=fit.bb, air=fit.air)
    paths = fitted_paths_px(result, read_rig(inputs["rig"]))
    track = read_track(out / "track.csv")
    uv = paths["track.csv#0"]
    dense = np.linspace(0.0, 1.0, 50 * len(uv))
    # distance from each tracked point to the projected polyline (densely resampled)
    line = np.column_stack([np.interp(dense, np.linspace(0, 1, len(uv)), uv[:, k]) for k in (0, 1)])
    d = np.min(
        np.hypot(track.u_px[:, None] - line[None, :, 0], track.v_px[:, None] - line[None, :, 1]), axis=1
    )
    assert np.max(d) < FITTED_PATH_TOL_PX
    img = cv2.imread(str(out / "overlay.png"))
    assert np.count_nonzero(np.all(img == np.array(FIT_COLOUR, np.uint8), axis=2)) > 20


def test_run_report_holds_the_parameter_table_and_links(one_run):
    _, out = one_run
    html = (out / "report.html").read_text(encoding="utf-8")
    for needle in ('href="overlay.png"', 'href="track.csv"', 'href="fit.json"', "C_D"):
        assert needle in html


def test_run_prints_table_and_summary(inputs, tmp_path, capsys):
    rc = _run(_base(inputs, tmp_path / "out"))
    text = capsys.readouterr()
    assert rc == EXIT_OK
    assert "hopscope fit" in text.out and "hopscope run" in text.out and "C_D" in text.out
    # the group's hop verdict read off the predicted path, with which way to turn the adjuster
    verdict = r"group \(mean shot\)\s+(flat|under-hopped|over-hopped|undetermined)"
    assert re.search(verdict, text.out), text.out
    # the clip's frame rate in frames/s; fps appears only as a speed (after a number in m/s)
    assert re.search(r"\d+ frames at 2000 frames/s", text.out), text.out
    assert all("m/s" in ln for ln in text.out.splitlines() if "fps" in ln), text.out
    # the defaulted air conditions are a warning; the tracker's warnings are shown once each
    assert "warning: air conditions not given" in text.err
    lines = [ln for ln in text.err.splitlines() if ln.startswith("warning:")]
    assert len(lines) == len(set(lines))


def test_run_folder_of_clips_fits_jointly(inputs, tmp_path):
    out = tmp_path / "batch"
    rc = _run(_base(inputs, out, video=str(inputs["clips"])))
    assert rc == EXIT_OK
    names = sorted(p.name for p in out.iterdir())
    assert names == [
        MANIFEST_NAME,
        *ONE_SHOT_FIGURES,
        "figure_spread.png",
        "fit.json",
        "overlay_shot_a.png",
        "overlay_shot_b.png",
        "report.html",
        "rig.json",
        "track_shot_a.csv",
        "track_shot_b.csv",
    ]
    data = json.loads((out / "fit.json").read_text())
    assert len(data["shots"]) == 2
    html = (out / "report.html").read_text(encoding="utf-8")
    assert 'href="overlay_shot_a.png"' in html and 'href="overlay_shot_b.png"' in html
    # the same folder again, one clip: the earlier run's per-clip files and spread figure go, a file of
    # the user's stays
    (out / "notes.txt").write_text("mine")
    assert _run(_base(inputs, out)) == EXIT_OK
    assert sorted(p.name for p in out.iterdir()) == sorted(
        [MANIFEST_NAME, *ONE_SHOT_FIGURES, "fit.json", "notes.txt", "overlay.png", "report.html", "rig.json",
         "track.csv"]
    )  # fmt: skip


def test_run_and_demo_help(capsys):
    for name in ("run", "demo"):
        with pytest.raises(SystemExit) as exc:
            cli.main([name, "--help"])
        assert exc.value.code == 0
        assert f"usage: hopscope {name}" in capsys.readouterr().out


# ------------------------------------------------------------------------------------------ bad input


def test_missing_video(inputs, tmp_path, capsys):
    out = tmp_path / "out"
    _bad(capsys, _base(inputs, out, video=str(tmp_path / "nothere.mp4")), out, "nothere.mp4")


def test_empty_video(inputs, tmp_path, capsys):
    empty = tmp_path / "empty.mp4"
    empty.write_bytes(b"")
    out = tmp_path / "out"
    _bad(capsys, _base(inputs, out, video=str(empty)), out, "empty.mp4")


def test_corrupt_video(inputs, tmp_path, capsys):
    corrupt = tmp_path / "corrupt.mp4"
    corrupt.write_bytes(b"\x00\x00\x00\x18ftypmp42" + bytes(range(256)) * 20)
    out = tmp_path / "out"
    _bad(capsys, _base(inputs, out, video=str(corrupt)), out, "corrupt.mp4")


def test_missing_rig(inputs, tmp_path, capsys):
    out = tmp_path / "out"
    _bad(capsys, _base(inputs, out, rig=str(tmp_path / "norig.json")), out, "norig.json")


def test_rig_of_another_schema(inputs, tmp_path, capsys):
    rig = tmp_path / "rig9.json"
    rig.write_text(inputs["rig"].read_text().replace("hopscope.rig/1", "hopscope.rig/9"))
    out = tmp_path / "out"
    _bad(capsys, _base(inputs, out, rig=str(rig)), out, "rig9.json")


def test_rig_with_a_non_finite_value(inputs, tmp_path, capsys):
    data = json.loads(inputs["rig"].read_text())
    data["reprojection_rms_px"] = float("nan")
    rig = tmp_path / "rignan.json"
    rig.write_text(json.dumps(data))
    out = tmp_path / "out"
    _bad(capsys, _base(inputs, out, rig=str(rig)), out, "rignan.json")


def test_track_file_given_as_rig(inputs, one_run, tmp_path, capsys):
    out = tmp_path / "out"
    track = one_run[1] / "track.csv"
    _bad(capsys, _base(inputs, out, rig=str(track)), out, "track.csv")


def test_wrong_mass_value(inputs, tmp_path, capsys):
    out = tmp_path / "out"
    argv = _base(inputs, out)
    argv[argv.index("--mass-g") + 1] = "heavy"
    _bad(capsys, argv, out, "--mass-g")


def test_negative_exposure(inputs, tmp_path, capsys):
    out = tmp_path / "out"
    argv = _base(inputs, out)
    argv[argv.index("--exposure-ms") + 1] = "-1"
    _bad(capsys, argv, out, "--exposure-ms")


def test_bad_chrono_value(inputs, tmp_path, capsys):
    out = tmp_path / "out"
    _bad(capsys, [*_base(inputs, out), "--chrono-mps", "fast"], out, "--chrono-mps")


def test_out_is_a_file(inputs, tmp_path, capsys):
    out = tmp_path / "taken"
    out.write_text("mine")
    rc = _run(_base(inputs, out))
    err = capsys.readouterr().err
    assert rc == EXIT_BAD_INPUT and len(err.strip().splitlines()) == 1 and "taken" in err
    assert out.read_text() == "mine"


def test_clips_with_the_same_stem(inputs, tmp_path, capsys):
    other = tmp_path / "elsewhere"
    other.mkdir()
    shutil.copy(inputs["clip"], other / "shot_a.mov")
    out = tmp_path / "out"
    argv = _base(inputs, out)
    argv.insert(1, str(other / "shot_a.mov"))
    _bad(capsys, argv, out, "shot_a.mov")


def test_failed_step_in_an_existing_folder_leaves_it_as_it_was(inputs, tmp_path, capsys):
    corrupt = tmp_path / "corrupt.mp4"
    corrupt.write_bytes(b"not a video at all" * 50)
    out = tmp_path / "existing"
    out.mkdir()
    (out / "keep.txt").write_text("earlier")
    rc = _run(_base(inputs, out, video=str(corrupt)))
    err = capsys.readouterr().err
    assert rc == EXIT_BAD_INPUT and "corrupt.mp4" in err and len(err.strip().splitlines()) == 1
    assert sorted(p.name for p in out.iterdir()) == ["keep.txt"]


def test_muzzle_position_not_a_number(inputs, tmp_path, capsys):
    out = tmp_path / "out"
    _bad(capsys, [*_base(inputs, out), "--muzzle-x-m", "nan"], out, "--muzzle-x-m")


def test_run_shows_a_progress_bar_when_asked(inputs, tmp_path, capsys, monkeypatch):
    monkeypatch.setenv("HOPSCOPE_PROGRESS", "1")
    rc = _run(_base(inputs, tmp_path / "out"))
    assert rc == EXIT_OK
    assert "tracking" in capsys.readouterr().err


def test_a_folder_another_run_is_writing_into_is_refused_with_one_line(inputs, tmp_path, capsys):
    out = tmp_path / "busy"
    out.mkdir()
    # a live process holds the lock (this one, as another run would)
    (out / LOCK_NAME).write_text(f"{os.getpid()} {socket.gethostname()}\n")
    rc = _run(_base(inputs, out))
    err = capsys.readouterr().err.strip().splitlines()
    assert rc == EXIT_BAD_INPUT and len(err) == 1, err
    assert "another hopscope run is writing into this folder" in err[0] and LOCK_NAME in err[0]
    assert sorted(p.name for p in out.iterdir()) == [LOCK_NAME]


def test_the_run_report_links_only_files_inside_its_folder(one_run):
    _, out = one_run
    html = (out / "report.html").read_text(encoding="utf-8")
    hrefs = re.findall(r'href="([^"]+)"', html)
    assert 'href="rig.json"' in html and (out / "rig.json").is_file()
    assert hrefs and all("/" not in h and not h.startswith("..") for h in hrefs), hrefs
