"""A flight line not quite parallel to the board: the sloped flight plane and its place in the ensemble."""

from __future__ import annotations

import numpy as np
import pytest
from calib_synth import look_at_pose
from test_plane import BOARD, _close_setup

from hopscope.calibration.build import make_rig
from hopscope.calibration.rig import CameraState, rig_from_json, rig_to_json

MAP_TOL_M = 1e-9
#: The members' slopes must have the spread the model says (two independent edge offsets): within 30 %
#: for 64 members (the standard error of a standard deviation from 64 draws is ~9 %).
SLOPE_SD_RTOL = 0.3


def test_sloped_plane_maps_points_on_it_back_to_themselves():
    # Geometry check by construction: points on z = z0 + m·x projected by the pinhole model
    # (cv2.projectPoints) must map back to their own x, y through the ray-plane intersection.
    rot, t = look_at_pose((0.5, -0.2, 2.0), (0.5, -0.25, 0.0))
    k = np.array([[1000.0, 0, 640], [0, 1000.0, 360], [0, 0, 1]])
    z0, slope = 0.003, 4e-4
    state = CameraState(k, np.zeros(5), rot, t, z0, slope)
    xs = np.array([-0.8, 0.0, 0.6, 1.7])
    pts = np.column_stack([xs, [-0.1, -0.3, 0.0, -0.4], z0 + slope * xs])
    uv = state.world_to_pixel(pts)
    np.testing.assert_allclose(state.pixel_to_world(uv), pts[:, :2], atol=MAP_TOL_M)
    np.testing.assert_allclose(state.world_to_pixel(pts[:, :2]), uv, atol=1e-9)


def test_ensemble_slopes_follow_the_parallax_uncertainty_and_survive_the_file():
    truth, views, lens, placements, rng = _close_setup(seed=5)
    sigma = 1e-3
    rig = make_rig(views, lens, placements, BOARD, plane_z_m=0.004, plane_z_sigma_m=sigma, ensemble_size=64,
                   rng=rng)  # fmt: skip
    slopes = np.array([m.plane_slope for m in rig.ensemble])
    w, h = rig.image_size
    edges = rig.pixel_to_world(np.array([[0.0, (h - 1) / 2], [w - 1.0, (h - 1) / 2]]))
    expected_sd = np.sqrt(2.0) * sigma / (edges[1, 0] - edges[0, 0])
    assert np.std(slopes, ddof=1) == pytest.approx(expected_sd, rel=SLOPE_SD_RTOL)
    back = rig_from_json(rig_to_json(rig))
    np.testing.assert_array_equal([m.plane_slope for m in back.ensemble], slopes)


def test_no_parallax_uncertainty_means_no_slope():
    truth, views, lens, placements, rng = _close_setup(seed=6)
    rig = make_rig(views, lens, placements, BOARD, ensemble_size=8, rng=rng)
    assert all(m.plane_slope == 0.0 for m in rig.ensemble)


def test_absurd_slope_is_rejected():
    rot, t = look_at_pose((0.5, -0.2, 2.0), (0.5, -0.25, 0.0))
    with pytest.raises(ValueError, match="plane_slope"):
        CameraState(np.eye(3), np.zeros(5), rot, t, 0.0, float("nan"))
