"""Reading calibration inputs: view expansion, plane arguments, images, reading order, video sampling."""

from __future__ import annotations

from fractions import Fraction

import cv2
import numpy as np
import pytest

from hopscope.calibration.grid import GridSpec, canonical_order, detect_grid, parse_grid, to_gray
from hopscope.calibration.images import (
    check_plane_items,
    expand_views,
    parse_plane_arg,
    read_image,
    sample_video_views,
)

SPEC = GridSpec(5, 4, 0.03)


def _grid_points(spec, origin=(100.0, 50.0), step=20.0):
    c, r = np.meshgrid(np.arange(spec.cols), np.arange(spec.rows))
    return np.column_stack([origin[0] + step * c.ravel(), origin[1] + step * r.ravel()])


def test_canonical_order_undoes_flips():
    want = _grid_points(SPEC)
    g = want.reshape(SPEC.rows, SPEC.cols, 2)
    for flipped in (g[:, ::-1], g[::-1, :], g[::-1, ::-1]):
        np.testing.assert_array_equal(canonical_order(flipped.reshape(-1, 2), SPEC), want)


def test_canonical_order_rejects_board_turned_90_degrees_for_a_fixed_order():
    pts = _grid_points(SPEC)[:, ::-1]  # rows now run down the image
    with pytest.raises(ValueError, match=r"rows run vertically .* --grid should be 4x5"):
        canonical_order(pts, SPEC)


def test_parse_grid_and_spec_checks():
    assert parse_grid("11x6") == (11, 6) and parse_grid(" 9 X 7 ") == (9, 7)
    with pytest.raises(ValueError, match="--grid: expected COLSxROWS"):
        parse_grid("11,6")
    with pytest.raises(ValueError, match="--grid: need at least 3x3"):
        GridSpec(2, 6, 0.1)
    with pytest.raises(ValueError, match="--square-mm"):
        GridSpec(5, 4, -1.0)


def test_board_points_follow_world_frame():
    pts = SPEC.board_points(2.0)
    assert pts[0].tolist() == [2.0, 0.0, 0.0]
    assert pts[1, 0] == pytest.approx(2.03) and pts[SPEC.cols, 1] == pytest.approx(-0.03)  # x right, y up


def test_expand_views_folders_globs_and_missing(tmp_path):
    for name in ("b.png", "a.jpg", "notes.txt"):
        (tmp_path / name).write_bytes(b"x")
    got = expand_views([str(tmp_path)])
    assert [s.path.name for s in got] == ["a.jpg", "b.png"]
    assert [s.path.name for s in expand_views([str(tmp_path / "*.png")])] == ["b.png"]
    with pytest.raises(FileNotFoundError, match=r"\*\.tif: the pattern matches no files"):
        expand_views([str(tmp_path / "*.tif")])
    with pytest.raises(FileNotFoundError, match="gone.png: no such file or folder"):
        expand_views([str(tmp_path / "gone.png")])
    empty = tmp_path / "empty"
    empty.mkdir()
    with pytest.raises(ValueError, match="the folder holds no images"):
        expand_views([str(empty)])


def test_parse_plane_arg(tmp_path):
    assert parse_plane_arg("p.png") == (parse_plane_arg("p.png")[0], 0.0)
    path, off = parse_plane_arg("far/p.png:12.5")
    assert str(path) == "far/p.png" and off == 12.5
    with pytest.raises(ValueError, match=r"--plane p.png:abc: the offset in metres: not a number: 'abc'"):
        parse_plane_arg("p.png:abc")
    with pytest.raises(ValueError, match="the offset in metres: non-finite value"):
        parse_plane_arg("p.png:nan")
    odd = tmp_path / "a:b.png"  # an existing file whose name holds a colon is taken whole
    odd.write_bytes(b"x")
    assert parse_plane_arg(str(odd)) == (odd, 0.0)
    with pytest.raises(FileNotFoundError, match="no such plane image"):
        check_plane_items([(tmp_path / "none.png", 0.0)])


def test_read_image_errors(tmp_path):
    bad = tmp_path / "bad.png"
    bad.write_bytes(b"\x89PNG garbage")
    with pytest.raises(OSError, match=r"bad\.png: cannot read the image"):
        read_image(bad)
    with pytest.raises(FileNotFoundError, match="no such image file"):
        read_image(tmp_path / "missing.png")
    colour = np.zeros((4, 6, 3), np.uint8)
    assert to_gray(colour).shape == (4, 6)
    assert to_gray(np.full((4, 6), 65535, np.uint16)).max() == 255


@pytest.mark.slow
def test_video_of_lens_views_is_sampled_and_calibrates(rendered_close, tmp_path):
    import av

    from hopscope.calibration.lens import ViewPoints, calibrate_lens

    spec, scene = rendered_close
    b = scene.truth["board"]
    grid = GridSpec(b["cols"], b["rows"], b["square_m"])
    imgs = [cv2.imread(str(p), cv2.IMREAD_GRAYSCALE) for p in scene.lens_view_paths]
    video = tmp_path / "views.mkv"
    with av.open(str(video), "w") as out:
        stream = out.add_stream("ffv1", rate=Fraction(30))
        stream.width, stream.height, stream.pix_fmt = imgs[0].shape[1], imgs[0].shape[0], "gray"
        for img in imgs + imgs[:3]:  # three repeated views: the varied-view selection drops repeats
            for pkt in stream.encode(av.VideoFrame.from_ndarray(img, format="gray")):
                out.mux(pkt)
        for pkt in stream.encode():
            out.mux(pkt)
    dets, size = sample_video_views(video, grid, max_views=len(imgs))
    found = [d for d in dets if d.found]
    assert size == (1280, 720)
    assert len(found) == len(imgs)
    assert all("#" in d.source for d in dets)
    assert sum("similar to another view" in d.reason for d in dets) == 3
    lens = calibrate_lens([ViewPoints(d.source, d.corners, d.spec(grid).board_points()) for d in found], size)
    f_true = scene.truth["camera"]["camera_matrix"][0][0]
    assert abs(lens.camera_matrix[0, 0] - f_true) / f_true < 2e-3
    assert expand_views([str(video)])[0].is_video


@pytest.mark.slow
def test_detected_plane_corners_are_in_reading_order(rendered_close):
    _, scene = rendered_close
    b = scene.truth["board"]
    grid = GridSpec(b["cols"], b["rows"], b["square_m"])
    path, _ = scene.plane_views[0]
    det = detect_grid(read_image(path), grid, reading_order=True)
    c = scene.truth["camera"]
    pv = scene.truth["plane_views"][0]
    rvec, _ = cv2.Rodrigues(np.array(pv["rotation"]))
    want, _ = cv2.projectPoints(
        grid.board_points().reshape(-1, 1, 3),
        rvec,
        np.array(pv["translation"]),
        np.array(c["camera_matrix"]),
        np.array(c["dist_coeffs"]),
    )
    assert np.max(np.linalg.norm(det.corners - want.reshape(-1, 2), axis=1)) < 0.3


def _board_image(squares=(7, 5), square_px=40, margin_px=60):
    """A plain checkerboard picture (``squares`` columns × rows), slightly blurred."""
    cols, rows = squares
    h, w = rows * square_px + 2 * margin_px, cols * square_px + 2 * margin_px
    img = np.full((h, w), 230, np.uint8)
    for r in range(rows):
        for c in range(cols):
            if (r + c) % 2 == 0:
                y, x = margin_px + r * square_px, margin_px + c * square_px
                img[y : y + square_px, x : x + square_px] = 25
    return cv2.GaussianBlur(img, (0, 0), 1.0)


#: Corners of a drawn board are found to well under a pixel by every detector.
DRAWN_CORNER_TOL_PX = 0.5


def test_either_grid_order_is_found_and_put_in_reading_order():
    # a 7x5-square board (6x4 inner corners) upright and turned by 90°: --grid 6x4 finds both, and the
    # corners come in reading order with the counts as seen (6 along the rows upright, 4 when turned)
    spec = GridSpec(6, 4, 0.03)
    upright = _board_image()
    turned = np.ascontiguousarray(np.rot90(upright))
    a = detect_grid(upright, spec)
    b = detect_grid(turned, spec)
    assert a.found and b.found
    assert a.grid == (6, 4) and b.grid == (4, 6)
    assert b.spec(spec) == GridSpec(4, 6, 0.03)
    for det in (a, b):
        g = det.corners.reshape(det.grid[1], det.grid[0], 2)
        assert np.all(np.diff(g[:, :, 0], axis=1) > 0) and np.all(np.diff(g[:, :, 1], axis=0) > 0)
        # the inner corners sit on the square boundaries, 60 + k·40 px (minus the half-pixel centre)
        u = det.corners[:, 0] + 0.5
        assert np.max(np.abs((u - 60) / 40 - np.round((u - 60) / 40))) * 40 < DRAWN_CORNER_TOL_PX
        methods = {c.method for c in det.candidates}
        assert {"classic+subpix", "sb", "sb-accuracy"} <= methods
