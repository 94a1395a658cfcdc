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
