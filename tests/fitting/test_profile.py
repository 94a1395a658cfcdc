"""BB profile: C_D per Re bin against the Clift-Grace-Weber curve of the `fluids` library, lift points,
files and errors."""

from __future__ import annotations

import json
import math

import fluids.drag
import numpy as np
import pytest

from hopscope.fitting.air import Air
from hopscope.fitting.bb import BB, BBTolerance
from hopscope.fitting.laws import SaturatingLift
from hopscope.fitting.observe import ModelSpec, simulate_shot
from hopscope.fitting.profile import (
    SCHEMA,
    build_profile,
    profile_from_json,
    profile_to_csv,
    profile_to_json,
    read_profile,
)
from hopscope.fitting.spin import measure_shot_spin, measured_spin_ratio

BB_025 = BB(2.5e-4)
AIR = Air.standard()
SPEEDS = (60.0, 80.0, 100.0, 120.0)
#: Allowance for the bin's C_D being an average over the tracked span rather than the value at its start.
SPAN_AVERAGE_TOL = 0.003


@pytest.fixture(scope="module")
def shots():
    spec = ModelSpec(BB_025, AIR, drag="sphere")
    rng = np.random.default_rng(0)
    return [
        simulate_shot(spec, t_s=np.arange(60) / 2000.0, sigma_m=3e-4, rng=rng, speed_mps=v, elevation_rad=0.0,
                      lift_coefficient=0.02, drag_param=1.0, decay_param=1 / 3, label=f"v{v:.0f}#{k}")
        for v in SPEEDS for k in range(2)
    ]  # fmt: skip


@pytest.fixture(scope="module")
def profile(shots):
    spins = [None] * 6 + [2500.0, 2600.0]
    return build_profile(shots, bb=BB_025, air=AIR, label="demo 0.25 g", n_bins=4, spin_radps=spins)


def test_drag_bins_follow_the_published_sphere_curve(profile):
    # reference: Clift, Grace & Weber (1978), Bubbles, Drops and Particles, Table 5.2, as implemented in
    # the `fluids` library (fluids.drag.Clift) — the data were made with the same law times 1.0
    assert len(profile.drag) == 4
    for b in profile.drag:
        ref = fluids.drag.Clift(b.re)
        assert abs(b.cd - ref) < 3 * b.cd_stderr + SPAN_AVERAGE_TOL, (b.re, b.cd, ref)
        assert b.n_shots == 2 and b.re_lo <= b.re <= b.re_hi
    res = [b.re for b in profile.drag]
    assert res == sorted(res)


def test_lift_points_say_where_spin_is_known(profile):
    assert len(profile.lift) == 8
    assert all(lp.spin_ratio is None for lp in profile.lift[:6])
    last = profile.lift[-1]
    assert last.spin_ratio == pytest.approx(BB_025.radius_m * 2600.0 / last.speed_mps)
    assert any("spin not measured for 6 shots" in n for n in profile.notes)
    for lp in profile.lift:
        assert abs(lp.cl - 0.02) < 4 * lp.cl_stderr


def test_assumed_k_gives_model_based_spin_ratios(shots):
    p = build_profile(shots[:4], bb=BB_025, air=AIR, n_bins=2, spin_radps=[None, None, None, 2500.0],
                      assumed_lift_k=0.5)  # fmt: skip
    assert [lp.spin_source for lp in p.lift] == ["assumed k=0.5"] * 3 + ["measured"]
    assert p.lift[0].spin_ratio == pytest.approx(p.lift[0].cl / 0.5)
    assert any("assumed k = 0.5" in n for n in p.notes)


def test_files_round_trip_and_carry_the_schema(profile, tmp_path):
    text = profile_to_json(profile)
    assert json.loads(text)["schema"] == SCHEMA
    p = tmp_path / "profile.json"
    p.write_text(text, encoding="utf-8")
    back = read_profile(p)
    assert back.drag == profile.drag and back.lift == profile.lift and back.notes == profile.notes
    csv = profile_to_csv(profile).splitlines()
    assert csv[0] == f"# schema: {SCHEMA}"
    header = next(line for line in csv if not line.startswith("#"))
    assert header.split(",")[:2] == ["kind", "label"]
    rows = [line.split(",") for line in csv if line.startswith(("drag", "lift"))]
    assert sum(r[0] == "drag" for r in rows) == 4 and sum(r[0] == "lift" for r in rows) == 8
    assert float(rows[0][7]) == pytest.approx(profile.drag[0].cd)


#: The BB share is added exactly in quadrature: σ² = σ_fit² + (|C|·σ_m/m)², up to float rounding (relative).
QUADRATURE_REL_TOL = 1e-9
#: A mass uncertainty well above a bag's 1 % (relative), so its share stands out of the fit's own σ.
LARGE_MASS_REL_SIGMA = 0.05


def test_a_larger_mass_sigma_widens_cd_and_cl_by_its_share_in_quadrature(shots):
    # fitting.bb.BBTolerance: at a fixed measured path C_D and C_L scale as m/d², so σ_m/m is their share
    exact = build_profile(shots, bb=BB_025, air=AIR, n_bins=4, tolerance=BBTolerance(0.0, 0.0))
    loose = build_profile(
        shots, bb=BB_025, air=AIR, n_bins=4, tolerance=BBTolerance(LARGE_MASS_REL_SIGMA * BB_025.mass_kg, 0.0)
    )
    assert len(exact.drag) == len(loose.drag) == 4
    for a, b in zip(exact.drag, loose.drag, strict=True):
        assert a.cd == b.cd and a.cd_stderr_bb == 0.0  # the values do not move, only their error bars
        share = abs(b.cd) * LARGE_MASS_REL_SIGMA
        assert b.cd_stderr_bb == pytest.approx(share, rel=QUADRATURE_REL_TOL)
        assert b.cd_stderr**2 - a.cd_stderr**2 == pytest.approx(share**2, rel=QUADRATURE_REL_TOL)
        assert b.cd_stderr > a.cd_stderr
    for a, b in zip(exact.lift, loose.lift, strict=True):
        share = abs(b.cl) * LARGE_MASS_REL_SIGMA
        assert b.cl_stderr**2 - a.cl_stderr**2 == pytest.approx(share**2, rel=QUADRATURE_REL_TOL)
    # the files carry the share and the tolerance, and read back the same
    d = json.loads(profile_to_json(loose))
    assert d["bb"]["tolerance"]["mass_sigma_kg"] == pytest.approx(LARGE_MASS_REL_SIGMA * BB_025.mass_kg)
    assert d["drag"][0]["drag_coefficient"]["stderr_bb"] == loose.drag[0].cd_stderr_bb
    assert d["lift"][0]["lift_coefficient"]["stderr_bb"] == loose.lift[0].cl_stderr_bb
    back = profile_from_json(json.dumps(d))
    assert back.drag == loose.drag and back.lift == loose.lift and back.tolerance == loose.tolerance
    csv = profile_to_csv(loose).splitlines()
    assert any(line.startswith("# bb_tolerance: mass_sigma_kg=") for line in csv)
    header = next(line for line in csv if not line.startswith("#")).split(",")
    first_drag = next(line for line in csv if line.startswith("drag")).split(",")
    assert float(first_drag[header.index("stderr_bb")]) == pytest.approx(loose.drag[0].cd_stderr_bb)


def test_profile_without_a_tolerance_takes_the_default_one(profile):
    default = BBTolerance.default_for(BB_025)
    assert profile.tolerance == default
    for b in profile.drag:
        assert b.cd_stderr_bb == pytest.approx(abs(b.cd) * default.aero_rel(BB_025), rel=QUADRATURE_REL_TOL)


@pytest.mark.parametrize(
    ("mutate", "match"),
    [
        (lambda d: d.update(schema="hopscope.profile/2"), r"p.json: key schema"),
        (lambda d: d["drag"][0].update(re="x"), r"p.json: key drag\[0\].re: expected a finite number"),
        (lambda d: d.pop("lift"), r"p.json: key lift: expected a list"),
    ],
)
def test_bad_profile_files(profile, mutate, match):
    d = json.loads(profile_to_json(profile))
    mutate(d)
    with pytest.raises(ValueError, match=match):
        profile_from_json(json.dumps(d), "p.json")


def test_bad_inputs(shots):
    with pytest.raises(ValueError, match="at least two shots"):
        build_profile(shots[:1], bb=BB_025, air=AIR)
    with pytest.raises(ValueError, match="spin_radps: expected 8 entries"):
        build_profile(shots, bb=BB_025, air=AIR, spin_radps=[1.0])
    with pytest.raises(ValueError, match="assumed_lift_k"):
        build_profile(shots, bb=BB_025, air=AIR, assumed_lift_k=-1.0)
    with pytest.raises(ValueError, match="re_edges"):
        build_profile(shots, bb=BB_025, air=AIR, re_edges=[3e4, 2e4])


#: The lift law of the rendered spin scenes (``lane-spin.toml``: ``lift_slope = 0.1``): C_L = k·S.
SCENE_LIFT_SLOPE = 0.1
#: A measured (C_L, S) point lies within this many combined σ of the law it was made with.
LIFT_POINT_PULL_MAX = 4.0
#: Each shot's C_L is known to this relative σ or better (30 ms at 10 000 frames/s, 0.2 mm noise), so the
#: agreement is a test: the published saturating law (C_L ≈ 0.2 at S = 0.2) lies hundreds of σ off.
CL_REL_SIGMA_MAX = 0.15
SPIN_FPS = 10_000.0
SPIN_DECAY_TIME_S = 2.0  # the scene's


def _flicker(t: np.ndarray, rate0: float, rng: np.random.Generator) -> np.ndarray:
    """A half-marked BB's brightness: one cycle per turn, spin decaying over SPIN_DECAY_TIME_S."""
    phase = rate0 * SPIN_DECAY_TIME_S * -np.expm1(-(t - t[0]) / SPIN_DECAY_TIME_S)
    return 1.0 + 0.3 * np.cos(phase) + 0.02 * rng.standard_normal(t.size)


def test_measured_lift_points_follow_the_lift_law_the_shots_were_made_with():
    # Simulated tracks, not the rendered lane-spin scenes: those fields are 3-5 ms long (32 frames at
    # 10 000 frames/s), over which C_L = 0.02 moves the BB by tens of micrometres, so their fitted C_L
    # carries a standard error of the order of C_L itself and could not test the law.
    spec = ModelSpec(BB_025, AIR)
    rng = np.random.default_rng(7)
    t = np.arange(300) / SPIN_FPS
    shots, spins = [], []
    for speed, ratio in ((80.0, 0.3), (100.0, 0.2), (120.0, 0.15), (100.0, 0.25)):
        rate0 = ratio * speed / BB_025.radius_m
        shots.append(
            simulate_shot(spec, t_s=t, sigma_m=2e-4, rng=rng, speed_mps=speed, elevation_rad=0.0,
                          lift_coefficient=SCENE_LIFT_SLOPE * ratio, drag_param=0.45,
                          decay_param=1 / SPIN_DECAY_TIME_S, label=f"v{speed:.0f}-S{ratio:g}#0")
        )  # fmt: skip
        spin = measure_shot_spin(t, _flicker(t, rate0, rng), first_t_s=float(t[0]))
        assert spin.rate_radps is not None and spin.stderr_radps is not None
        spins.append(spin)
    prof = build_profile(shots, bb=BB_025, air=AIR, n_bins=1, spin_radps=[s.rate_radps for s in spins])
    pulls_law, pulls_published = [], []
    for lp, spin in zip(prof.lift, spins, strict=True):
        assert lp.spin_source == "measured" and lp.cl is not None and lp.cl_stderr is not None
        assert lp.spin_ratio is not None and lp.cl_stderr < CL_REL_SIGMA_MAX * lp.cl
        s, s_sig = measured_spin_ratio(
            spin.rate_radps, spin.stderr_radps, speed_mps=lp.speed_mps, speed_stderr_mps=0.0,
            radius_m=BB_025.radius_m,
        )  # fmt: skip
        assert s == pytest.approx(lp.spin_ratio)
        sigma = math.hypot(lp.cl_stderr, SCENE_LIFT_SLOPE * s_sig)
        pulls_law.append((lp.cl - SCENE_LIFT_SLOPE * s) / sigma)
        pulls_published.append((lp.cl - float(SaturatingLift().coefficient(np.array(s)))) / sigma)
    assert max(abs(p) for p in pulls_law) < LIFT_POINT_PULL_MAX, pulls_law
    assert min(abs(p) for p in pulls_published) > LIFT_POINT_PULL_MAX, pulls_published
