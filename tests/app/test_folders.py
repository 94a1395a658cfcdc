"""Output folders of a run: the lock against a concurrent run, the manifest of what a run wrote."""

from __future__ import annotations

import json
import os
import socket
import subprocess
import sys

import pytest

from hopscope.folders import LOCK_NAME, MANIFEST_NAME, check_output_file, run_folder


def _dead_pid() -> int:
    """The id of a process that has ended."""
    proc = subprocess.run(
        [sys.executable, "-c", "import os; print(os.getpid())"], capture_output=True, text=True
    )
    return int(proc.stdout)


def test_a_second_run_into_a_held_folder_is_refused(tmp_path):
    with run_folder(tmp_path / "out"):
        assert (tmp_path / "out" / LOCK_NAME).read_text().split()[0] == str(os.getpid())
        with pytest.raises(
            ValueError, match=r"--out .*out: another hopscope run is writing into this folder"
        ):
            with run_folder(tmp_path / "out"):
                pass
    assert not (tmp_path / "out" / LOCK_NAME).exists()
    assert not (tmp_path / "out").exists()  # created by the run, nothing written: removed again


def test_the_lock_of_a_run_that_died_is_taken_over_with_a_warning(tmp_path):
    out = tmp_path / "out"
    out.mkdir()
    (out / LOCK_NAME).write_text(f"{_dead_pid()} {socket.gethostname()}\n")
    seen: list[str] = []
    with run_folder(out, on_warning=seen.append):
        assert (out / LOCK_NAME).read_text().split()[0] == str(os.getpid())
    assert len(seen) == 1 and "removed the lock of a run that ended" in seen[0]


def test_the_next_run_removes_only_what_the_last_one_wrote_and_never_its_inputs(tmp_path):
    out = tmp_path / "out"
    with run_folder(out) as folder:
        for name in ("track_a.csv", "figure_spread.png", "rig.json"):
            (out / name).write_text(name)
            folder.own(out / name)
    assert json.loads((out / MANIFEST_NAME).read_text())["files"] == [
        "figure_spread.png",
        "rig.json",
        "track_a.csv",
    ]
    (out / "notes.txt").write_text("the user's")
    with run_folder(out, keep=[out / "rig.json"]) as folder:
        assert sorted(p.name for p in folder.removed) == ["figure_spread.png", "track_a.csv"]
        (out / "track.csv").write_text("new")
        folder.own(out / "track.csv")
    assert sorted(p.name for p in out.iterdir()) == [MANIFEST_NAME, "notes.txt", "rig.json", "track.csv"]


def test_a_manifest_cannot_reach_outside_its_folder(tmp_path):
    out = tmp_path / "out"
    out.mkdir()
    victim = tmp_path / "precious.txt"
    victim.write_text("keep")
    manifest = {"schema": "hopscope.run-files/1", "files": ["../precious.txt", "sub"]}
    (out / MANIFEST_NAME).write_text(json.dumps(manifest))
    (out / "sub").mkdir()
    with run_folder(out) as folder:
        assert folder.removed == ()
    assert victim.read_text() == "keep" and (out / "sub").is_dir()


@pytest.mark.parametrize("case", ["folder", "no-parent"])
def test_check_output_file_names_the_option(tmp_path, case):
    target = tmp_path if case == "folder" else tmp_path / "none" / "x.json"
    match = "is a folder" if case == "folder" else "does not exist"
    with pytest.raises(ValueError, match=rf"^-o {target}: .*{match}"):
        check_output_file(target)
