"""Benchmark: render a built-in scene from scratch (lane-close: target < 30 s on the project machine).

Run: ``python tests/bench/bench_render.py [--scene NAME] [--keep DIR]`` (any of ``BUILTIN_SCENES``). Prints
the time of each part and the frame counts. Not a test: speed goals live here, never in timed unit tests.
"""

from __future__ import annotations

import argparse
import tempfile
import time
from pathlib import Path

from hopscope.scenes import builtin_scene, render_scene

TARGET_S = {"lane-close": 30.0}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--scene", default="lane-close")
    parser.add_argument("--keep", type=Path, default=None, help="render into this folder (kept)")
    args = parser.parse_args()
    spec = builtin_scene(args.scene)
    marks: dict[str, float] = {}
    start = time.perf_counter()

    def progress(stage: str, done: int, total: int) -> None:
        if done == total:
            marks[stage] = time.perf_counter() - start

    with tempfile.TemporaryDirectory() as tmp:
        out = args.keep or Path(tmp) / args.scene
        scene = render_scene(spec, out, rng=0, progress=progress)
        total = time.perf_counter() - start
    prev = 0.0
    for stage, t in marks.items():
        print(f"{stage:12s} {t - prev:6.2f} s")
        prev = t
    truth = scene.truth
    print(f"lens views   {len(truth.lens_views)}")
    print(f"plane views  {len(truth.plane_views)}")
    if truth.drop is not None:
        held = f", {truth.drop.holder.frames} in the holder" if truth.drop.holder is not None else ""
        print(f"drop frames  {truth.drop.n_frames}{held}")
    if truth.flight is not None:
        fl = truth.flight
        w, h = spec.camera.image_size
        print(
            f"flight       {fl.n_frames} frames, BB in view in {int(fl.frames.visible.sum())}, {w}x{h} at "
            f"{spec.camera.fps:g} fps"
        )
    target = TARGET_S.get(args.scene)
    verdict = "" if target is None else f" (target < {target:g} s: {'met' if total < target else 'MISSED'})"
    print(f"total render {total:6.2f} s{verdict}")


if __name__ == "__main__":
    main()
