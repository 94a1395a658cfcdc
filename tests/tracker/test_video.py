"""Video reading: real per-frame times (variable frame rate), override, slow-motion hints, bad files."""

from __future__ import annotations

import math
from fractions import Fraction

import av
import numpy as np
import pytest
from track_synth import write_clip

from hopscope.tracker.video import (
    FRAME_RATE_RANGE_HZ,
    check_frame_rate,
    frame_times,
    iter_frames,
    probe_video,
    regularise_times,
    timestamp_rate_hz,
    timing_warnings,
)

#: Container timestamps are integers in the stream's time base (1/90000 s here, or coarser after muxing);
#: our times must equal PyAV's own frame.time to float precision.
TIME_TOL_S = 1e-9


def _frames(n, shape=(48, 64), seed=0):
    g = np.random.default_rng(seed)
    return [g.integers(0, 255, shape, dtype=np.uint8) for _ in range(n)]


def test_vfr_times_match_pyav(tmp_path):
    # A variable-frame-rate file: irregular pts set per frame. Reference: PyAV's own decoded frame.time
    # (pts × time_base; PyAV documentation, "av.frame.Frame.time"), an outside reader of the same file.
    g = np.random.default_rng(3)
    dt = g.uniform(1 / 300, 1 / 120, 30)
    times = np.concatenate([[0.0], np.cumsum(dt)])
    path = write_clip(tmp_path / "vfr.mkv", _frames(31), fps=240, times_s=list(times))
    with av.open(str(path)) as c:
        ref = [float(f.time) for f in c.decode(video=0)]
    ref = np.array(ref) - ref[0]
    ours = frame_times(path)
    assert ours.size == ref.size == 31
    np.testing.assert_allclose(ours, ref, rtol=0, atol=TIME_TOL_S)
    # and they follow the irregular spacing we wrote (to the container's time-base rounding)
    np.testing.assert_allclose(ours, times, atol=1.5 / 1000)
    assert np.std(np.diff(ours)) > 1e-4  # genuinely variable


def test_frames_stream_luma_exactly(tmp_path):
    frames = _frames(6)
    path = write_clip(tmp_path / "c.mkv", frames, fps=100)  # lossless H.264 (qp 0)
    got = list(iter_frames(path))
    assert [f.index for f in got] == list(range(6))
    for a, b in zip(frames, got, strict=True):
        # full-range grey is written as limited-range luma, Y = 16 + 219·x/255 (ITU-R BT.601, §2.5.3)
        expected = 16.0 + a.astype(float) * 219.0 / 255.0
        assert np.max(np.abs(b.luma - expected)) <= 1.0
        assert not b.luma.flags.writeable
    np.testing.assert_allclose([f.t_s for f in got], np.arange(6) / 100, atol=1e-3)


def test_fps_override(tmp_path):
    path = write_clip(tmp_path / "c.mp4", _frames(5), fps=30)
    got = [f.t_s for f in iter_frames(path, fps_override=1200.0)]
    np.testing.assert_allclose(got, np.arange(5) / 1200.0, rtol=0, atol=1e-15)


def test_probe_reports_size_and_rate(tmp_path):
    path = write_clip(tmp_path / "c.mp4", _frames(5, shape=(40, 56)), fps=240)
    info = probe_video(path)
    assert (info.width, info.height) == (56, 40)
    assert info.average_rate_hz == pytest.approx(240.0)
    assert info.n_frames == 5


def test_slow_motion_metadata_warns(tmp_path):
    # Android slow motion: playback timing (30 fps) with the capture rate in the metadata.
    path = write_clip(
        tmp_path / "slowmo.mkv", _frames(8), fps=30, metadata={"com.android.capture.fps": "240.000000"}
    )
    info = probe_video(path)
    assert info.capture_rate_hz == pytest.approx(240.0)
    times = frame_times(path)
    warns = timing_warnings(info, times, fps_override=None)
    assert len(warns) == 1 and "playback time" in warns[0] and "--fps 240" in warns[0]
    assert timing_warnings(info, times, fps_override=240.0) == []


def test_timestamp_rate():
    assert timestamp_rate_hz(np.arange(10) / 500.0) == pytest.approx(500.0)
    assert timestamp_rate_hz(np.array([0.0])) is None


@pytest.mark.parametrize("bad", [0.0, -5.0, math.nan, math.inf, 1e9, 0.5])
def test_check_frame_rate_rejects(bad):
    with pytest.raises(ValueError, match="--fps: frame rate"):
        check_frame_rate(bad)
    assert check_frame_rate(FRAME_RATE_RANGE_HZ[0]) == FRAME_RATE_RANGE_HZ[0]


def test_missing_file(tmp_path):
    with pytest.raises(FileNotFoundError, match="no such video file"):
        list(iter_frames(tmp_path / "none.mp4"))


def test_empty_file(tmp_path):
    p = tmp_path / "empty.mp4"
    p.write_bytes(b"")
    with pytest.raises(ValueError, match="empty.mp4: video file is empty"):
        probe_video(p)


def test_not_a_video(tmp_path):
    p = tmp_path / "junk.mp4"
    p.write_bytes(np.random.default_rng(0).integers(0, 256, 5000, dtype=np.uint8).tobytes())
    with pytest.raises(ValueError, match="junk.mp4: not a readable video"):
        list(iter_frames(p))


@pytest.mark.parametrize("suffix", [".mkv", ".mp4"])
def test_truncated_file(tmp_path, suffix):
    path = write_clip(tmp_path / f"full{suffix}", _frames(40, shape=(64, 96)), fps=240)
    data = path.read_bytes()
    cut = tmp_path / f"cut{suffix}"
    cut.write_bytes(data[: len(data) // 2])
    with pytest.raises(
        ValueError,
        match=f"cut{suffix}: (video is (corrupt or truncated|truncated or corrupt)|not a readable video)",
    ):
        list(iter_frames(cut))


def test_zero_frames(tmp_path):
    p = tmp_path / "zero.mkv"
    c = av.open(str(p), mode="w")
    s = c.add_stream("libx264", rate=30)
    s.width, s.height, s.pix_fmt = 64, 48, "yuv420p"
    s.codec_context.time_base = Fraction(1, 30)
    c.start_encoding()
    c.close()
    with pytest.raises(ValueError, match="zero.mkv: video has no (decodable )?frames"):
        list(iter_frames(p))


def test_non_increasing_timestamps_need_fps(tmp_path):
    # Two frames with the same presentation time: without --fps the times are unusable.
    times = [0.0, 0.01, 0.01 + 1e-7, 0.03]
    path = write_clip(tmp_path / "dup.mkv", _frames(4), fps=100, times_s=times)
    with av.open(str(path)) as c:
        pts = [f.pts for f in c.decode(video=0)]
    if len(set(pts)) == len(pts):
        pytest.fail("the muxer kept distinct timestamps; the test clip does not exercise the check")
    with pytest.raises(ValueError, match="timestamps do not increase at frame .*--fps"):
        list(iter_frames(path))
    assert len(list(iter_frames(path, fps_override=100.0))) == len(pts)


def test_rounded_constant_rate_times_are_regularised(tmp_path):
    # Matroska stores times in milliseconds: a 240 fps clip gets 4/5 ms steps.
    path = write_clip(tmp_path / "ms.mkv", _frames(30), fps=240)
    info = probe_video(path)
    raw = frame_times(path)
    assert info.time_base_s == pytest.approx(1e-3)
    assert np.max(np.abs(raw - np.arange(30) / 240)) > 1e-4  # rounded
    fixed, note = regularise_times(raw, info.time_base_s)
    np.testing.assert_allclose(fixed, np.arange(30) / 240, atol=2e-5)
    assert note and "rounded to 1 ms" in note
    # genuinely variable spacing is left alone
    g = np.random.default_rng(1)
    vfr = np.round(np.cumsum(g.uniform(0.003, 0.006, 30)), 3)
    same, none = regularise_times(vfr, 1e-3)
    assert none is None and np.array_equal(same, vfr)
