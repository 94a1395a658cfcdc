"""Atomic output: nothing half-written is ever left behind."""

from __future__ import annotations

import pytest

from hopscope.shared.fileio import atomic_path, write_text_atomic


def test_write_text_atomic_writes_whole_file(tmp_path):
    target = tmp_path / "fit.json"
    write_text_atomic(target, '{"a": 1}\n')
    assert target.read_text() == '{"a": 1}\n'
    assert sorted(p.name for p in tmp_path.iterdir()) == ["fit.json"]


def test_failure_leaves_no_file_and_keeps_old_one(tmp_path):
    target = tmp_path / "track.csv"
    target.write_text("old\n")
    with pytest.raises(RuntimeError, match="half way"), atomic_path(target) as tmp:
        tmp.write_text("partial")
        raise RuntimeError("half way")
    assert target.read_text() == "old\n"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["track.csv"]


def test_temporary_keeps_suffix(tmp_path):
    with atomic_path(tmp_path / "overlay.mp4") as tmp:
        assert tmp.suffix == ".mp4"
        tmp.write_bytes(b"x")
    assert (tmp_path / "overlay.mp4").read_bytes() == b"x"


def test_missing_output_folder_is_a_clear_error(tmp_path):
    with pytest.raises(FileNotFoundError, match="output folder"):
        write_text_atomic(tmp_path / "nope" / "fit.json", "x")
