"""Settings for the scene tests; helpers that read rendered frames live in scene_probe.py."""

from __future__ import annotations

import sys
from pathlib import Path

sys.path.insert(0, str(Path(__file__).parent))
