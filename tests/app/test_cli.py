"""The command-line framework: discovery, --help for every command, exit-code contract."""

from __future__ import annotations

import subprocess
import sys
import types

import pytest

from hopscope import cli
from hopscope.errors import EXIT_BAD_INPUT, EXIT_UNEXPECTED

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
