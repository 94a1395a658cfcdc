"""``hopscope.pipeline``: clip lists, output plans, the track/fit/report steps and their atomic outputs.

The scene is the small built-in test scene (320×240, 2000 fps), rendered once for the module and
calibrated through :func:`hopscope.pipeline.calibrate_scene`.
"""

from __future__ import annotations

import dataclasses
from pathlib import Path

import numpy as np
import pytest

from hopscope.calibration.rig import read_rig
from hopscope.fitting.air import Air
from hopscope.fitting.bb import BB
from hopscope.fitting.fitfile import read_fit
from hopscope.pipeline import (
    FitSettings,
    calibrate_scene,
    expand_videos,
    fit_track_files,
    plan_run,
    sibling_links,
    track_to_files,
)
from hopscope.report import load_report_inputs, write_report
from hopscope.scenes import LensViewsSpec, render_scene, small_scene
from hopscope.shared.units import mm_to_m
from hopscope.tracker.pipeline import TrackOptions
from hopscope.tracker.trackfile import read_track

#: Lens views of the small scene (the lens calibration needs at least 5 with the grid found).
N_LENS_VIEWS = 8
#: Parallax given to the calibration, mm.
PARALLAX_MM = 2.0
#: Mass of the small scene's BB, kg (the scene's default).
MASS_KG = 2.5e-4


@pytest.fixture(scope="module")
def scene(tmp_path_factory):
    d = tmp_path_factory.mktemp("small")
    spec = small_scene(lens=LensViewsSpec(n_views=N_LENS_VIEWS))
    rendered = render_scene(spec, d / "scene", rng=0)
    rig_path = d / "rig.json"
    run = calibrate_scene(rendered, rig_path, seed=0, parallax_mm=PARALLAX_MM, parallax_sigma_mm=0.5)
    return {"rendered": rendered, "rig_path": rig_path, "run": run, "dir": d}


def _partials(folder: Path) -> list[str]:
    return sorted(p.name for p in folder.rglob("*") if ".partial" in p.name)


def _touch(path: Path, data: bytes = b"x") -> Path:
    path.write_bytes(data)
    return path


# ------------------------------------------------------------------------------------------ inputs


def test_expand_videos_folder_gives_its_videos_sorted(tmp_path):
    for name in ("b.mp4", "a.MOV", "notes.txt", "c.mkv"):
        _touch(tmp_path / name)
    got = expand_videos([tmp_path])
    assert [p.name for p in got] == ["a.MOV", "b.mp4", "c.mkv"]


def test_expand_videos_missing_file_is_named(tmp_path):
    with pytest.raises(FileNotFoundError, match=r"nothere\.mp4: no such video file"):
        expand_videos([tmp_path / "nothere.mp4"])


def test_expand_videos_empty_file_is_named(tmp_path):
    empty = _touch(tmp_path / "empty.mp4", b"")
    with pytest.raises(ValueError, match=r"empty\.mp4: the video file is empty"):
        expand_videos([empty])


def test_expand_videos_folder_without_videos(tmp_path):
    _touch(tmp_path / "readme.txt")
    with pytest.raises(ValueError, match="holds no video files"):
        expand_videos([tmp_path])


def test_expand_videos_same_clip_twice(tmp_path):
    clip = _touch(tmp_path / "a.mp4")
    with pytest.raises(ValueError, match=r"a\.mp4: the same clip is given twice"):
        expand_videos([clip, tmp_path])


def test_plan_one_clip_uses_plain_names(tmp_path):
    plan = plan_run([Path("x/shot.mp4")], tmp_path)
    assert [p.name for p in plan.track_paths] == ["track.csv"]
    assert [p.name for p in plan.overlay_paths] == ["overlay.png"]
    assert plan.fit_path == tmp_path / "fit.json" and plan.report_path == tmp_path / "report.html"


def test_plan_several_clips_use_their_stems(tmp_path):
    plan = plan_run([Path("a/s1.mp4"), Path("b/s2.mov")], tmp_path)
    assert [p.name for p in plan.track_paths] == ["track_s1.csv", "track_s2.csv"]
    assert [p.name for p in plan.overlay_paths] == ["overlay_s1.png", "overlay_s2.png"]


def test_plan_rejects_colliding_stems(tmp_path):
    with pytest.raises(ValueError, match=r"b/shot\.mov: same file name stem as a/shot\.mp4"):
        plan_run([Path("a/shot.mp4"), Path("b/shot.mov")], tmp_path)


def test_sibling_links_are_relative_to_the_report(tmp_path):
    (tmp_path / "sub").mkdir()
    links = sibling_links(
        tmp_path / "report.html", [tmp_path / "overlay.png", None, tmp_path / "sub" / "t.csv"]
    )
    assert links == (("overlay.png", "overlay.png"), ("t.csv", "sub/t.csv"))


# ------------------------------------------------------------------------------------------ steps


def test_calibrate_scene_writes_the_rig_with_the_parallax(scene):
    rig = read_rig(scene["rig_path"])
    assert rig.digest == scene["run"].rig.digest
    assert rig.plane_z_m == mm_to_m(PARALLAX_MM)
    # the lens fit also uses the plane view (joint refinement of lens and plane poses)
    assert len(scene["run"].lens.views_used) == N_LENS_VIEWS + len(scene["rendered"].plane_views)


def test_track_to_files_writes_track_and_overlay(scene, tmp_path):
    rendered = scene["rendered"]
    rig = read_rig(scene["rig_path"])
    exposure_s = rendered.truth["camera"]["exposure_s"]
    clip = track_to_files(
        rendered.flight_clip_path,
        rig,
        TrackOptions(exposure_s=exposure_s),
        track_path=tmp_path / "t.csv",
        overlay_path=tmp_path / "o.png",
    )
    track = read_track(tmp_path / "t.csv")
    assert track.n_points == clip.result.track.n_points > 5
    assert track.meta.rig_digest == rig.digest and track.meta.exposure_s == exposure_s
    assert (tmp_path / "o.png").stat().st_size > 0
    assert _partials(tmp_path) == []


def test_track_to_files_without_a_bb_writes_nothing(scene, tmp_path):
    import av

    rig = read_rig(scene["rig_path"])
    w, h = rig.image_size
    clip = tmp_path / "empty_lane.mp4"
    with av.open(str(clip), "w") as out:
        stream = out.add_stream("libx264", rate=240)
        stream.width, stream.height, stream.pix_fmt = w, h, "yuv420p"
        rng = np.random.default_rng(0)
        for _ in range(12):
            grey = np.clip(60 + rng.normal(0, 2, (h, w)), 0, 255).astype(np.uint8)
            frame = av.VideoFrame.from_ndarray(np.dstack([grey] * 3), format="rgb24")
            for packet in stream.encode(frame):
                out.mux(packet)
        for packet in stream.encode():
            out.mux(packet)
    with pytest.raises(ValueError, match=r"empty_lane\.mp4: .*no track written"):
        track_to_files(
            clip, rig, TrackOptions(), track_path=tmp_path / "t.csv", overlay_path=tmp_path / "o.png"
        )
    assert sorted(p.name for p in tmp_path.iterdir()) == ["empty_lane.mp4"]


@pytest.fixture(scope="module")
def tracked(scene, tmp_path_factory):
    d = tmp_path_factory.mktemp("tracked")
    rendered = scene["rendered"]
    opt = TrackOptions(exposure_s=rendered.truth["camera"]["exposure_s"])
    clip = track_to_files(
        rendered.flight_clip_path, read_rig(scene["rig_path"]), opt, track_path=d / "track.csv"
    )
    return clip


def test_fit_track_files_is_deterministic_and_keeps_notes_first(tracked, tmp_path):
    bb, air = BB(MASS_KG), Air.standard()
    settings = FitSettings(bb, air, notes=("a note",))
    a = fit_track_files([tracked.track_path], tmp_path / "a.json", settings)
    b = fit_track_files([tracked.track_path], tmp_path / "b.json", settings)
    assert (tmp_path / "a.json").read_text() == (tmp_path / "b.json").read_text()
    assert a.result.warnings[0] == "a note"
    fit = read_fit(tmp_path / "a.json")
    assert fit.n_shots == 1 and fit.converged == a.result.converged
    assert a.track_paths == (tracked.track_path,)
    assert dataclasses.is_dataclass(b) and _partials(tmp_path) == []


def test_fit_track_files_missing_track_writes_nothing(tmp_path):
    with pytest.raises(OSError, match=r"gone\.csv"):
        fit_track_files(
            [tmp_path / "gone.csv"], tmp_path / "fit.json", FitSettings(BB(MASS_KG), Air.standard())
        )
    assert list(tmp_path.iterdir()) == []


def test_report_links_and_tables(scene, tracked, tmp_path):
    settings = FitSettings(BB(MASS_KG), Air.standard())
    fitted = fit_track_files([tracked.track_path], tmp_path / "fit.json", settings)
    links = (("overlay.png", "overlay.png"),)
    inputs = load_report_inputs(
        fitted.fit_path,
        track_paths=[tracked.track_path],
        rig_path=scene["rig_path"],
        links=links,
        title="pipeline test",
    )
    written = write_report(tmp_path / "report.html", inputs, figures_dir=tmp_path)
    assert written[0] == tmp_path / "report.html" and all(p.is_file() for p in written)
    html = written[0].read_text(encoding="utf-8")
    assert 'href="overlay.png"' in html and "pipeline test" in html
    assert _partials(tmp_path) == []


def test_calibrate_scene_is_repeatable_to_the_last_digit(scene, tmp_path):
    calibrate_scene(
        scene["rendered"], tmp_path / "again.json", seed=0, parallax_mm=PARALLAX_MM, parallax_sigma_mm=0.5
    )
    assert (tmp_path / "again.json").read_text() == scene["rig_path"].read_text()
