"""The README's examples do what the README says (run as a user would copy them)."""

from __future__ import annotations

import re
import shlex
from pathlib import Path

from hopscope import cli

ROOT = Path(__file__).resolve().parents[2]
README = (ROOT / "README.md").read_text(encoding="utf-8")
#: The README's stated range of a hopped 6 mm BB's lift coefficient. # common practice, no published source
LIFT_COEFFICIENT_RANGE = (0.01, 0.05)
#: A realistic hop lifts a BB by centimetres to a few decimetres over a field's range, not tens of metres, m.
# common practice, no published source
MAX_REALISTIC_CLIMB_M = 0.5


def _simulate_example() -> list[str]:
    m = re.search(r"`hopscope (simulate --mass-g [^`]+)`", README)
    assert m, "the README has no simulate example with numbers"
    return shlex.split(m[1])


def test_readme_states_the_realistic_lift_range():
    lo, hi = LIFT_COEFFICIENT_RANGE
    assert f"{lo:g}–{hi:g}" in README


def test_readme_simulate_example_is_realistic_and_says_rise_or_drop(tmp_path, capsys):
    argv = _simulate_example()
    cl = float(argv[argv.index("--lift-coefficient") + 1])
    assert LIFT_COEFFICIENT_RANGE[0] <= cl <= LIFT_COEFFICIENT_RANGE[1]
    argv[argv.index("-o") + 1] = str(tmp_path / "path.csv")
    assert cli.main(argv) == 0
    out = capsys.readouterr().out
    climb = float(re.search(r"max height +\+?(-?[\d.]+) m", out)[1])
    assert climb < MAX_REALISTIC_CLIMB_M, out
    at_range = re.search(r"(rise|drop) at range +([\d.]+) m (above|below) launch height", out)
    assert at_range, out
    assert (at_range[1], at_range[3]) in {("rise", "above"), ("drop", "below")}, out


def test_readme_says_how_to_get_chromium_and_the_browser_free_loop():
    assert "apt-get install chromium" in README
    assert 'python -m pytest -m "not slow"' in README


def test_simulate_summary_says_drop_when_the_bb_ends_below_launch_height(tmp_path, capsys):
    argv = _simulate_example()
    argv[argv.index("--lift-coefficient") + 1] = "0"
    argv[argv.index("--range-m") + 1] = "20"
    argv[argv.index("-o") + 1] = str(tmp_path / "path.csv")
    assert cli.main(argv) == 0
    out = capsys.readouterr().out
    assert re.search(r"drop at range +[\d.]+ m below launch height", out) and "rise at range" not in out, out
