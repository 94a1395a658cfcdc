"""Folder arguments: the files they stand for, or a one-line error naming the argument."""

from __future__ import annotations

import pytest

from hopscope.shared.files import folder_files


def test_folder_lists_matching_files_sorted_case_blind(tmp_path):
    for name in ("b.PNG", "a.png", "notes.txt"):
        (tmp_path / name).write_bytes(b"x")
    (tmp_path / "sub.png").mkdir()  # a folder named like an image is not a file
    got = folder_files(tmp_path, (".png",), what="images", where="--views x")
    assert [p.name for p in got] == ["a.png", "b.PNG"]


def test_folder_without_matching_files_names_the_argument(tmp_path):
    (tmp_path / "notes.txt").write_bytes(b"x")
    with pytest.raises(ValueError, match=r"^--views x: the folder holds no images \(\.png, \.jpg\)$"):
        folder_files(tmp_path, (".png", ".jpg"), what="images", where="--views x")
