"""The dropped ball in a clip: differencing against a median background, one smooth path through the blobs.

Self-contained (no tracker): :func:`find_ball` reads the clip through the ground floor's video reader and
returns the ball's centroids with their times (each row's rolling-shutter offset applied here, once).

Conventions
-----------
Pixels (u, v) in OpenCV order, the centre of the top-left pixel at (0, 0); images indexed (row, col);
times in seconds since the clip's first frame (container timestamps unless overridden).
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass
from pathlib import Path

import cv2
import numpy as np

from hopscope.shared.constants import MAD_TO_SIGMA
from hopscope.shared.video import check_frame_rate, iter_frames, point_times_s

from .freefall import MIN_DROP_POINTS

#: Detection: threshold in robust noise σ of the difference image, and its floor in grey levels.
DETECT_SIGMA = 6.0
DETECT_FLOOR_DN = 8.0
#: Smallest and largest accepted blob, px².
BLOB_MIN_AREA_PX = 3
BLOB_MAX_AREA_FRACTION = 0.01
#: Candidate blobs kept per frame (the largest), and the consensus and refined tolerances of the path
#: through them, px.
CANDIDATES_PER_FRAME = 3
PATH_CONSENSUS_PX = 3.0
PATH_REFINED_PX = 1.5
#: The fall's data start where the ball first moves more than this in one frame, px (on the lane
#: renders, the frames before it bias g by up to 0.6 % [measured]). # common practice, no published source
MOVING_STEP_PX = 0.3
#: Points of the path the backward growth fits its local curve to.
GROW_FIT_POINTS = 6
#: Frames sampled for the median background.
BACKGROUND_FRAMES = 15


@dataclass(frozen=True)
class DropClip:
    """The ball's image positions in a drop clip.

    Attributes
    ----------
    source : the clip's path.
    t_s : (N,) times of the frames where the ball was found, s.
    uv_px : (N, 2) ball centroids (u, v), px.
    frames : (N,) frame indices.
    n_frames : frames in the clip.
    timing : "container timestamps" or "--fps override".
    fps : frame rate implied by the timing, 1/s.
    frame_size : (w, h) of the frames, px.
    """

    source: str
    t_s: np.ndarray
    uv_px: np.ndarray
    frames: np.ndarray
    n_frames: int
    timing: str
    fps: float
    frame_size: tuple[int, int] = (0, 0)


# --- the clip ----------------------------------------------------------------------------------------------
def _frames(path: Path, fps: float | None):
    """Yield (time_s, index, luma frame) through the ground floor's reader (container times or override)."""
    for frame in iter_frames(path, fps_override=fps, fps_option="--drop-fps"):
        yield frame.t_s, frame.index, frame.luma


def find_ball(path: str | os.PathLike[str], *, fps: float | None = None, readout_s: float = 0.0) -> DropClip:
    """Find the dropped ball in each frame of a clip: |frame − median background|, largest blob's centroid.

    Parameters
    ----------
    path : the clip (any container/codec FFmpeg reads).
    fps : frame rate override, 1/s (frame k at k/fps); None uses the container's timestamps.
    readout_s : rolling-shutter readout time, top row to bottom row, s: row v of a frame is exposed
        (v / rows)·readout later than its top row, and a falling ball crosses the rows.

    Returns
    -------
    DropClip (frames without a single clear blob are left out).

    Notes
    -----
    Pixels (u, v) in OpenCV order, centroids weighted by the difference image; times in s from the first
    frame.
    """
    p = Path(path)
    if fps is not None:
        check_frame_rate(fps, "--drop-fps")
    if not (math.isfinite(readout_s) and readout_s >= 0):
        raise ValueError(f"--drop-readout-ms: expected a readout time >= 0, got {readout_s!r}")
    # pass 1: timestamps of all frames and an evenly spread sample of them for the median background
    # (memory stays bounded: the sample is thinned by half whenever it grows past twice its size)
    all_t_list: list[float] = []
    sample: list[tuple[int, np.ndarray]] = []
    step = 1
    for t, i, img in _frames(p, fps):
        all_t_list.append(t)
        if i % step == 0:
            sample.append((i, np.array(img)))
            if len(sample) > 2 * BACKGROUND_FRAMES:
                step *= 2
                sample = [(j, f) for j, f in sample if j % step == 0]
    n_frames = len(all_t_list)
    if n_frames < MIN_DROP_POINTS:
        raise ValueError(f"{p}: the drop clip has only {n_frames} frame(s)")
    keep_idx = np.unique(np.linspace(0, len(sample) - 1, min(BACKGROUND_FRAMES, len(sample))).astype(int))
    picked = [sample[j][1] for j in keep_idx]
    background = np.median(np.stack(picked), axis=0).astype(np.uint8)
    # one robust noise level for the clip: the blurred difference of a background sample, every 4th pixel
    probe = cv2.GaussianBlur(cv2.absdiff(picked[len(picked) // 2], background), (0, 0), 1.0)
    sub = probe[::4, ::4].astype(np.float32)
    sigma = MAD_TO_SIGMA * float(np.median(np.abs(sub - np.median(sub))))
    thr = max(DETECT_SIGMA * sigma, DETECT_FLOOR_DN)
    max_area = BLOB_MAX_AREA_FRACTION * background.size
    cand_t, cand_uv, cand_i = [], [], []
    for t, i, img in _frames(p, fps):  # pass 2: the ball in every frame
        diff = cv2.absdiff(img, background)
        mask = (cv2.GaussianBlur(diff, (0, 0), 1.0) > thr).astype(np.uint8)
        n, _, stats, _ = cv2.connectedComponentsWithStats(mask, connectivity=8)
        order = np.argsort(stats[1:, cv2.CC_STAT_AREA])[::-1][:CANDIDATES_PER_FRAME] + 1
        for best in order:
            x, y, w, h, area = stats[best, :5]
            if not (BLOB_MIN_AREA_PX <= area <= max_area):
                continue
            if x <= 0 or y <= 0 or x + w >= diff.shape[1] or y + h >= diff.shape[0]:
                continue  # cut by the frame's edge: its centroid would be biased
            pad = 2
            r0, r1 = max(y - pad, 0), min(y + h + pad, diff.shape[0])
            c0, c1 = max(x - pad, 0), min(x + w + pad, diff.shape[1])
            patch = np.clip(diff[r0:r1, c0:c1].astype(np.float64) - 0.5 * thr, 0, None)
            total = float(patch.sum())
            if total <= 0:
                continue
            rr, cc = np.mgrid[r0:r1, c0:c1]
            cand_uv.append([(patch * cc).sum() / total, (patch * rr).sum() / total])
            cand_t.append(t)
            cand_i.append(i)
    keep = _consistent_path(np.asarray(cand_i, int), np.asarray(cand_uv, float).reshape(-1, 2))
    uv_arr = np.asarray([cand_uv[j] for j in keep], float).reshape(-1, 2)
    frame_idx = np.asarray([cand_i[j] for j in keep], int)
    all_t = np.array(all_t_list)
    span = all_t[-1] - all_t[0]
    if fps is not None:
        timing, rate = "--fps override", float(fps)
    else:
        timing, rate = "container timestamps", (len(all_t) - 1) / span if span > 0 else float("nan")
    size = (int(background.shape[1]), int(background.shape[0]))
    # the ball's row is exposed that much later than the frame's top row (the one place that offset is applied)
    t_s = point_times_s(np.asarray([cand_t[j] for j in keep], float), uv_arr[:, 1], size[1], readout_s)
    return DropClip(str(p), t_s, uv_arr, frame_idx, n_frames, timing, rate, size)


def _consistent_path(frames: np.ndarray, uv: np.ndarray) -> list[int]:
    """Indices of the candidates that form one smooth path, at most one per frame.

    Consensus of a cubic u(k), v(k) in the frame index k (a fall seen through a lens is smooth; a cubic
    absorbs the perspective and distortion bending over the fall) from deterministic triplets of
    candidates spread over the clip (RANSAC, Fischler & Bolles 1981, Commun. ACM 24:381, with a fixed
    sampling pattern), then refined on its inliers.
    """
    if len(uv) < MIN_DROP_POINTS:
        return list(range(len(uv)))
    order = np.argsort(frames, kind="stable")
    frames, uv = frames[order], uv[order]
    n = len(uv)
    k = frames.astype(float)
    best: np.ndarray | None = None
    best_count = 0
    picks = np.linspace(0, n - 1, 12).astype(int)
    for a in picks[:6]:
        for b in picks[3:9]:
            for c in picks[6:]:
                if not (frames[a] < frames[b] < frames[c]):
                    continue
                sel = np.array([a, b, c])
                cu = np.polyfit(k[sel], uv[sel, 0], 2)
                cv = np.polyfit(k[sel], uv[sel, 1], 2)
                r = np.hypot(np.polyval(cu, k) - uv[:, 0], np.polyval(cv, k) - uv[:, 1])
                inl = r < PATH_CONSENSUS_PX
                if inl.sum() > best_count:
                    best, best_count = inl, int(inl.sum())
    if best is None or best_count < MIN_DROP_POINTS:
        return []
    for _ in range(3):  # refine with a cubic on the inliers
        deg = 3 if best.sum() > 8 else 2
        cu = np.polyfit(k[best], uv[best, 0], deg)
        cv = np.polyfit(k[best], uv[best, 1], deg)
        r = np.hypot(np.polyval(cu, k) - uv[:, 0], np.polyval(cv, k) - uv[:, 1])
        best = r < PATH_REFINED_PX
    chosen: dict[int, int] = {}
    for j in np.flatnonzero(best):
        f = int(frames[j])
        if f not in chosen or r[j] < r[chosen[f]]:
            chosen[f] = int(j)
    _grow_backward(chosen, frames, k, uv)
    return sorted(int(order[j]) for j in chosen.values())


def _grow_backward(chosen: dict[int, int], frames: np.ndarray, k: np.ndarray, uv: np.ndarray) -> None:
    """Follow the ball from the path's first frame back in time (into ``chosen``, frame → candidate): each
    earlier frame's candidate nearest a quadratic through the next :data:`GROW_FIT_POINTS` chosen points,
    within :data:`PATH_CONSENSUS_PX`. A whole-clip curve cannot follow a ball that sat in a holder and
    was let go; the release search (:func:`find_release`) then decides where the free fall starts."""
    if len(chosen) < GROW_FIT_POINTS:
        return
    by_frame: dict[int, list[int]] = {}
    for j, f in enumerate(frames):
        by_frame.setdefault(int(f), []).append(j)
    f = min(chosen) - 1
    while f >= int(frames.min()) and f in by_frame:
        nxt = sorted(chosen)[:GROW_FIT_POINTS]
        sel = np.array([chosen[g] for g in nxt])
        cu = np.polyfit(k[sel], uv[sel, 0], 2)
        cv = np.polyfit(k[sel], uv[sel, 1], 2)
        pred = np.array([np.polyval(cu, f), np.polyval(cv, f)])
        cand = by_frame[f]
        d = [float(np.linalg.norm(uv[j] - pred)) for j in cand]
        if min(d) > PATH_CONSENSUS_PX:
            return
        chosen[f] = cand[int(np.argmin(d))]
        f -= 1


def _moving(clip: DropClip) -> np.ndarray:
    """Mask of the falling part: from the last frame before the ball first moves more than
    :data:`MOVING_STEP_PX` in one frame (drops the ball held still in the background, in a hand or in a
    holder, where its centroid can also be pulled by what holds it; what remains of a slow release,
    :func:`find_release` trims)."""
    uv = clip.uv_px
    if len(uv) < 3:
        return np.ones(len(uv), bool)
    step = np.linalg.norm(np.diff(uv, axis=0), axis=1)
    moving = np.concatenate([[False], step > MOVING_STEP_PX])
    if not moving.any():
        return np.ones(len(uv), bool)
    mask = np.zeros(len(uv), bool)
    mask[max(int(np.argmax(moving)) - 1, 0) :] = True
    return mask
