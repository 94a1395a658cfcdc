"""``hopscope track`` on the command line: output, summary, overlay, and every bad input."""

from __future__ import annotations

import re
import sys
from pathlib import Path

import numpy as np
import pytest

from hopscope import cli
from hopscope.calibration.rig import rig_to_json
from hopscope.errors import EXIT_BAD_INPUT
from hopscope.tracker.trackfile import read_track

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tracker"))
from track_synth import flight_frames, simple_rig, write_clip

SHAPE = (240, 320)


@pytest.fixture(scope="module")
def clip(tmp_path_factory):
    d = tmp_path_factory.mktemp("clip")
    rng = np.random.default_rng(7)
    frames, _ = flight_frames(SHAPE, 30, start_uv=(20.0, 90.0), vel_px=(9.0, 0.4), first_frame=3, rng=rng)
    video = write_clip(d / "shot.mp4", frames, fps=240.0)
    rig = d / "rig.json"
    rig.write_text(rig_to_json(simple_rig(SHAPE[1], SHAPE[0])))
    other = d / "rig640.json"
    other.write_text(rig_to_json(simple_rig(640, 480)))
    noise = write_clip(
        d / "noise.mp4", [np.clip(40 + rng.normal(0, 3, SHAPE), 0, 255).astype(np.uint8) for _ in range(20)]
    )
    return {"video": video, "rig": rig, "rig640": other, "noise": noise, "dir": d}


def _leftovers(folder: Path) -> list[str]:
    return sorted(p.name for p in folder.iterdir() if ".partial" in p.name)


def test_track_writes_csv_summary_and_overlay(clip, tmp_path, capsys):
    out = tmp_path / "track.csv"
    sheet = tmp_path / "sheet.png"
    rc = cli.main(
        [
            "track",
            str(clip["video"]),
            "--rig",
            str(clip["rig"]),
            "--exposure-ms",
            "0.5",
            "--readout-ms",
            "1",
            "-o",
            str(out),
            "--overlay",
            str(sheet),
        ]
    )
    assert rc == 0
    text = capsys.readouterr()
    assert "hopscope track" in text.out and "points" in text.out and "shot 0 speed" in text.out
    # a frame rate is frames/s, a speed is fps (feet per second): never "ft/s", never "240 fps" for a rate
    assert re.search(r"timing .*, 240 frames/s", text.out) and "ft/s" not in text.out
    assert re.search(r"shot 0 speed +[\d.]+ m/s \([\d.]+ fps\)", text.out), text.out
    tr = read_track(out)
    assert tr.n_points >= 25 and tr.shot_ids == (0,)
    assert tr.meta.exposure_s == pytest.approx(5e-4) and tr.meta.readout_s == pytest.approx(1e-3)
    header = out.read_text().splitlines()[0]
    assert header == "# schema: hopscope.track/1"
    import cv2

    img = cv2.imread(str(sheet))
    assert img is not None and img.shape[0] > SHAPE[0]
    assert _leftovers(tmp_path) == []


def test_track_annotated_video_overlay(clip, tmp_path):
    import av

    out = tmp_path / "track.csv"
    ov = tmp_path / "overlay.mp4"
    assert (
        cli.main(
            ["track", str(clip["video"]), "--rig", str(clip["rig"]), "-o", str(out), "--overlay", str(ov)]
        )
        == 0
    )
    with av.open(str(ov)) as c:
        assert sum(1 for _ in c.decode(video=0)) == 30


def test_fps_override_and_slow_warning(clip, tmp_path, capsys):
    out = tmp_path / "t.csv"
    assert (
        cli.main(["track", str(clip["video"]), "--rig", str(clip["rig"]), "--fps", "30", "-o", str(out)]) == 0
    )
    err = capsys.readouterr().err
    assert "warning: " in err and "implied speed" in err
    tr = read_track(out)
    assert tr.meta.timing_source == "override" and tr.meta.frame_rate_hz == 30.0
    assert any("implied speed" in w for w in tr.meta.warnings)


def _bad(args, capsys, tmp_path, match):
    rc = cli.main(["track", *args])
    err = capsys.readouterr().err.strip().splitlines()
    assert rc == EXIT_BAD_INPUT
    assert len(err) >= 1 and err[-1].startswith("hopscope track: error: ")
    assert match in err[-1], err[-1]
    assert not (tmp_path / "t.csv").exists()
    assert _leftovers(tmp_path) == []


def test_bad_inputs(clip, tmp_path, capsys):
    out = str(tmp_path / "t.csv")
    rig = str(clip["rig"])
    video = str(clip["video"])
    empty = tmp_path / "empty.mp4"
    empty.write_bytes(b"")
    junk = tmp_path / "junk.mp4"
    junk.write_bytes(b"this is not a video" * 100)
    cut = tmp_path / "cut.mp4"
    cut.write_bytes(Path(video).read_bytes()[:3000])
    zero = tmp_path / "zero.mkv"
    import av

    c = av.open(str(zero), mode="w")
    s = c.add_stream("libx264", rate=240)
    s.width, s.height, s.pix_fmt = SHAPE[1], SHAPE[0], "yuv420p"
    c.start_encoding()
    c.close()
    cases = [
        ([str(tmp_path / "none.mp4"), "--rig", rig, "-o", out], "no such video file"),
        ([str(empty), "--rig", rig, "-o", out], "video file is empty"),
        ([str(junk), "--rig", rig, "-o", out], "not a readable video"),
        ([str(cut), "--rig", rig, "-o", out], "cut.mp4"),
        ([str(zero), "--rig", rig, "-o", out], "has no frames"),
        ([video, "--rig", str(clip["rig640"]), "-o", out], "made for 640x480 px images"),
        ([video, "--rig", str(tmp_path / "norig.json"), "-o", out], "norig.json"),
        ([str(clip["noise"]), "--rig", rig, "-o", out], "no BB found"),
        ([video, "--rig", rig, "--fps", "0", "-o", out], "--fps: frame rate must be positive"),
        ([video, "--rig", rig, "--fps", "-30", "-o", out], "--fps: frame rate must be positive"),
        ([video, "--rig", rig, "--fps", "1e9", "-o", out], "outside the plausible range"),
        ([video, "--rig", rig, "--readout-ms", "10", "-o", out], "not shorter than the frame period"),
        ([video, "--rig", rig, "--exposure-ms", "-1", "-o", out], "--exposure-ms"),
        ([video, "--rig", rig, "-o", out, "--overlay", str(tmp_path / "x.gif")], "unknown format"),
        ([video, "--rig", rig, "-o", str(tmp_path / "nodir" / "t.csv")], "does not exist"),
    ]
    for args, match in cases:
        _bad(args, capsys, tmp_path, match)


def test_no_bb_says_so_and_writes_nothing(clip, tmp_path, capsys):
    out = tmp_path / "t.csv"
    rc = cli.main(
        [
            "track",
            str(clip["noise"]),
            "--rig",
            str(clip["rig"]),
            "-o",
            str(out),
            "--overlay",
            str(tmp_path / "o.png"),
        ]
    )
    assert rc == EXIT_BAD_INPUT
    err = capsys.readouterr().err
    assert "no BB found" in err and "no track written" in err
    assert not out.exists() and not (tmp_path / "o.png").exists()
