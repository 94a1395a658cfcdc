"""ChArUco boards (``--board charuco``): partial lens views at the frame edges count, on rendered views."""

from __future__ import annotations

import json

import cv2
import numpy as np
import pytest
from charuco_synth import PX_PER_SQUARE, render_view, rotation

from hopscope import cli
from hopscope.calibration.charuco import CharucoSpec, detect_lens_view, detect_plane_view, draw_board
from hopscope.calibration.grid import GridSpec, detect_grid
from hopscope.errors import EXIT_BAD_INPUT, EXIT_OK

SIZE = (1280, 720)
K = np.array([[1000.0, 0.0, 640.0], [0.0, 1000.0, 360.0], [0.0, 0.0, 1.0]])
SQUARE_M = 0.04
MARKER_M = 0.028
GRID = GridSpec(9, 6, SQUARE_M)  # inner corners: a board of 10 × 7 squares, 0.40 × 0.28 m
BOARD_W_M, BOARD_H_M = 10 * SQUARE_M, 7 * SQUARE_M
#: Rendered corners against their projected truth, px (measured: ≤ 0.5 px on views tilted by 20°, warping
#: a drawn board with bilinear interpolation).
CORNER_TOL_PX = 0.7
#: Focal length from the rendered views, relative.
FOCAL_RTOL = 0.01
#: The plane view's corners mapped through the rig against their board positions, m.
PLANE_MAP_TOL_M = 1e-3
#: Where the lens views put the board's centre (camera x, y at 1 m, m) and how they tilt it (degrees
#: about x and y): spread over the frame; the last three cut the board at the frame's edge.
WHOLE_VIEWS = [
    (0.0, 0.0, 0, 0), (0.25, 0.1, 15, -20), (-0.25, -0.1, -15, 20), (0.2, -0.12, -20, -10),
    (-0.2, 0.12, 20, 10), (0.1, 0.15, 25, 0), (-0.1, -0.15, -25, 0), (0.28, -0.05, 0, 25),
    (-0.28, 0.05, 0, -25),
]  # fmt: skip
PARTIAL_VIEWS = [(0.62, 0.0, 0, 15), (-0.62, 0.05, 5, -15), (0.1, 0.33, 15, 5)]


def _pose(cx, cy, rx, ry, dist_m=1.0):
    rot = rotation(rx, ry)
    t = np.array([cx * dist_m, cy * dist_m, dist_m]) - rot @ np.array([BOARD_W_M / 2, BOARD_H_M / 2, 0.0])
    return rot, t


@pytest.fixture(scope="module")
def views(tmp_path_factory):
    d = tmp_path_factory.mktemp("charuco")
    spec = CharucoSpec(GRID, MARKER_M)
    board = draw_board(spec, PX_PER_SQUARE)
    rng = np.random.default_rng(4)
    out = {"spec": spec, "lens": [], "partial": [], "poses": {}, "dir": d}
    for kind, poses in (("lens", WHOLE_VIEWS), ("partial", PARTIAL_VIEWS)):
        for i, p in enumerate(poses):
            rot, t = _pose(*p)
            path = d / f"{kind}_{i:02d}.png"
            cv2.imwrite(str(path), render_view(board, SQUARE_M, K, rot, t, SIZE, rng))
            out[kind].append(path)
            out["poses"][str(path)] = (rot, t)
    # the plane view: the board upright in the flight plane, the camera square to it 1.5 m away
    rot, t = _pose(0.0, 0.0, 0, 0, dist_m=1.5)
    out["plane"] = d / "plane.png"
    cv2.imwrite(str(out["plane"]), render_view(board, SQUARE_M, K, rot, t, SIZE, rng))
    out["partial_plane"] = out["partial"][0]
    return out


def test_partial_views_at_the_edges_are_found_where_a_checkerboard_is_not(views):
    spec = views["spec"]
    for path in views["partial"]:
        img = cv2.imread(str(path), cv2.IMREAD_GRAYSCALE)
        got = detect_lens_view(img, spec, source=str(path))
        assert not isinstance(got, str), got
        assert 6 <= len(got.image_points) < GRID.n_corners
        rot, t = views["poses"][str(path)]
        truth, _ = cv2.projectPoints(got.object_points, cv2.Rodrigues(rot)[0], t, K, None)
        assert np.max(np.abs(truth.reshape(-1, 2) - got.image_points)) < CORNER_TOL_PX
        assert not detect_grid(img, GRID, source=str(path)).found  # a cut checkerboard is not found
        assert not detect_plane_view(img, spec, source=str(path)).found  # a plane view needs it whole


def test_calibrate_with_a_charuco_board_counts_the_partial_views(views, tmp_path, capsys):
    out = tmp_path / "rig.json"
    argv = ["calibrate", "--board", "charuco", "--grid", "9x6", "--square-mm", "40", "--marker-mm", "28",
            "--views", *map(str, views["lens"] + views["partial"]), "--plane", str(views["plane"]),
            "--ensemble", "4", "-o", str(out)]  # fmt: skip
    rc = cli.main(argv)
    cap = capsys.readouterr()
    assert rc == EXIT_OK, cap.err
    rig = json.loads(out.read_text())
    assert rig["provenance"]["detector"] == "charuco"
    assert sorted(rig["provenance"]["corners"]["partial_views"]) == sorted(map(str, views["partial"]))
    assert rig["camera_matrix"][0][0] == pytest.approx(K[0, 0], rel=FOCAL_RTOL)
    from hopscope.calibration.rig import read_rig

    r = read_rig(out)
    img = cv2.imread(str(views["plane"]), cv2.IMREAD_GRAYSCALE)
    det = detect_plane_view(img, views["spec"], source="plane")
    mapped = r.pixel_to_world(det.points())
    np.testing.assert_allclose(mapped, GRID.board_points()[:, :2], atol=PLANE_MAP_TOL_M)


def _bad(capsys, argv, needle):
    rc = cli.main(argv)
    err = capsys.readouterr().err
    assert rc == EXIT_BAD_INPUT and err.count("\n") == 1 and needle in err, err


def test_charuco_bad_input_is_one_line(views, tmp_path, capsys):
    base = ["calibrate", "--board", "charuco", "--grid", "9x6", "--square-mm", "40",
            "--views", *map(str, views["lens"]), "-o", str(tmp_path / "rig.json")]  # fmt: skip
    _bad(capsys, [*base, "--marker-mm", "40", "--plane", str(views["plane"])], "--marker-mm")
    _bad(
        capsys,
        [*base, "--plane", str(views["partial_plane"])],
        f"{views['partial_plane']}: plane view without",
    )
    plain = ["calibrate", "--grid", "9x6", "--square-mm", "40", "--marker-mm", "28"]
    _bad(capsys, [*plain, "--views", str(views["plane"]), "--plane", str(views["plane"]), "-o", str(tmp_path / "r.json")],
         "--marker-mm: only with --board charuco")  # fmt: skip
    assert not (tmp_path / "rig.json").exists()


def test_one_row_of_corners_is_refused_with_its_reason(views):
    # the board's bottom row alone at the frame's top edge: nine corners on a line give no pose
    rot, t = _pose(0.1, 0.4, 15, 5)
    board = draw_board(views["spec"], PX_PER_SQUARE)
    img = render_view(board, SQUARE_M, K, rot, t, SIZE, np.random.default_rng(1))
    got = detect_lens_view(img, views["spec"], source="edge.png")
    assert isinstance(got, str) and "lie along one line" in got, got
