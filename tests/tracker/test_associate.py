"""Association: BB tracks kept whole, distractors, flickers and leaves rejected, several shots split."""

from __future__ import annotations

import numpy as np

from hopscope.tracker.associate import LinkOptions, link

FPS = 240.0
SIGMA = 0.03


def _bb(first, n, u0, v0, vu, vv, au=-0.02, av=0.05, rng=None):
    k = np.arange(n)
    u = u0 + vu * k + 0.5 * au * k**2
    v = v0 + vv * k + 0.5 * av * k**2
    if rng is not None:
        u = u + rng.normal(0, SIGMA, n)
        v = v + rng.normal(0, SIGMA, n)
    return [(first + i, u[i], v[i], "bb") for i in range(n)]


def _run(points, **kw):
    f = np.array([p[0] for p in points])
    u = np.array([p[1] for p in points])
    v = np.array([p[2] for p in points])
    res = link(f, f / FPS, u, v, np.full(len(points), SIGMA), LinkOptions(**kw) if kw else None)
    labels = [p[3] for p in points]
    return res, labels


def test_one_shot_whole(rng):
    pts = _bb(10, 30, 50.0, 300.0, 25.0, -3.0, rng=rng)
    res, labels = _run(pts)
    assert len(res.tracks) == 1
    assert sorted(res.tracks[0].tolist()) == list(range(30))
    assert res.outliers.size == 0


def test_distractor_crossing_keeps_only_bb_points(rng):
    # A leaf drifting down across the BB's path, wobbling: it crosses the BB line near frame 20.
    pts = _bb(10, 30, 50.0, 300.0, 25.0, -3.0, rng=rng)
    leaf = []
    pos = np.array([300.0, 230.0])
    for f in range(0, 45):
        pos = pos + np.array([0.5, 1.6]) + rng.normal(0, 1.5, 2)
        leaf.append((f, pos[0], pos[1], "leaf"))
    res, labels = _run(pts + leaf)
    assert len(res.tracks) == 1
    kept = [labels[i] for i in res.tracks[0]]
    assert set(kept) == {"bb"}
    assert len(kept) >= 29
    assert any(r for _, r in res.rejected)  # the leaf was considered and turned down


def test_outlier_point_dropped(rng):
    pts = _bb(0, 25, 20.0, 100.0, 12.0, 1.0, rng=rng)
    f, u, v, _ = pts[12]
    pts[12] = (f, u + 2.5, v - 1.5, "glint")  # a reflection picked instead of the BB in one frame
    res, labels = _run(pts)
    assert len(res.tracks) == 1
    assert "glint" not in [labels[i] for i in res.tracks[0]]
    assert res.outliers.tolist() == [12]


def test_two_shots_become_two_tracks(rng):
    a = _bb(5, 20, 30.0, 200.0, 30.0, -1.0, rng=rng)
    b = [(f + 60, u, v + 15, "b") for f, u, v, _ in _bb(0, 20, 30.0, 200.0, 31.0, -1.2, rng=rng)]
    res, labels = _run(a + b)
    assert len(res.tracks) == 2
    assert {labels[i] for i in res.tracks[0]} == {"bb"}
    assert {labels[i] for i in res.tracks[1]} == {"b"}


def test_flickers_and_insects_rejected(rng):
    pts = []
    # three flickering highlights on a wall: stationary, on and off
    for f in range(60):
        for j, (u, v) in enumerate([(100, 100), (400, 50), (250, 300)]):
            if rng.uniform() < 0.7:
                pts.append((f, u + rng.normal(0, 0.2), v + rng.normal(0, 0.2), f"flicker{j}"))
    # an insect: fast, zig-zagging
    pos = np.array([50.0, 50.0])
    heading = 0.3
    for f in range(60):
        heading += rng.normal(0, 0.8)
        pos = pos + 6.0 * np.array([np.cos(heading), np.sin(heading)])
        pts.append((f, pos[0], pos[1], "insect"))
    res, labels = _run(pts)
    assert res.tracks == ()
    assert res.n_points == 0


def test_gap_in_detections_bridged(rng):
    pts = _bb(0, 30, 20.0, 100.0, 15.0, 0.5, rng=rng)
    del pts[14:16]  # two frames missed (BB behind a post)
    res, labels = _run(pts)
    assert len(res.tracks) == 1 and res.tracks[0].size == 28


def test_empty():
    res = link(np.zeros(0), np.zeros(0), np.zeros(0), np.zeros(0), np.zeros(0))
    assert res.tracks == () and res.n_points == 0


def test_scatter_ratio_measures_understated_sigma(rng):
    from hopscope.tracker.associate import scatter_ratio

    k = np.arange(200)
    t = k / FPS
    u = 30 + 20.0 * k - 0.01 * k**2
    v = 200 - 2.0 * k + 0.03 * k**2
    noisy_u = u + rng.normal(0, 0.1, k.size)
    noisy_v = v + rng.normal(0, 0.1, k.size)
    # the robust ratio from 200 points has ~10 % scatter (median of chi-square)
    assert abs(scatter_ratio(t, noisy_u, noisy_v, np.full(k.size, 0.1)) - 1.0) < 0.15
    assert abs(scatter_ratio(t, noisy_u, noisy_v, np.full(k.size, 0.025)) / 4.0 - 1.0) < 0.15
    assert scatter_ratio(t[:4], u[:4], v[:4], np.full(4, 0.1)) == 1.0


def _bent_by_the_lens(rng):
    """A shot smooth on the flight plane whose image path carries a small periodic bend (σ-sized many times)."""
    n = 30
    k = np.arange(n)
    x = 0.05 * k - 1e-4 * k**2  # m
    y = 0.6 - 1e-3 * k - 2e-5 * k**2
    u = 100.0 + x / 0.002  # plus a frame-to-frame bend the world mapping removes: under the outlier
    v = 300.0 - y / 0.002 + 0.3 * (-1.0) ** k  # floor (0.5 px) point by point, far above the noise as a whole
    world = np.column_stack([x, y]) + rng.normal(0, SIGMA * 0.002, (n, 2))
    return k + 5, u, v, world


def test_world_wiggle_test_survives_one_point_off_the_plane(rng):
    # A detection that maps off the flight plane (NaN metres) must not switch the wiggle test back to
    # image space for the real shot, where the lens bends its path.
    f, u, v, world = _bent_by_the_lens(rng)
    sig = np.full(f.size, SIGMA)
    clean = link(f, f / FPS, u, v, sig, world_xy=world)
    assert len(clean.tracks) == 1
    f2 = np.append(f, 12)
    u2, v2 = np.append(u, 900.0), np.append(v, 20.0)
    world2 = np.vstack([world, [np.nan, np.nan]])
    res = link(f2, f2 / FPS, u2, v2, np.full(f2.size, SIGMA), world_xy=world2)
    assert len(res.tracks) == 1 and sorted(res.tracks[0].tolist()) == list(range(f.size))
    image_only = link(f, f / FPS, u, v, sig)  # the premise: in the image the bend reads as a wiggle
    assert len(image_only.tracks) == 0
