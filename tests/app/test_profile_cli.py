"""``hopscope profile``: shots at several speeds → C_D per Reynolds-number bin and C_L per shot."""

from __future__ import annotations

import json

import pytest

from hopscope import cli
from hopscope.fitting.profile import read_profile
from hopscope.tracker.trackfile import track_to_csv

from .tracks_synth import TRUTH, synthetic_track

SPEEDS_MPS = (70.0, 78.0, 86.0, 94.0, 102.0, 110.0)
#: Every bin's C_D must hold the simulated value within this many of its own standard errors.
Z_TOL = 4.0


def _run(capsys, argv):
    try:
        rc = cli.main(["profile", *argv])
    except SystemExit as exc:
        rc = exc.code
    cap = capsys.readouterr()
    return rc, cap.out, cap.err


@pytest.fixture
def tracks(tmp_path):
    path = tmp_path / "speeds.csv"
    path.write_text(track_to_csv(synthetic_track(n_shots=len(SPEEDS_MPS), n=60, speeds_mps=SPEEDS_MPS)))
    return path


def test_profile_recovers_drag_in_every_bin(tmp_path, capsys, tracks):
    out = tmp_path / "bb.json"
    rc, stdout, err = _run(
        capsys, [str(tracks), "--mass-g", "0.25", "--bins", "2", "--label", "demo BB", "-o", str(out)]
    )
    assert rc == 0, err
    prof = read_profile(out)
    assert len(prof.drag) == 2 and prof.label == "demo BB"
    for b in prof.drag:
        assert b.cd is not None and b.cd_stderr is not None
        assert abs(b.cd - TRUTH["drag_param"]) < Z_TOL * b.cd_stderr
    assert prof.drag[0].re_hi <= prof.drag[1].re_lo + 1e-9  # bins ordered by Reynolds number
    assert len(prof.lift) == len(SPEEDS_MPS)
    assert all(p.spin_ratio is None for p in prof.lift)  # no spin measured, none invented
    csv_text = out.with_suffix(".csv").read_text()
    assert csv_text.startswith("#") and "kind," in csv_text and csv_text.count("\ndrag,") == 2
    assert "C_D, Re" in stdout
    assert json.loads(out.read_text())["schema"] == "hopscope.profile/1"


#: The mass tolerance's share enters exactly in quadrature (relative, float rounding).
QUADRATURE_REL_TOL = 1e-9


def test_mass_sigma_widens_the_profiles_cd_by_its_share_in_quadrature(tmp_path, capsys, tracks):
    profiles = {}
    for sigma_g in ("0", "0.0125"):  # exact, then 5 % of 0.25 g
        out = tmp_path / f"bb_{sigma_g}.json"
        argv = [
            str(tracks),
            "--mass-g",
            f"0.25:{sigma_g}",
            "--diameter-mm",
            "5.95:0",
            "--bins",
            "2",
            "-o",
            str(out),
        ]
        rc, stdout, err = _run(capsys, argv)
        assert rc == 0, err
        profiles[sigma_g] = read_profile(out)
    assert "BB tolerance" in stdout and "mass ± 0.0125 g" in stdout
    for a, b in zip(profiles["0"].drag, profiles["0.0125"].drag, strict=True):
        assert a.cd_stderr_bb == 0.0 and b.cd is not None
        share = abs(b.cd) * 0.0125 / 0.25
        assert b.cd_stderr**2 - a.cd_stderr**2 == pytest.approx(share**2, rel=QUADRATURE_REL_TOL)
    assert profiles["0.0125"].tolerance is not None and profiles["0.0125"].tolerance.origin == "given"


def test_assumed_k_gives_model_based_spin_ratios(tmp_path, capsys, tracks):
    out = tmp_path / "bb.json"
    rc, _, err = _run(capsys, [str(tracks), "--mass-g", "0.25", "--assumed-lift-k", "0.5", "-o", str(out)])
    assert rc == 0, err
    prof = read_profile(out)
    for p in prof.lift:
        assert p.spin_ratio == pytest.approx(p.cl / 0.5, rel=1e-9)
        assert "assumed" in p.spin_source


def test_one_shot_is_not_a_profile(tmp_path, capsys):
    path = tmp_path / "one.csv"
    path.write_text(track_to_csv(synthetic_track(n_shots=1)))
    out = tmp_path / "bb.json"
    rc, _, err = _run(capsys, [str(path), "--mass-g", "0.25", "-o", str(out)])
    assert rc == 2 and "at least two shots" in err and err.count("\n") == 1
    assert not out.exists() and not out.with_suffix(".csv").exists()


def test_output_must_be_json(tmp_path, capsys, tracks):
    rc, _, err = _run(capsys, [str(tracks), "--mass-g", "0.25", "-o", str(tmp_path / "bb.txt")])
    assert rc == 2 and "bb.txt" in err and ".json" in err


def test_bad_mass_names_the_option(tmp_path, capsys, tracks):
    rc, _, err = _run(capsys, [str(tracks), "--mass-g", "-1", "-o", str(tmp_path / "bb.json")])
    assert rc == 2 and "--mass-g" in err and not (tmp_path / "bb.json").exists()


def test_profile_warns_when_the_tracks_come_from_different_rigs(tmp_path, capsys):
    paths = []
    for rig, speeds in (("rigA", SPEEDS_MPS[:3]), ("rigB", SPEEDS_MPS[3:])):
        p = tmp_path / f"{rig}.csv"
        p.write_text(track_to_csv(synthetic_track(n_shots=3, n=60, speeds_mps=speeds, rig=rig)))
        paths.append(str(p))
    rc, _, err = _run(capsys, [*paths, "--mass-g", "0.25", "--bins", "2", "-o", str(tmp_path / "bb.json")])
    assert rc == 0, err
    warning = [ln for ln in err.splitlines() if "different rigs" in ln]
    assert len(warning) == 1 and "rigA" in warning[0] and "rigB" in warning[0]
