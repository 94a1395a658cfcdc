"""The command-line framework: discovery, --help for every command, exit-code contract."""

from __future__ import annotations

import re
import shutil
import signal
import subprocess
import sys
import time
import types
from pathlib import Path

import pytest

from hopscope import cli
from hopscope.errors import EXIT_BAD_INPUT, EXIT_INTERRUPTED, EXIT_UNEXPECTED
from hopscope.folders import LOCK_NAME

CONTRACT_COMMANDS = ("calibrate", "track", "fit", "simulate", "report", "run", "demo")


def _names() -> list[str]:
    return [m.NAME for m in cli._command_modules()]


def test_every_discovered_command_has_help(capsys):
    for name in _names():
        with pytest.raises(SystemExit) as exc:
            cli.main([name, "--help"])
        assert exc.value.code == 0, name
        out = capsys.readouterr().out
        assert "usage: hopscope " + name in out


def test_contract_commands_are_all_present():
    missing = sorted(set(CONTRACT_COMMANDS) - set(_names()))
    assert not missing, f"commands of the design's contract not implemented: {missing}"


def test_no_command_prints_help_and_exits_2(capsys):
    assert cli.main([]) == EXIT_BAD_INPUT
    assert "usage: hopscope" in capsys.readouterr().out


def test_unknown_command_is_a_usage_error(capsys):
    with pytest.raises(SystemExit) as exc:
        cli.main(["no-such-command"])
    assert exc.value.code == EXIT_BAD_INPUT
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "invalid choice" in err


def _fake_command(monkeypatch, action):
    """Install a one-command CLI whose run() calls ``action``."""
    fake = types.SimpleNamespace(
        NAME="probe",
        HELP="test command",
        register=lambda p: p.add_argument("--value", required=True),
        run=lambda args: action(),
    )
    monkeypatch.setattr(cli, "_command_modules", lambda: [fake])


def test_value_error_maps_to_exit_2_without_traceback(monkeypatch, capsys):
    def boom():
        raise ValueError("shots.csv: line 3: field t_s is not finite")

    _fake_command(monkeypatch, boom)
    assert cli.main(["probe", "--value", "1"]) == EXIT_BAD_INPUT
    assert capsys.readouterr().err == "hopscope probe: error: shots.csv: line 3: field t_s is not finite\n"


def test_unexpected_error_maps_to_exit_1_with_debug_hint(monkeypatch, capsys):
    def boom():
        raise RuntimeError("solver exploded")

    _fake_command(monkeypatch, boom)
    assert cli.main(["probe", "--value", "1"]) == EXIT_UNEXPECTED
    err = capsys.readouterr().err
    assert err.count("\n") == 1
    assert "RuntimeError: solver exploded" in err and "--debug" in err


def test_debug_shows_the_traceback(monkeypatch):
    def boom():
        raise RuntimeError("solver exploded")

    _fake_command(monkeypatch, boom)
    with pytest.raises(RuntimeError, match="solver exploded"):
        cli.main(["--debug", "probe", "--value", "1"])


def test_missing_required_option_is_exit_2(monkeypatch, capsys):
    _fake_command(monkeypatch, lambda: 0)
    with pytest.raises(SystemExit) as exc:
        cli.main(["probe"])
    assert exc.value.code == EXIT_BAD_INPUT
    assert "--value" in capsys.readouterr().err


def test_missing_file_error_names_the_file():
    exc = FileNotFoundError(2, "No such file or directory", "clip.mp4")
    assert cli._one_line(exc) == "clip.mp4: No such file or directory"


def test_console_script_runs_in_a_subprocess():
    res = subprocess.run([sys.executable, "-m", "hopscope.cli", "--version"], capture_output=True, text=True)
    assert res.returncode == 0 and res.stdout.startswith("hopscope ")


def test_calibrate_takes_repeated_and_listed_planes_and_views():
    # the README writes "--plane a.png:0 --plane b.png:12"; the design lists "--plane IMAGE[:OFFSET_M]..."
    args = cli.build_parser().parse_args(
        ["calibrate", "--grid", "9x6", "--square-mm", "25", "--views", "a.png", "--views", "b.png", "c.png",
         "--plane", "p0.png:0", "--plane", "p1.png:12", "p2.png:24", "-o", "rig.json"]
    )  # fmt: skip
    assert args.plane == ["p0.png:0", "p1.png:12", "p2.png:24"]
    assert args.views == ["a.png", "b.png", "c.png"]


# ------------------------------------------------------------------------------------------ rough edges

ROOT = Path(__file__).resolve().parents[2]


def test_temporary_output_names_never_reach_the_user(tmp_path):
    # what os.replace raises when -o names a folder, and mkstemp in a place that refuses new files
    tmp = tmp_path / ".fit.k2j4x9_q.partial.json"
    assert cli._one_line(IsADirectoryError(21, "Is a directory", str(tmp), str(tmp_path / "fit.json"))) == (
        f"{tmp_path / 'fit.json'}: is a folder; give the name of the file to write"
    )
    assert cli._one_line(PermissionError(13, "Permission denied", "/sys/.fit.ab12cd.partial.json")) == (
        "/sys/fit.json: Permission denied"
    )


@pytest.mark.parametrize(
    ("command", "option"), [("track", "--fps"), ("run", "--fps"), ("calibrate", "--drop-fps")]
)
def test_frame_rate_options_say_frame_rate_in_frames_per_second(capsys, command, option):
    with pytest.raises(SystemExit):
        cli.main([command, "--help"])
    help_text = " ".join(capsys.readouterr().out.split())
    m = re.search(rf"{option} F (.*?)(?= --|$)", help_text)
    assert m and "frame rate" in m[1] and "frames/s" in m[1], help_text


def test_the_fast_loop_needs_no_browser_but_the_plain_run_has_it():
    # tests/conftest.py marks every browser test slow as well
    node = "tests/app/test_report.py::test_report_in_headless_chromium"
    base = [sys.executable, "-m", "pytest", "-q", "-p", "no:cacheprovider", "--collect-only", node]
    fast = subprocess.run([*base, "-m", "not slow"], cwd=ROOT, capture_output=True, text=True, timeout=300)
    full = subprocess.run(base, cwd=ROOT, capture_output=True, text=True, timeout=300)
    assert "1 deselected" in fast.stdout and node not in fast.stdout.replace("deselected", ""), fast.stdout
    assert full.returncode == 0 and node in full.stdout, full.stdout + full.stderr


#: Seconds after start at which Ctrl-C arrives: while the interpreter imports the heavy libraries (a
#: second or more on this machine) and while the command parses and runs.
INTERRUPT_AFTER_S = (0.8, 2.5)


def _interrupt(
    argv: list[str], after_s: float, cwd: Path, *, script: bool
) -> subprocess.CompletedProcess[str]:
    # the installed ``hopscope`` script, as users start it, or ``python -m hopscope.cli``
    exe = [shutil.which("hopscope") or "hopscope"] if script else [sys.executable, "-m", "hopscope.cli"]
    proc = subprocess.Popen(
        [*exe, *argv], cwd=cwd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True
    )  # fmt: skip
    time.sleep(after_s)
    proc.send_signal(signal.SIGINT)
    out, err = proc.communicate(timeout=120)
    return subprocess.CompletedProcess(proc.args, proc.returncode, out, err)


@pytest.mark.parametrize("script", [True, False], ids=["script", "module"])
@pytest.mark.parametrize("after_s", INTERRUPT_AFTER_S)
def test_ctrl_c_at_any_time_exits_130_with_one_line(tmp_path, after_s, script):
    res = _interrupt(["demo", "--out", str(tmp_path / "d")], after_s, tmp_path, script=script)
    lines = [ln for ln in res.stderr.splitlines() if ln.strip()]
    assert res.returncode == EXIT_INTERRUPTED, res.stderr
    assert "Traceback" not in res.stderr and lines[-1].endswith(": interrupted"), res.stderr
    assert not (tmp_path / "d" / LOCK_NAME).exists()


@pytest.mark.slow
def test_an_interrupted_demo_leaves_no_half_rendered_scene(tmp_path):
    out = tmp_path / "demo"
    proc = subprocess.Popen(
        [sys.executable, "-m", "hopscope.cli", "demo", "--out", str(out)], cwd=tmp_path,
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
    )  # fmt: skip
    scene = out / "scene-lane-close"
    deadline = time.monotonic() + 120
    while not any(scene.glob("lens/*.png")) and time.monotonic() < deadline and proc.poll() is None:
        time.sleep(0.1)
    assert any(scene.glob("lens/*.png")), "the demo never started rendering"
    proc.send_signal(signal.SIGINT)
    _, err = proc.communicate(timeout=120)
    assert proc.returncode == EXIT_INTERRUPTED and "Traceback" not in err, err
    assert err.strip().splitlines()[-1] == "hopscope demo: interrupted"
    assert not scene.exists() and not (out / LOCK_NAME).exists()
