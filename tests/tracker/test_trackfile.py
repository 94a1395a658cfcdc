"""track.csv round trip and validation."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from hopscope.tracker.trackfile import (
    BASE_COLUMNS,
    SCHEMA,
    Track,
    TrackMeta,
    read_track,
    replace_meta,
    track_from_csv,
    track_to_csv,
)


def _meta(**kw):
    base = dict(
        video="clip.mp4",
        timing_source="container",
        frame_rate_hz=240.0,
        readout_s=0.004,
        exposure_s=0.001,
        rig_digest="abc123",
        image_size=(640, 480),
        warnings=("timestamps may be playback time",),
    )
    base.update(kw)
    return TrackMeta(**base)


def _track(n=6, k=2, rng=0, shots=(0,)):
    g = np.random.default_rng(rng)
    per = n // len(shots)
    shot = np.repeat(np.arange(len(shots)), per)
    n = shot.size
    frame = np.concatenate([np.arange(per) + 3 for _ in shots])
    t = frame / 240.0 + g.uniform(0, 1e-4, n)
    return Track(
        frame=frame,
        t_s=t,
        u_px=g.uniform(0, 640, n),
        v_px=g.uniform(0, 480, n),
        x_m=g.normal(size=n),
        y_m=g.normal(size=n),
        sigma_px=g.uniform(0.01, 0.2, n),
        sigma_m=g.uniform(1e-5, 1e-3, n),
        shot=shot,
        brightness=g.uniform(100, 1000, n),
        streak_len_px=g.uniform(0, 10, n),
        flags=tuple("" if i % 2 else "streak;edge" for i in range(n)),
        cal_dx_m=g.normal(scale=1e-4, size=(k, n)),
        cal_dy_m=g.normal(scale=1e-4, size=(k, n)),
        meta=_meta(),
    )


def _assert_same(a: Track, b: Track):
    for f in ("frame", "shot"):
        np.testing.assert_array_equal(getattr(a, f), getattr(b, f))
    for f in ("t_s", "u_px", "v_px", "x_m", "y_m", "sigma_px", "sigma_m", "brightness", "streak_len_px"):
        np.testing.assert_array_equal(getattr(a, f), getattr(b, f))  # repr() round-trips floats exactly
    np.testing.assert_array_equal(a.cal_dx_m, b.cal_dx_m)
    np.testing.assert_array_equal(a.cal_dy_m, b.cal_dy_m)
    assert a.flags == b.flags
    assert a.meta == b.meta


@pytest.mark.parametrize("k", [0, 1, 3])
def test_round_trip(tmp_path, k):
    tr = _track(k=k, shots=(0, 1))
    text = track_to_csv(tr)
    p = tmp_path / "track.csv"
    p.write_text(text)
    back = read_track(p)
    _assert_same(tr, back)
    assert back.n_ensemble == k
    assert back.cal_offsets_m().shape == (k, tr.n_points, 2)


def test_header_and_columns():
    text = track_to_csv(_track(k=2))
    lines = text.splitlines()
    assert lines[0] == f"# schema: {SCHEMA}"
    assert "# warning: timestamps may be playback time" in lines
    cols = next(line for line in lines if not line.startswith("#")).split(",")
    assert tuple(cols[: len(BASE_COLUMNS)]) == BASE_COLUMNS
    assert cols[len(BASE_COLUMNS) :] == ["cal_dx_m_01", "cal_dy_m_01", "cal_dx_m_02", "cal_dy_m_02"]


@settings(max_examples=25, deadline=None)
@given(n=st.integers(0, 12), k=st.integers(0, 3), seed=st.integers(0, 2**31))
def test_round_trip_property(n, k, seed):
    tr = _track(n=n, k=k, rng=seed)
    _assert_same(tr, track_from_csv(track_to_csv(tr), "t.csv"))


def test_select_shot():
    tr = _track(n=8, shots=(0, 1))
    one = tr.select_shot(1)
    assert one.n_points == 4 and set(one.shot) == {1}
    assert tr.shot_ids == (0, 1)
    with pytest.raises(ValueError, match="no shot 7"):
        tr.select_shot(7)


def test_replace_meta():
    tr = replace_meta(_track(), warnings=("a", "b"))
    assert tr.meta.warnings == ("a", "b")


def _lines():
    return track_to_csv(_track(k=1)).splitlines()


def test_rejects_other_schema():
    lines = _lines()
    lines[0] = "# schema: hopscope.track/2"
    with pytest.raises(ValueError, match=r"t\.csv: line 1: schema: expected hopscope\.track/1"):
        track_from_csv("\n".join(lines), "t.csv")


def test_rejects_missing_schema():
    lines = [ln for ln in _lines() if not ln.startswith("# schema")]
    with pytest.raises(ValueError, match="t.csv: line 1: schema: missing"):
        track_from_csv("\n".join(lines), "t.csv")


def test_rejects_missing_column():
    lines = _lines()
    i = next(i for i, ln in enumerate(lines) if not ln.startswith("#"))
    cols = lines[i].split(",")
    j = cols.index("sigma_m")
    for r in range(i, len(lines)):
        cells = lines[r].split(",")
        del cells[j]
        lines[r] = ",".join(cells)
    with pytest.raises(ValueError, match=rf"t\.csv: line {i + 1}: sigma_m: missing column"):
        track_from_csv("\n".join(lines), "t.csv")


@pytest.mark.parametrize("bad", ["nan", "inf", "-inf"])
def test_rejects_non_finite(bad):
    lines = _lines()
    i = next(i for i, ln in enumerate(lines) if not ln.startswith("#"))
    cols = lines[i].split(",")
    cells = lines[i + 2].split(",")
    cells[cols.index("x_m")] = bad
    lines[i + 2] = ",".join(cells)
    with pytest.raises(ValueError, match=rf"t\.csv: line {i + 3}: x_m: non-finite"):
        track_from_csv("\n".join(lines), "t.csv")


def test_rejects_non_finite_cal_offset():
    lines = _lines()
    i = next(i for i, ln in enumerate(lines) if not ln.startswith("#"))
    cells = lines[i + 1].split(",")
    cells[-1] = "nan"
    lines[i + 1] = ",".join(cells)
    with pytest.raises(ValueError, match=rf"line {i + 2}: cal_dy_m_01: non-finite"):
        track_from_csv("\n".join(lines), "t.csv")


def test_rejects_non_monotonic_time():
    lines = _lines()
    i = next(i for i, ln in enumerate(lines) if not ln.startswith("#"))
    cols = lines[i].split(",")
    a = lines[i + 1].split(",")
    b = lines[i + 2].split(",")
    b[cols.index("t_s")] = a[cols.index("t_s")]
    lines[i + 2] = ",".join(b)
    with pytest.raises(ValueError, match=rf"t\.csv: line {i + 3}: t_s: .*does not increase within shot 0"):
        track_from_csv("\n".join(lines), "t.csv")


def test_rejects_bad_flag_and_short_row():
    lines = _lines()
    i = next(i for i, ln in enumerate(lines) if not ln.startswith("#"))
    cols = lines[i].split(",")
    cells = lines[i + 1].split(",")
    cells[cols.index("flags")] = "sparkly"
    bad = [*lines[: i + 1], ",".join(cells), *lines[i + 2 :]]
    with pytest.raises(ValueError, match="flags: unknown token"):
        track_from_csv("\n".join(bad), "t.csv")
    short = [*lines[: i + 1], ",".join(lines[i + 1].split(",")[:-2]), *lines[i + 2 :]]
    with pytest.raises(ValueError, match=rf"line {i + 2}: row: expected"):
        track_from_csv("\n".join(short), "t.csv")


def test_rejects_bad_header_value():
    lines = [ln.replace("# frame_rate_hz: 240.0", "# frame_rate_hz: -5") for ln in _lines()]
    with pytest.raises(ValueError, match="t.csv: header: frame_rate_hz"):
        track_from_csv("\n".join(lines), "t.csv")


def test_header_value_that_is_no_number_is_named_once():
    lines = [ln.replace("# readout_s: ", "# readout_s: fast") for ln in _lines()]
    with pytest.raises(ValueError, match=r"^t\.csv: header: readout_s: not a number: 'fast") as err:
        track_from_csv("\n".join(lines), "t.csv")
    assert str(err.value).count("t.csv") == 1


def test_read_track_missing_file(tmp_path):
    with pytest.raises(OSError):
        read_track(tmp_path / "nope.csv")


def test_track_validates_shapes():
    tr = _track()
    with pytest.raises(ValueError, match="cal_dx_m: expected shape"):
        Track(**{**_fields(tr), "cal_dx_m": np.zeros((2, 3))})
    with pytest.raises(ValueError, match="u_px: non-finite"):
        Track(**{**_fields(tr), "u_px": np.full(tr.n_points, np.nan)})
    assert not tr.u_px.flags.writeable


def _fields(tr):
    import dataclasses

    return {f.name: getattr(tr, f.name) for f in dataclasses.fields(tr)}
