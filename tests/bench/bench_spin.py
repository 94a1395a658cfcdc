"""Benchmark of the spin estimator (hopscope.fitting.spin): prints two tables.

1. Synthetic brightness series of known rate, decay, noise, exposure and frame rate: the rate's error, the
   spread of (estimate − truth)/σ over seeds (1 when σ is honest), aliases and the decay time's error.
2. Rendered marked-BB scenes (``lane-spin`` and its variants): the BB's brightness summed in a disk at the
   true image centre of every visible frame, once as frame − background and once with the background the
   BB hides added back (α·B, α the BB's coverage of each pixel over the exposure), then measured; aliased
   variants also with a prior from the scene's own lift law and from the published saturating law.

Run: ``python tests/bench/bench_spin.py`` (about a minute on two cores).
"""

from __future__ import annotations

import importlib.util
import math
import time
from pathlib import Path

import numpy as np

from hopscope.fitting.laws import LinearLift
from hopscope.fitting.spin import (
    SpinOptions,
    SpinPrior,
    fit_spin_decay_coherent,
    measure_shot_spin,
    measure_spin,
    spin_prior_from_lift,
)
from hopscope.scenes import builtin_scene
from hopscope.scenes.variants import SPIN_VARIANTS, lane_spin_named

TWO_PI = 2.0 * math.pi


def _load_spin_tests():
    """The rendered-brightness helper lives with the tests that assert on it (tests/fitting/test_spin.py)."""
    path = Path(__file__).resolve().parents[1] / "fitting" / "test_spin.py"
    spec = importlib.util.spec_from_file_location("spin_tests", path)
    assert spec is not None and spec.loader is not None
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


SPIN_TESTS = _load_spin_tests()


def synthetic(rng, *, n, fs, rate, tau=math.inf, exposure=0.0, noise=0.03, depth=0.3):
    t = np.arange(n) / fs
    sub = (np.arange(101) + 0.5) / 101 - 0.5
    ts = t[:, None] + sub[None, :] * exposure
    ang = rate * tau * -np.expm1(-ts / tau) if math.isfinite(tau) else rate * ts
    b = (1.0 + depth * np.cos(ang + rng.uniform(0, TWO_PI))).mean(axis=1)
    return t, b + noise * rng.normal(size=n)


def synthetic_table(seeds: int = 100) -> None:
    cases = [
        # (label, n, fs, rev/s, tau s, exposure s, noise)
        ("lane-spin-like", 32, 10_000.0, 1027.0, math.inf, 2e-5, 0.03),
        ("slow 5k fps", 48, 5000.0, 600.0, math.inf, 1e-4, 0.05),
        ("long exposure", 64, 4000.0, 900.0, math.inf, 5e-4, 0.02),
        ("aliased 1800 fps", 40, 1800.0, 1027.0, math.inf, 2e-5, 0.03),
        ("fast decay", 86, 10_000.0, 900.0, 0.02, 2e-5, 0.05),
    ]
    print(f"synthetic series (rate error and pull spread over {seeds} seeds)")
    print(
        f"{'case':18s} {'n':>4s} {'fps':>7s} {'rev/s':>6s} {'median err %':>12s} {'pull sd':>8s} "
        f"{'cands':>5s} {'tau err %':>9s}"
    )
    for label, n, fs, rev, tau, te, noise in cases:
        errs, pulls, ncand, tau_err = [], [], [], []
        truth = TWO_PI * rev
        for seed in range(seeds):
            t, b = synthetic(
                np.random.default_rng(seed), n=n, fs=fs, rate=truth, tau=tau, exposure=te, noise=noise
            )
            prior = SpinPrior(truth, 0.05 * truth, "bench: the true rate ± 5 %")
            est = measure_spin(t, b, options=SpinOptions(exposure_s=te), prior=prior)
            ncand.append(len(est.candidates_radps))
            if est.rate_radps is None or est.stderr_radps is None:
                continue
            ref = truth * math.exp(-est.at_t_s / tau) if math.isfinite(tau) else truth
            errs.append(est.rate_radps / ref - 1.0)
            pulls.append((est.rate_radps - ref) / est.stderr_radps)
            if math.isfinite(tau) and seed < 20:
                d = fit_spin_decay_coherent(t, b, est)
                if d.scale is not None:
                    tau_err.append(d.scale / tau - 1.0)
        tau_txt = f"{100 * np.median(np.abs(tau_err)):9.2f}" if tau_err else f"{'-':>9s}"
        pull_txt = f"{np.std(pulls, ddof=1):8.2f}" if not math.isfinite(tau) else f"{'(chirp)':>8s}"
        print(
            f"{label:18s} {n:4d} {fs:7.0f} {rev:6.0f} {100 * np.median(np.abs(errs)):12.3f} {pull_txt} "
            f"{int(np.median(ncand)):5d} {tau_txt}"
        )


def fmt(x, scale=1.0, width=8, digits=1):
    return f"{x * scale:{width}.{digits}f}" if x is not None else f"{'-':>{width}s}"


def rendered_table() -> None:
    names = ["lane-spin", *SPIN_VARIANTS]
    print("\nrendered scenes: rate at the first visible frame, rev/s (truth, measured), decay time")
    print(
        f"{'scene':18s} {'brightness':10s} {'n':>3s} {'true':>7s} {'meas':>7s} {'err %':>6s} {'z':>5s} "
        f"{'tau':>6s} {'tau m':>6s} {'cands rev/s':24s} note"
    )
    for name in names:
        spec = builtin_scene(name) if name == "lane-spin" else lane_spin_named(name)
        t, raw, cor, truth = SPIN_TESTS.rendered_marked_brightness(spec)
        k, u, r = spec.flight.lift_slope, spec.flight.speed_mps, 0.5 * spec.bb.diameter_m
        for label, b in (("raw", raw), ("corrected", cor)):
            spin = measure_shot_spin(t, b, options=SpinOptions(exposure_s=spec.camera.exposure_s))
            note = spin.reason or spin.method
            if spin.rate_radps is None and spin.overall.aliased:
                cl = k * r * truth[0] / u  # the lift a fit would find at the first point
                prior = spin_prior_from_lift(
                    cl,
                    0.05 * cl,
                    speed_mps=u,
                    radius_m=r,
                    law=LinearLift(k),
                    law_rel_sigma=0.0,
                    source="the scene's lift law C_L = k S",
                )
                spin = measure_shot_spin(
                    t, b, options=SpinOptions(exposure_s=spec.camera.exposure_s), prior=prior
                )
                published = measure_spin(
                    t, b, prior=spin_prior_from_lift(cl, 0.05 * cl, speed_mps=u, radius_m=r)
                )
                note = f"{spin.method}; published-law prior: {published.reason or published.rate_radps}"
            ref = truth[0] if spin.at_t_s == t[0] else float(np.interp(spin.at_t_s, t, truth))
            err = None if spin.rate_radps is None else 100 * (spin.rate_radps / ref - 1.0)
            z = None if spin.rate_radps is None else (spin.rate_radps - ref) / spin.stderr_radps
            tau_m = spin.decay.scale if spin.decay is not None else None
            cands = ",".join(f"{c / TWO_PI:.0f}" for c in spin.candidates_radps[:4])
            print(
                f"{name:18s} {label:10s} {t.size:3d} {ref / TWO_PI:7.1f} "
                f"{fmt(spin.rate_radps, 1 / TWO_PI, 7)} {fmt(err, 1, 6, 2)} {fmt(z, 1, 5, 1)} "
                f"{spec.flight.spin_decay_time_s:6.3f} {fmt(tau_m, 1, 6, 3)} {cands:24s} {note[:90]}"
            )


if __name__ == "__main__":
    start = time.perf_counter()
    synthetic_table()
    rendered_table()
    print(f"\n{time.perf_counter() - start:.0f} s")
