"""Benchmark: time of each calibration stage on the rendered lane-close scene (12 views, 1280x720).

Run: ``python tests/bench/calibrate_speed.py [OUT_DIR]``. Prints seconds per stage; asserts nothing.
The demo's budget for calibration is well under ~15 s on 2 cores, ensemble included.
"""

from __future__ import annotations

import sys
import tempfile
import time
from pathlib import Path

from hopscope.calibration.build import make_rig
from hopscope.calibration.drop import apply_level, check_drop
from hopscope.calibration.grid import GridSpec
from hopscope.calibration.images import detect_plane_views, detect_views, expand_views, parse_plane_arg
from hopscope.calibration.lens import ViewPoints, calibrate_lens
from hopscope.calibration.plane import Placement
from hopscope.scenes import builtin_scene, render_scene


def main(out_dir: str | None = None) -> None:
    out = Path(out_dir or tempfile.mkdtemp(prefix="hopscope-bench-"))
    scene = render_scene(builtin_scene("lane-close"), out, rng=0, parts=("lens", "plane", "drop"))
    b = scene.truth["board"]
    spec = GridSpec(b["cols"], b["rows"], b["square_m"])
    marks = [("start", time.perf_counter())]

    def mark(name):
        marks.append((name, time.perf_counter()))

    dets, size = detect_views(expand_views([str(p) for p in scene.lens_view_paths]), spec)
    mark(f"detect {len(dets)} lens views")
    views = [ViewPoints(d.source, d.corners, spec.board_points()) for d in dets if d.found]
    lens = calibrate_lens(views, size)
    mark("lens calibration")
    items = [parse_plane_arg(f"{p}:{off}") for p, off in scene.plane_views]
    placements = [Placement(n, c, o) for n, c, o in detect_plane_views(items, spec, size)]
    mark(f"detect {len(placements)} plane view(s)")
    rig0 = make_rig(views, lens, placements, spec, ensemble_size=0)
    mark("plane pose (no ensemble)")
    rig = make_rig(views, lens, placements, spec, ensemble_size=24, rng=0)
    mark("plane pose + ensemble of 24")
    if scene.drop_clip_path is not None:
        check, warns = check_drop(rig, scene.drop_clip_path)
        apply_level(rig, check, warns)
        mark("drop check")
    total = marks[-1][1] - marks[0][1]
    for (_, t0), (name, t1) in zip(marks, marks[1:], strict=False):
        print(f"  {name:32s} {t1 - t0:7.3f} s")
    print(f"  {'total':32s} {total:7.3f} s")
    _ = rig0


if __name__ == "__main__":
    main(sys.argv[1] if len(sys.argv) > 1 else None)
