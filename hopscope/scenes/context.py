"""What every frame of a clip is drawn from: camera, scene, sharp background, readout and frame rate.

Notes
-----
Time: frame k of a clip starts at k/fps; row r of frame k is exposed over
[k/fps + r·readout/rows, k/fps + r·readout/rows + exposure].
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .camera import SceneCamera
from .spec import SceneSpec


@dataclass(frozen=True, eq=False)
class ClipContext:
    camera: SceneCamera
    spec: SceneSpec
    background: np.ndarray  # sharp wall, DN
    readout_s: float  # effective (0 without rolling shutter)
    fps: float  # frame rate of this clip, 1/s


def row_offsets(ctx: ClipContext, rows: np.ndarray) -> np.ndarray:
    return np.asarray(rows, dtype=float) * ctx.readout_s / ctx.camera.height
