"""Analytic texture filtering: the box-filtered checker equals the mean of the pattern over the footprint."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from hopscope.scenes import BoardSpec
from hopscope.scenes.board import _box_filtered_square_wave, board_reflectance

#: Box-filtered value vs a brute-force mean over 20,001 points of the footprint.
FILTER_TOL = 2e-3


def _square(x, s):
    return np.where(np.floor(x / s) % 2 == 0, 1.0, -1.0)


@settings(max_examples=60, deadline=None)
@given(x=st.floats(-3.0, 3.0), w=st.floats(1e-4, 0.3), s=st.floats(0.01, 0.5))
def test_box_filtered_square_wave_is_the_mean_over_the_footprint(x, w, s):
    xs = np.linspace(x - w / 2, x + w / 2, 20001)
    brute = float(np.mean(_square(xs, s)))
    assert abs(float(_box_filtered_square_wave(np.array(x), np.array(w), s)) - brute) < FILTER_TOL


@settings(max_examples=60, deadline=None)
@given(bx=st.floats(-0.2, 0.9), by=st.floats(-0.7, 0.2), w=st.floats(1e-4, 0.02))
def test_board_reflectance_is_the_mean_reflectance_over_the_footprint(bx, by, w):
    board = BoardSpec(cols=7, rows=4, square_m=0.1, margin_m=0.05)
    inside, refl = board_reflectance(board, np.array([bx]), np.array([by]), np.array([w]), np.array([w]))
    if not inside[0]:
        return
    n = 401
    gx, gy = np.meshgrid(np.linspace(bx - w / 2, bx + w / 2, n), np.linspace(by - w / 2, by + w / 2, n))
    s = board.square_m
    in_area = (gx >= -s) & (gx <= board.cols * s) & (gy >= -board.rows * s) & (gy <= s)
    a = np.floor(gx / s)
    b = np.floor(-gy / s)
    black = in_area & ((a + b) % 2 == 1)
    brute = np.where(black, board.black_reflectance, board.white_reflectance).mean()
    assert abs(refl[0] - brute) < 0.01 * (board.white_reflectance - board.black_reflectance)


def test_first_corner_has_a_white_square_diagonally_outside_and_the_last_a_black_one():
    board = BoardSpec(cols=7, rows=4, square_m=0.1, margin_m=0.05)
    s = board.square_m
    tiny = np.array([1e-6])
    pts_x = np.array([-0.5 * s, (board.cols - 1) * s + 0.5 * s])
    pts_y = np.array([0.5 * s, -(board.rows - 1) * s - 0.5 * s])
    _, refl = board_reflectance(board, pts_x, pts_y, np.repeat(tiny, 2), np.repeat(tiny, 2))
    assert refl[0] == pytest.approx(board.white_reflectance, abs=1e-6)
    assert refl[1] == pytest.approx(board.black_reflectance, abs=1e-6)
