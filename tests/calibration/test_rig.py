"""Rig mapping (pixel ↔ plane) and rig.json I/O."""

from __future__ import annotations

import json

import cv2
import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from hopscope.calibration.dropcheck import DropCheck, Measured
from hopscope.calibration.rig import SCHEMA, CameraState, Rig, read_rig, rig_from_json, rig_to_json

ROUND_TRIP_TOL_PX = 1e-6
ROUND_TRIP_TOL_M = 1e-9
JACOBIAN_RTOL = 1e-4
ROTATION_TOL_M = 1e-9


def test_world_pixel_round_trip_on_grid(close_rig):
    xy = np.stack(np.meshgrid(np.linspace(0.1, 2.3, 9), np.linspace(-0.1, 0.7, 5)), -1).reshape(-1, 2)
    uv = close_rig.world_to_pixel(xy)
    assert np.all((uv >= 0) & (uv < np.array(close_rig.image_size)))
    np.testing.assert_allclose(close_rig.pixel_to_world(uv), xy, atol=ROUND_TRIP_TOL_M)


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(u=st.floats(0, 1279), v=st.floats(0, 719))
def test_pixel_world_pixel_round_trip(close_rig, u, v):
    # Invariant (style.md habit 11): unproject then project returns the pixel, anywhere in the frame.
    rig = close_rig  # immutable, safe to share between examples
    xy = rig.pixel_to_world([[u, v]])
    np.testing.assert_allclose(rig.world_to_pixel(xy), [[u, v]], atol=ROUND_TRIP_TOL_PX)


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(x=st.floats(0.1, 2.3), y=st.floats(-0.1, 0.7), z0=st.sampled_from([0.0, 0.03]))
def test_world_pixel_world_round_trip(close_rig, x, y, z0):
    # Invariant: project a plane point, unproject the pixel onto the same plane, get the point back.
    import dataclasses

    rig = dataclasses.replace(close_rig, plane_z_m=z0)
    np.testing.assert_allclose(
        rig.pixel_to_world(rig.world_to_pixel([[x, y]])), [[x, y]], atol=ROUND_TRIP_TOL_M
    )


def test_mapping_matches_pinhole_ray_plane_without_distortion():
    # Pinhole model: x_cam ~ K^-1 (u, v, 1); the plane z = z0 meets C + s R^T x_cam (Hartley & Zisserman 2003,
    # "Multiple View Geometry", 2nd ed., sec. 8.1 back-projection of points to rays).
    rot, t = np.eye(3), np.array([-1.0, 0.2, 3.0])
    rot, _ = cv2.Rodrigues(np.array([0.1, -0.2, 0.05]))
    k = np.array([[1000.0, 0, 640], [0, 1010.0, 360], [0, 0, 1]])
    for z0 in (0.0, 0.25):
        rig = Rig((1280, 720), k, np.zeros(5), rot, t, z0, 0.0)
        uv = np.array([[10.0, 20.0], [640.0, 360.0], [1200.0, 700.0]])
        rays = (np.linalg.inv(k) @ np.column_stack([uv, np.ones(3)]).T).T @ rot
        c = -rot.T @ t
        s = (z0 - c[2]) / rays[:, 2]
        np.testing.assert_allclose(
            rig.pixel_to_world(uv), c[:2] + s[:, None] * rays[:, :2], atol=ROUND_TRIP_TOL_M
        )


def test_jacobian_matches_inverse_of_projection_jacobian(close_rig):
    uv = np.array([[100.0, 80.0], [640.0, 360.0], [1200.0, 650.0]])
    jac = close_rig.pixel_to_world_jacobian(uv)
    xy = close_rig.pixel_to_world(uv)
    h = 1e-6
    for i in range(len(uv)):
        fwd = np.empty((2, 2))
        for a in range(2):
            d = np.zeros(2)
            d[a] = h
            fwd[:, a] = (close_rig.world_to_pixel([xy[i] + d]) - close_rig.world_to_pixel([xy[i] - d]))[0] / (
                2 * h
            )
        np.testing.assert_allclose(jac[i], np.linalg.inv(fwd), rtol=JACOBIAN_RTOL)


def test_json_round_trip_keeps_everything(close_rig, tmp_path):
    member = CameraState(
        close_rig.camera_matrix * 1.0,
        close_rig.dist_coeffs,
        close_rig.rotation,
        close_rig.translation + [0.001, 0, 0],
        0.0,
    )
    rig = Rig(
        close_rig.image_size,
        close_rig.camera_matrix,
        close_rig.dist_coeffs,
        close_rig.rotation,
        close_rig.translation,
        0.0,
        0.05,
        ensemble=(member,),
        coverage_m=(0.0, 2.4, -0.1, 0.7),
        drop_check=DropCheck(
            clip="drop.mp4",
            timing="container timestamps",
            fps=500.0,
            frames=150,
            g_expected_mps2=9.80665,
            verdict="inconsistent",
            g_measured_mps2=Measured(9.5, 0.01),
            likely_cause="scale",
            kept_by_user=True,
        ),
        provenance={"views_used": 12},
        warnings=("poor coverage",),
    )
    path = tmp_path / "rig.json"
    path.write_text(rig_to_json(rig))
    back = read_rig(path)
    assert back.digest == rig.digest
    assert json.loads(path.read_text())["schema"] == SCHEMA
    uv = np.array([[300.0, 200.0]])
    np.testing.assert_allclose(back.ensemble_pixel_to_world(uv), rig.ensemble_pixel_to_world(uv))
    assert back.ensemble_pixel_to_world(uv).shape == (1, 1, 2)
    assert back.drop_check == rig.drop_check and back.warnings == rig.warnings
    assert back.drop_check.failed and "likely cause: scale" in back.drop_check_warning


def test_rig_file_without_the_newer_drop_check_keys_reads(close_rig):
    # a drop check as files written before the release search carry it (no release_frame, likely_cause,
    # clean_parabola, kept_by_user)
    old = {
        "clip": "d.mkv", "timing": "container timestamps", "fps": 500.0, "frames": 160,
        "g_expected_mps2": 9.80665, "levelled": False, "verdict": "consistent",
        "g_measured_mps2": {"value": 9.81, "stderr": 0.02}, "g_ratio": 1.0003,
        "tilt_deg": {"value": 0.01, "stderr": 0.05},
        "tilt_stderr_parts_deg": {"fit": 0.04, "centroid_systematic": 0.03},
        "fall_px": 300.0, "drag_per_m": None, "points": 150, "duration_s": 0.3, "residual_rms_m": 1e-4,
    }  # fmt: skip
    doc = json.loads(rig_to_json(close_rig))
    doc["drop_check"] = old
    back = rig_from_json(json.dumps(doc), "old.json")
    assert back.drop_check.verdict == "consistent" and not back.drop_check.failed
    assert back.drop_check.kept_by_user is False and back.drop_check_warning is None
    assert back.drop_check.to_dict()["tilt_stderr_parts_deg"] == old["tilt_stderr_parts_deg"]
    doc["drop_check"] = {**old, "verdict": "fine"}
    with pytest.raises(ValueError, match=r"old\.json: .*drop_check\.verdict: expected one of"):
        rig_from_json(json.dumps(doc), "old.json")


def test_digest_changes_with_content(close_rig):
    other = Rig(
        close_rig.image_size,
        close_rig.camera_matrix,
        close_rig.dist_coeffs,
        close_rig.rotation,
        close_rig.translation + [0, 0, 1e-6],
        0.0,
        0.05,
        coverage_m=close_rig.coverage_m,
    )
    assert other.digest != close_rig.digest
    assert len(close_rig.digest) == 64


def _doc(rig):
    return json.loads(rig_to_json(rig))


def test_reader_rejects_other_schema(close_rig):
    d = _doc(close_rig)
    d["schema"] = "hopscope.rig/2"
    with pytest.raises(ValueError, match=r"^cam\.json: schema 'hopscope.rig/2' is not supported"):
        rig_from_json(json.dumps(d), "cam.json")


@pytest.mark.parametrize("field", ["camera_matrix", "dist_coeffs", "coverage_m", "ensemble", "plane_z_m"])
def test_reader_rejects_missing_field(close_rig, field):
    d = _doc(close_rig)
    del d[field]
    with pytest.raises(ValueError, match=rf"^cam\.json: missing field '{field}'$"):
        rig_from_json(json.dumps(d), "cam.json")


@pytest.mark.parametrize(
    "path", [("translation", 1), ("camera_matrix", 0, 2), ("plane_z_m",), ("reprojection_rms_px",)]
)
def test_reader_rejects_non_finite_value(close_rig, path):
    d = _doc(close_rig)
    target = d
    for key in path[:-1]:
        target = target[key]
    target[path[-1]] = float("nan")
    text = json.dumps(d)  # writes NaN
    with pytest.raises(ValueError, match=r"^cam\.json: .*non-finite") as info:
        rig_from_json(text, "cam.json")
    assert "\n" not in str(info.value)


def test_reader_names_field_of_bad_shape(close_rig):
    d = _doc(close_rig)
    d["rotation"] = [[1, 0], [0, 1]]
    with pytest.raises(ValueError, match=r"^cam\.json: rig field rotation: expected an array of shape 3x3"):
        rig_from_json(json.dumps(d), "cam.json")


def test_reader_rejects_non_json(tmp_path):
    p = tmp_path / "broken.json"
    p.write_text("{not json")
    with pytest.raises(ValueError, match=r"broken\.json: not a valid rig file"):
        read_rig(p)


def test_rotating_world_keeps_pixels_and_turns_coordinates(close_rig):
    ang = 0.01
    turned = close_rig.rotated_about_z(ang)
    uv = np.array([[200.0, 300.0], [900.0, 100.0]])
    old = close_rig.pixel_to_world(uv)
    c, s = np.cos(ang), np.sin(ang)
    np.testing.assert_allclose(
        turned.pixel_to_world(uv), old @ np.array([[c, -s], [s, c]]).T, atol=ROTATION_TOL_M
    )


def test_ray_missing_plane_gives_nan():
    # camera looking away from the plane z = 0 (plane behind it)
    rig = Rig(
        (100, 100),
        [[100.0, 0, 50], [0, 100.0, 50], [0, 0, 1]],
        np.zeros(5),
        np.eye(3),
        [0, 0, -1.0],
        0.0,
        0.0,
    )
    # camera centre at z = +1 looking along +z (R = I): rays have positive z and never meet z = 0 ahead
    assert np.all(np.isnan(rig.pixel_to_world([[50.0, 50.0]])))
