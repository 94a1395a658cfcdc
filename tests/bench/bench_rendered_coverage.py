"""Do the error bars tell the truth on rendered footage? Repeat the demo's whole chain over render seeds.

For each seed: render the scene (new sensor noise, new lens-view poses, new compression artefacts),
calibrate, track, fit, then compare with the truth in units of the fit's own standard error. Honest error
bars put |z| < 1 about 68 % of the time and |z| < 2 about 95 %. Prints a table and the fractions; with few
seeds the fractions are themselves uncertain (binomial), so read them with that in mind.

    python tests/bench/bench_rendered_coverage.py [--scene lane-close] [--seeds 12] [--out /tmp/coverage]
"""

from __future__ import annotations

import argparse
import time
from pathlib import Path

import numpy as np

from hopscope.commands import run as run_command
from hopscope.commands.demo import (
    PARALLAX_SIGMA_MM,
    compare_with_truth,
    flight_line_offset_mm,
    parse_run_argv,
    run_argv,
)
from hopscope.pipeline import calibrate_scene
from hopscope.scenes import builtin_scene, render_scene

QUANTITIES = (
    "speed at first point",
    "drag coefficient C_D",
    "lift coefficient C_L0",
    "elevation at first point",
)


def one_seed(scene: str, seed: int, root: Path) -> dict[str, float | None]:
    out = root / f"seed{seed:02d}"
    rendered = render_scene(builtin_scene(scene), out / "scene", rng=seed)
    rig = out / "rig.json"
    calibrate_scene(rendered, rig, seed=seed, parallax_mm=flight_line_offset_mm(rendered.truth),
                    parallax_sigma_mm=PARALLAX_SIGMA_MM)  # fmt: skip
    outcome = run_command.execute(parse_run_argv(run_argv(rendered, rig, out / "run")))
    rows = compare_with_truth(outcome.fitted.result, rendered.truth)
    return {c.name: c.deviation_sigma for c in rows}


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--scene", default="lane-close")
    ap.add_argument("--seeds", type=int, default=12)
    ap.add_argument("--out", default="/tmp/hopscope-coverage")
    args = ap.parse_args()
    root = Path(args.out)
    zs: dict[str, list[float]] = {q: [] for q in QUANTITIES}
    t0 = time.perf_counter()
    print(f"{'seed':>4}  " + "  ".join(f"{q[:22]:>22}" for q in QUANTITIES))
    for seed in range(1, args.seeds + 1):
        z = one_seed(args.scene, seed, root)
        for q in QUANTITIES:
            if z.get(q) is not None:
                zs[q].append(float(z[q]))
        print(f"{seed:>4}  " + "  ".join(f"{z.get(q) if z.get(q) is None else f'{z[q]:+.2f} σ':>22}" for q in QUANTITIES),
              flush=True)  # fmt: skip
    print(f"\n{args.scene}: {args.seeds} seeds in {time.perf_counter() - t0:.0f} s")
    for q in QUANTITIES:
        a = np.abs(np.array(zs[q]))
        if a.size:
            print(f"  {q:<26} |z|<1: {np.mean(a < 1):5.0%}  |z|<2: {np.mean(a < 2):5.0%}  "
                  f"rms z {np.sqrt(np.mean(a**2)):.2f}  (n = {a.size})")  # fmt: skip


if __name__ == "__main__":
    main()
