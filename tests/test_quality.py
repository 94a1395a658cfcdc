"""Project-wide quality gates: lint (ruff) and the architecture's import rules (import-linter)."""

from __future__ import annotations

import shutil
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
PACKAGES = ["calibration", "tracker", "fitting", "shared", "hopscope", "tests"]
#: Files not yet run through ``ruff format`` (their owners had changes in progress when the check came in):
#: each owner formats theirs and takes it off this list. Every other file is checked.
NOT_YET_FORMATTED: tuple[str, ...] = ()


def _run(cmd: list[str]) -> subprocess.CompletedProcess[str]:
    return subprocess.run(cmd, cwd=ROOT, capture_output=True, text=True, timeout=300)


def test_ruff_lint_is_clean():
    ruff = shutil.which("ruff")
    if ruff is None:  # installed with the test extras; absence is a broken environment, not a skip
        pytest.fail("ruff is not installed (pip install -e '.[test]')")
    res = _run([ruff, "check", *PACKAGES])
    assert res.returncode == 0, res.stdout + res.stderr


def test_ruff_format_is_clean():
    ruff = shutil.which("ruff")
    if ruff is None:
        pytest.fail("ruff is not installed (pip install -e '.[test]')")
    excluded = [arg for path in NOT_YET_FORMATTED for arg in ("--exclude", path)]
    res = _run([ruff, "format", "--check", "--force-exclude", *excluded, *PACKAGES])
    assert res.returncode == 0, res.stdout + res.stderr


def test_import_contracts_hold():
    lint_imports = shutil.which("lint-imports")
    if lint_imports is None:
        pytest.fail("import-linter is not installed (pip install -e '.[test]')")
    res = _run([lint_imports, "--no-cache"])
    assert res.returncode == 0, res.stdout + res.stderr


def test_fitting_never_imports_opencv_at_runtime():
    # matplotlib is not checked here: lmfit itself imports it at import time. Our own modules never do
    # (the import-linter contract above checks the direct imports).
    code = (
        "import sys, importlib, pkgutil, hopscope.fitting as f\n"
        "for m in pkgutil.iter_modules(f.__path__):\n"
        "    importlib.import_module('hopscope.fitting.' + m.name)\n"
        "bad = [n for n in ('cv2', 'av', 'hopscope.calibration', 'hopscope.tracker', 'hopscope.commands',\n"
        "                   'hopscope.pipeline') if n in sys.modules]\n"
        "print(','.join(bad))\n"
    )
    res = subprocess.run([sys.executable, "-c", code], cwd=ROOT, capture_output=True, text=True, timeout=120)
    assert res.returncode == 0, res.stderr
    assert res.stdout.strip() == "", f"fitting pulled in: {res.stdout.strip()}"


def test_mypy_is_clean_on_the_packages():
    mypy = shutil.which("mypy")
    if mypy is None:
        pytest.fail("mypy is not installed (pip install -e '.[test]')")
    res = _run([mypy])  # packages and settings from [tool.mypy] in pyproject.toml
    assert res.returncode == 0, res.stdout[-4000:] + res.stderr[-2000:]


def test_install_has_one_import_name(tmp_path):
    """Every package imports as ``hopscope.<stage>``; no generic top-level name leaks into site-packages."""
    code = (
        "import importlib.util, hopscope.fitting, hopscope.tracker, hopscope.calibration, hopscope.shared\n"
        "for name in ('fitting', 'tracker', 'calibration', 'shared'):\n"
        "    spec = importlib.util.find_spec(name)\n"
        "    print(name, spec.origin if spec else None)\n"
    )
    # Run outside the checkout, so only what the install put on sys.path can be found.
    res = subprocess.run(
        [sys.executable, "-c", code], cwd=tmp_path, capture_output=True, text=True, timeout=120
    )
    assert res.returncode == 0, res.stderr
    for line in res.stdout.splitlines():
        name, origin = line.split(" ", 1)
        assert origin == "None" or not origin.startswith(str(ROOT)), (
            f"top-level {name!r} importable: {origin}"
        )
