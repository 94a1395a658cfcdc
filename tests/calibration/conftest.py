"""Fixtures for the calibration tests; helpers with known truth live in calib_synth.py."""

from __future__ import annotations

import sys
from pathlib import Path

import pytest

sys.path.insert(0, str(Path(__file__).parent))

import calib_synth


@pytest.fixture
def close_rig():
    """A 1280x720 camera 2.5 m in front of the plane, mild barrel distortion."""
    return calib_synth.make_close_rig()


@pytest.fixture(scope="session")
def rendered_close(tmp_path_factory):
    """The built-in lane-close scene's lens and plane views, rendered once per session."""
    from hopscope.scenes import builtin_scene, render_scene

    spec = builtin_scene("lane-close")
    return spec, render_scene(spec, tmp_path_factory.mktemp("lane-close"), rng=0, parts=("lens", "plane"))
