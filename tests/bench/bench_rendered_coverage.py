"""Do the error bars tell the truth on rendered footage? The whole chain over render seeds and perturbed truths.

Each seed runs :func:`coverage_chain.one_seed` (``tests/app/coverage_chain.py``, shared with the CI test
``tests/app/test_rendered_coverage.py``): a perturbed truth with a drawn flight line and a told BB is
rendered, calibrated, tracked and fitted, and z = (fit − true)/σ is printed.

Honest error bars put |z| < 1 about 68.3 % and |z| < 2 about 95.4 % of the time (normal distribution).
With n seeds a coverage fraction p̂ has a binomial standard error √(p(1 − p)/n) (≈ 0.066 at n = 50 for
p = 0.683), so read the fractions with that in mind; the rms of z (1 for honest bars, 0.8 for bars 25 %
too wide, 1.25 for bars 20 % too narrow) is the sharper summary. Prints one row per seed and the table.

    python tests/bench/bench_rendered_coverage.py [--scene lane-close|lane-coverage|...] [--seeds 12] [--first 1]
        [--no-perturb] [--out /tmp/hopscope-coverage]
    python tests/bench/bench_rendered_coverage.py --combine run1.txt run2.txt   # one table from printed runs
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "app"))

from coverage_chain import QUANTITIES, one_seed, table


def combine(paths: list[str]) -> None:
    """Print one table from the per-seed rows of earlier runs' printed output (runs split into chunks)."""
    zs: dict[str, list[float]] = {q: [] for q in QUANTITIES}
    n = failed = 0
    for path in paths:
        for line in Path(path).read_text(encoding="utf-8").splitlines():
            cells = line.split()
            if not cells or not cells[0].isdigit():
                continue
            n += 1
            if cells[1] == "failed:":
                failed += 1
                continue
            for q, cell in zip(QUANTITIES, cells[1 : 1 + len(QUANTITIES)], strict=True):
                if cell != "-":
                    zs[q].append(float(cell.rstrip("σ")))
    print(f"{len(paths)} runs: {n} seeds ({failed} failed)")
    for line in table(zs, n):
        print("  " + line)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--scene", default="lane-close")
    ap.add_argument("--seeds", type=int, default=12)
    ap.add_argument("--first", type=int, default=1, help="first seed")
    ap.add_argument("--no-perturb", action="store_true", help="render the scene's own truth every time")
    ap.add_argument("--out", default="/tmp/hopscope-coverage")
    ap.add_argument(
        "--combine", nargs="+", metavar="FILE", help="one table from earlier runs' printed output"
    )
    args = ap.parse_args()
    if args.combine:
        combine(args.combine)
        return
    root = Path(args.out)
    zs: dict[str, list[float]] = {q: [] for q in QUANTITIES}
    t0 = time.perf_counter()
    print(f"{'seed':>4}  " + "  ".join(f"{q:>9}" for q in QUANTITIES) + "   s", flush=True)
    failed = 0
    for seed in range(args.first, args.first + args.seeds):
        t_seed = time.perf_counter()
        try:
            est = one_seed(args.scene, seed, root, perturb=not args.no_perturb)
        except (ValueError, OSError) as exc:  # a failed stage is a result of the run: count it, go on
            failed += 1
            print(f"{seed:>4}  failed: {exc}", flush=True)
            continue
        z = {q: None if e is None else e.z() for q, e in est.items()}
        for q in QUANTITIES:
            if z[q] is not None:
                zs[q].append(float(z[q]))  # type: ignore[arg-type]
        cells = "  ".join(f"{'-':>9}" if z[q] is None else f"{z[q]:+8.2f}σ" for q in QUANTITIES)
        print(f"{seed:>4}  {cells}  {time.perf_counter() - t_seed:4.0f}", flush=True)
    perturb = "perturbed truths" if not args.no_perturb else "the scene's own truth"
    print(
        f"\n{args.scene}, {perturb}: {args.seeds} seeds ({failed} failed) in {time.perf_counter() - t0:.0f} s"
    )
    for line in table(zs, args.seeds):
        print("  " + line)


if __name__ == "__main__":
    main()
