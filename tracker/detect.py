"""Candidate blobs from the low-resolution difference image, with a noise-scaled threshold.

A pixel is significant when |frame − background| exceeds ``threshold_sigma`` times the local noise σ (the
tile map of :func:`tracker.background.noise_map`), on the detection image and on a copy binned by 2 (a
two-level pyramid: a faint, extended streak stands out where its signal adds up over more pixels). Significant pixels seed blobs, which are grown to
``grow_sigma`` (hysteresis, so a faint streak's ends stay in the fit window). Each blob becomes a
:class:`Candidate` with its sign (+1 brighter than the background, −1 darker) and a full-resolution window.

Conventions: pixel (u, v) = (col, row), the centre of the top-left pixel at (0, 0).
"""

from __future__ import annotations

from dataclasses import dataclass

import cv2
import numpy as np

from .background import WindowFrame

#: Seed threshold in units of the local noise σ. Gaussian noise exceeds 5.5σ in 4e-8 of pixels (about one
#: false seed per 200 frames of 480×270 detection pixels).
THRESHOLD_SIGMA = 5.5

#: Hysteresis threshold that blobs grow to, σ.
GROW_SIGMA = 2.5

#: Most candidates kept per frame and polarity (the strongest).
MAX_CANDIDATES = 4

#: Seeds are grouped in tiles of this many low-resolution px for labelling, each crop grown by
#: SEED_MARGIN px (a blob longer than the margin makes the whole image be labelled instead).
SEED_TILE = 32
SEED_MARGIN = 24

#: Margin added around a blob's box for the fit window, full-resolution px (at least this, or 2 blocks).
PAD_PX = 5


@dataclass(frozen=True)
class Candidate:
    """A blob in one frame's difference image.

    Attributes
    ----------
    frame : frame index.
    sign : +1 (brighter than the background) or −1 (darker).
    peak_snr : largest |difference| / σ in the blob (low resolution).
    u_px, v_px : signal-weighted centre, full-resolution px (coarse).
    box : (r0, r1, c0, c1) full-resolution fit window (rows r0:r1, cols c0:c1), clipped to the image.
    touches_edge : the window was clipped by the image border.
    """

    frame: int
    sign: int
    peak_snr: float
    u_px: float
    v_px: float
    box: tuple[int, int, int, int]
    touches_edge: bool


def find_candidates(
    wf: WindowFrame,
    *,
    threshold_sigma: float = THRESHOLD_SIGMA,
    grow_sigma: float = GROW_SIGMA,
    max_candidates: int = MAX_CANDIDATES,
    polarity: int = 0,
) -> list[Candidate]:
    """Blobs in a frame's difference image.

    Parameters
    ----------
    wf : the frame with its background (:func:`tracker.background.windowed`).
    threshold_sigma, grow_sigma : seed and hysteresis thresholds, in units of the local noise σ.
    max_candidates : most blobs kept per polarity (strongest first).
    polarity : +1 bright blobs only, −1 dark only, 0 both.

    Returns
    -------
    list of Candidate, strongest first within each polarity.
    """
    levels = [(wf.diff_low, wf.noise_low, wf.scale)]
    if wf.diff_coarse is not None and wf.noise_coarse is not None:
        levels.append((wf.diff_coarse, wf.noise_coarse, 2 * wf.scale))
    out: list[Candidate] = []
    # one cheap pass per level decides whether anything stands out at all (most frames: nothing)
    live = []
    for diff, noise, scale in levels:
        lim = _limit(noise, threshold_sigma)
        if bool((np.abs(diff) > lim).any()):
            live.append((diff, noise, scale, lim))
    if not live:
        return out
    for sign in (1, -1):
        if polarity and sign != polarity:
            continue
        found: list[Candidate] = []
        for diff, noise, scale, lim in live:
            sd = diff if sign > 0 else np.negative(diff)  # int16: no overflow for 8-bit sources
            seeds = sd > lim
            if not seeds.any():
                continue
            for c in _blobs(wf, sd, noise, scale, seeds, sign, grow_sigma, max_candidates):
                # the coarse level adds only blobs the fine level missed
                if not any(_inside(c, f) for f in found):
                    found.append(c)
        found.sort(key=lambda c: -c.peak_snr)
        out.extend(found[:max_candidates])
    return out


_LIMITS: dict[tuple[int, float], tuple[np.ndarray, np.ndarray]] = {}


def _limit(noise: np.ndarray, threshold_sigma: float) -> np.ndarray:
    """threshold_sigma · noise, cached while the same noise map is in use (it is refreshed every few frames)."""
    key = (id(noise), float(threshold_sigma))
    hit = _LIMITS.get(key)
    if hit is not None and hit[0] is noise:
        return hit[1]
    lim = noise * np.float32(threshold_sigma)
    if len(_LIMITS) > 8:
        _LIMITS.clear()
    _LIMITS[key] = (noise, lim)
    return lim


def _inside(c: Candidate, f: Candidate) -> bool:
    r0, r1, c0, c1 = f.box
    return r0 <= c.v_px < r1 and c0 <= c.u_px < c1


def _seed_boxes(seeds: np.ndarray) -> list[tuple[int, int, int, int]]:
    """Crops (r0, r1, c0, c1) of the low-resolution image around the seed pixels, merged where they overlap.

    Seeds are grouped by :data:`SEED_TILE` tiles, each grown by :data:`SEED_MARGIN`; labelling the blobs
    in these crops instead of the whole image keeps the cost with the blobs, not the frame size.
    """
    h, w = seeds.shape
    # OpenCV's scan for set pixels is ~30× faster than np.nonzero on a detection image (same row-major order)
    found = cv2.findNonZero(np.ascontiguousarray(seeds).view(np.uint8))
    if found is None:
        return []
    xs, ys = found.reshape(-1, 2).T
    boxes: list[list[int]] = []
    for ty, tx in sorted(set(zip((ys // SEED_TILE).tolist(), (xs // SEED_TILE).tolist(), strict=True))):
        b = [
            max(0, ty * SEED_TILE - SEED_MARGIN),
            min(h, (ty + 1) * SEED_TILE + SEED_MARGIN),
            max(0, tx * SEED_TILE - SEED_MARGIN),
            min(w, (tx + 1) * SEED_TILE + SEED_MARGIN),
        ]
        merged = True
        while merged:
            merged = False
            for o in boxes:
                if b[0] < o[1] and o[0] < b[1] and b[2] < o[3] and o[2] < b[3]:
                    b = [min(b[0], o[0]), max(b[1], o[1]), min(b[2], o[2]), max(b[3], o[3])]
                    boxes.remove(o)
                    merged = True
                    break
        boxes.append(b)
    return [(b[0], b[1], b[2], b[3]) for b in boxes]


def _label_blobs(
    sd: np.ndarray, noise: np.ndarray, seeds: np.ndarray, grow_sigma: float, box: tuple[int, int, int, int]
) -> tuple[list[tuple[float, float, float, int, int, int, int]], bool]:
    """Blobs grown from the seeds inside one crop: (snr, cu, cv, x, y, w, h) in low-res image coordinates,
    and whether one of them touches a crop edge that is not the image's edge."""
    r0, r1, c0, c1 = box
    H, W = sd.shape
    sd_c, noise_c, seeds_c = sd[r0:r1, c0:c1], noise[r0:r1, c0:c1], seeds[r0:r1, c0:c1]
    grow = (sd_c > noise_c * np.float32(grow_sigma)).astype(np.uint8)
    _n, labels, stats, _ = cv2.connectedComponentsWithStats(grow, connectivity=8)
    seed_labels = np.unique(labels[seeds_c])
    seed_labels = seed_labels[seed_labels > 0]
    found = []
    clipped = False
    for lab in seed_labels:
        x, y, w, h, _area = (int(q) for q in stats[lab])
        if (
            (x == 0 and c0 > 0)
            or (y == 0 and r0 > 0)
            or (x + w == c1 - c0 and c1 < W)
            or (y + h == r1 - r0 and r1 < H)
        ):
            clipped = True
        sub_l = labels[y : y + h, x : x + w] == lab
        sub = np.where(sub_l, sd_c[y : y + h, x : x + w].astype(np.float32), np.float32(0.0))
        snr = float(np.max(sub / noise_c[y : y + h, x : x + w]))
        tot = float(sub.sum())
        # first moments from the row and column sums (Σ s·col = Σ_col col · Σ_row s)
        cu = x + float(sub.sum(axis=0) @ np.arange(w, dtype=np.float32)) / tot if tot > 0 else x + w / 2
        cv = y + float(sub.sum(axis=1) @ np.arange(h, dtype=np.float32)) / tot if tot > 0 else y + h / 2
        found.append((snr, cu + c0, cv + r0, x + c0, y + r0, w, h))
    return found, clipped


def _blobs(
    wf: WindowFrame,
    sd: np.ndarray,
    noise: np.ndarray,
    s: int,
    seeds: np.ndarray,
    sign: int,
    grow_sigma: float,
    max_candidates: int,
) -> list[Candidate]:
    found = []
    for br0, br1, bc0, bc1 in _seed_boxes(seeds):
        blobs, clipped = _label_blobs(sd, noise, seeds, grow_sigma, (br0, br1, bc0, bc1))
        if clipped:  # a blob reaches past its crop: label the whole image once
            found = _label_blobs(sd, noise, seeds, grow_sigma, (0, sd.shape[0], 0, sd.shape[1]))[0]
            break
        found.extend(blobs)
    found.sort(key=lambda f: -f[0])
    H, W = wf.frame.luma.shape
    pad = max(PAD_PX, 2 * s)
    out = []
    for snr, cu, cv, x, y, w, h in found[:max_candidates]:
        r0, r1 = y * s - pad, (y + h) * s + pad
        c0, c1 = x * s - pad, (x + w) * s + pad
        edge = r0 < 0 or c0 < 0 or r1 > H or c1 > W
        box = (max(0, r0), min(H, r1), max(0, c0), min(W, c1))
        # low-res pixel j covers full-res pixels j*s .. j*s+s-1, centre j*s + (s-1)/2
        out.append(
            Candidate(
                frame=wf.frame.index,
                sign=sign,
                peak_snr=snr,
                u_px=cu * s + (s - 1) / 2,
                v_px=cv * s + (s - 1) / 2,
                box=box,
                touches_edge=bool(edge),
            )
        )
    return out
