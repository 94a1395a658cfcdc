"""Plausibility warnings: a wrong mass, square size or frame rate shows as an implausible C_D, C_L or speed."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest

from hopscope.fitting.air import Air
from hopscope.fitting.bb import BB
from hopscope.fitting.estimate import fit_shots
from hopscope.fitting.fitfile import fit_from_json, fit_to_json
from hopscope.fitting.observe import ModelSpec, simulate_shot
from hopscope.fitting.plausibility import plausibility_warnings

BB_025 = BB(2.5e-4)
AIR = Air.standard()
SPEC = ModelSpec(BB_025, AIR)
T_S = np.arange(200) / 2000.0
#: Halving every length doubles C_D to this (gravity is not rescaled, which the lift absorbs).
SCALE_REL_TOL = 0.01


def _track(**kw):
    args = dict(speed_mps=95.0, elevation_rad=0.0, lift_coefficient=0.15, drag_param=0.45, decay_param=0.3)
    return simulate_shot(SPEC, t_s=T_S, sigma_m=2e-4, rng=1, **{**args, **kw})


def test_a_good_fit_draws_no_warning():
    fit = fit_shots([_track()], bb=BB_025, air=AIR)
    assert plausibility_warnings(fit) == ()
    assert plausibility_warnings(fit_from_json(fit_to_json(fit), "fit.json")) == ()


def test_wrong_mass_shows_as_implausible_drag_and_names_the_mass():
    fit = fit_shots([_track()], bb=BB(2.5 * BB_025.mass_kg), air=AIR)  # 0.625 g entered for a 0.25 g BB
    (w,) = [w for w in plausibility_warnings(fit) if w.startswith("C_D")]
    assert "BB mass" in w and "square size" in w


def test_wrong_square_size_shows_as_implausible_drag():
    t = _track()
    scaled = dataclasses.replace(t, x_m=0.5 * t.x_m, y_m=0.5 * t.y_m, sigma_m=0.5 * t.sigma_m)
    fit = fit_shots([scaled], bb=BB_025, air=AIR)
    assert fit.drag_coefficient.value == pytest.approx(2 * 0.45, rel=SCALE_REL_TOL)  # C_D ∝ 1/scale
    assert any(w.startswith("C_D = ") and "square size" in w for w in plausibility_warnings(fit))


def test_wrong_frame_rate_shows_as_implausible_lift_and_speed():
    t = _track()
    slow = dataclasses.replace(t, t_s=8.0 * t.t_s)  # 240 fps playback timing of a 1920 fps clip
    warnings = plausibility_warnings(fit_shots([slow], bb=BB_025, air=AIR))
    assert any("speed" in w and "frame rate" in w for w in warnings)
    assert any("C_L" in w and "frame rate" in w for w in warnings)
