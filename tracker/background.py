"""Background model for a static camera: a per-pixel temporal median of frames before and after.

For frame k the background is the per-pixel median of the frames k ± g, k ± 2g, k ± 3g (those that exist;
the frame itself is never used), g being ``gap_frames``. A BB moving faster than its own image size per g
frames appears in at most one of those samples, which the median rejects; slow changes of light (a sunlit
wall, drifting shadows) are followed within 6g frames. The window is a ring buffer: memory is bounded by
6g + 1 frames whatever the clip's length.

Detection runs on a block-averaged copy of each frame (``scale`` px per low-resolution pixel, 1 = none),
whose median is computed with a min/max sorting network (cheap enough to keep pace with decoding); the
sub-pixel fit uses the full-resolution median, computed only inside small windows around candidates.

The difference image is signed: positive where the frame is brighter than the background. Polarity
(bright tracer on dark, white BB on a wall, dark BB on a bright sky) is decided later from the blobs.

References
----------
Piccardi, M. (2004). Background subtraction techniques: a review. IEEE SMC 4:3099–3104 (temporal median).
Knuth, D. E. (1998). The Art of Computer Programming vol. 3, §5.3.4 (sorting networks).
"""

from __future__ import annotations

from collections import deque
from collections.abc import Callable, Iterable, Iterator
from dataclasses import dataclass

import cv2
import numpy as np

from hopscope.shared.constants import MAD_TO_SIGMA

from .video import VideoFrame

#: Samples on each side of the frame: k ± g, k ± 2g, ..., k ± SIDE_SAMPLES·g.
SIDE_SAMPLES = 3

#: Fewest background samples a frame needs (a median of two cannot reject a BB in one of them).
MIN_SAMPLES = 3

#: Low-resolution tile size for the noise map, low-res px.
NOISE_TILE = 32

#: How often the noise map is re-estimated, frames.
NOISE_EVERY = 24

#: Least noise σ the detection assumes, grey levels: 8-bit video is quantised (a difference of rounded
#: values spreads by ~0.4) and compression leaves sparse, heavy-tailed residues of a grey level or two
#: even where the sensor noise was smoothed away.  # common practice, no published source
NOISE_FLOOR_DN = 1.0


def default_scale(width: int, height: int) -> int:
    """Block size for detection, a power of two, so the low-resolution image is about 480 px wide."""
    target = max(1.0, min(width / 480.0, height / 270.0))
    s = 1
    while s * 2 <= target * 1.5:
        s *= 2
    return s


def downsample(luma: np.ndarray, scale: int) -> np.ndarray:
    """Block-average an image by ``scale`` px (uint8); the image itself when scale is 1.

    Powers of two are halved repeatedly with OpenCV's bilinear resize at exactly half size, which averages
    disjoint 2×2 blocks (several times faster than area resampling); other factors use area resampling.
    Low-resolution pixel j covers full-resolution pixels j·scale … j·scale + scale − 1.
    """
    if scale == 1:
        return luma
    img = luma
    s = int(scale)
    while s % 2 == 0:
        h, w = img.shape
        img = cv2.resize(img[: h - h % 2, : w - w % 2], (w // 2, h // 2), interpolation=cv2.INTER_LINEAR)
        s //= 2
    if s > 1:
        h, w = img.shape
        img = cv2.resize(img, (w // s, h // s), interpolation=cv2.INTER_AREA)
    return img


def median_of(images: list[np.ndarray]) -> np.ndarray:
    """Per-pixel median of a few same-shape uint8 images, by an odd-even transposition sorting network.

    For an even count the median is the mean of the two middle values (rounded down).
    """
    n = len(images)
    if n == 0:
        raise ValueError("median_of: no images")
    if n == 1:
        return images[0].copy()
    v = [np.array(im, copy=True) for im in images]
    for rnd in range(n):
        for i in range(rnd % 2, n - 1, 2):
            lo = cv2.min(v[i], v[i + 1])
            hi = cv2.max(v[i], v[i + 1])
            v[i], v[i + 1] = lo, hi
    if n % 2:
        return v[n // 2]
    a, b = v[n // 2 - 1], v[n // 2]
    return ((a.astype(np.uint16) + b) >> 1).astype(np.uint8)


@dataclass(frozen=True)
class WindowFrame:
    """A frame ready for detection, with its background samples.

    Attributes
    ----------
    frame : the decoded frame (index, time, luma).
    low : block-averaged luma, uint8.
    diff_low : low-res frame minus low-res background, int16 (grey levels).
    noise_low : per-pixel noise σ of ``diff_low`` (tile map), float32, grey levels.
    samples : the frames the background is the median of.
    scale : block size of the low-res image, px.
    diff_coarse, noise_coarse : ``diff_low`` block-averaged by 2 (float32) and its noise map: faint,
        extended blobs (long streaks) stand out better there.
    """

    frame: VideoFrame
    low: np.ndarray
    diff_low: np.ndarray
    noise_low: np.ndarray
    samples: tuple[VideoFrame, ...]
    scale: int
    diff_coarse: np.ndarray | None = None
    noise_coarse: np.ndarray | None = None

    def background_roi(self, r0: int, r1: int, c0: int, c1: int) -> np.ndarray:
        """Full-resolution median background in rows r0:r1, cols c0:c1, float32 grey levels."""
        stack = np.stack([s.luma[r0:r1, c0:c1] for s in self.samples]).astype(np.float32)
        return np.median(stack, axis=0)

    def diff_roi(self, r0: int, r1: int, c0: int, c1: int) -> np.ndarray:
        """Full-resolution frame minus background in a window, float32 grey levels."""
        return self.frame.luma[r0:r1, c0:c1].astype(np.float32) - self.background_roi(r0, r1, c0, c1)


def noise_map(diff_low: np.ndarray, tile: int = NOISE_TILE) -> np.ndarray:
    """Per-tile robust σ of a difference image (1.4826 · median |d|), expanded to the image, float32.

    For integer images the median is interpolated within its bin (the grouped-data median, e.g.
    Spiegel & Stephens, Schaum's Outline of Statistics, ch. 3).

    σ never goes below :data:`NOISE_FLOOR_DN` (half that for float images, which are averages of several).
    """
    h, w = diff_low.shape
    ty, tx = max(1, h // tile), max(1, w // tile)
    hh, ww = ty * tile if h >= tile else h, tx * tile if w >= tile else w
    bh, bw = hh // ty, ww // tx
    blocks = np.abs(diff_low[: ty * bh, : tx * bw].astype(np.float32)).reshape(ty, bh, tx, bw)
    a = blocks.transpose(0, 2, 1, 3).reshape(ty, tx, -1)
    mad = np.median(a, axis=2)
    if np.issubdtype(diff_low.dtype, np.integer):
        # integer data: interpolate the median within its unit bin (grouped-data median), so the
        # quantisation of 8-bit video does not bias σ by up to half a grey level
        m = mad[..., None]
        below = np.sum(a < m, axis=2)
        at = np.maximum(np.sum(a == m, axis=2), 1)
        lo = np.where(mad > 0, mad - 0.5, 0.0)
        width = np.where(mad > 0, 1.0, 0.5)
        mad = lo + width * (0.5 * a.shape[2] - below) / at
    floor = NOISE_FLOOR_DN if np.issubdtype(diff_low.dtype, np.integer) else 0.5 * NOISE_FLOOR_DN
    sig = np.maximum(MAD_TO_SIGMA * mad, floor).astype(np.float32)
    full = np.repeat(np.repeat(sig, bh, axis=0), bw, axis=1)
    out = np.empty((h, w), np.float32)
    out[: full.shape[0], : full.shape[1]] = full
    if full.shape[0] < h:
        out[full.shape[0] :, :] = out[full.shape[0] - 1 : full.shape[0], :]
    if full.shape[1] < w:
        out[:, full.shape[1] :] = out[:, full.shape[1] - 1 : full.shape[1]]
    return out


def windowed(
    frames: Iterable[VideoFrame],
    *,
    gap_frames: int = 2,
    scale: int = 1,
    low_of: Callable[[VideoFrame], np.ndarray] | None = None,
) -> Iterator[WindowFrame]:
    """Attach a temporal-median background to each frame of a stream.

    Parameters
    ----------
    frames : decoded frames in order.
    gap_frames : g, the spacing of the background samples (k ± g, k ± 2g, k ± 3g), frames.
    scale : block size of the detection image, px.
    low_of : the frame's detection image when it was made elsewhere (the decoding thread makes it with
        :func:`downsample` while this one detects); None: :func:`downsample` here.

    Yields
    ------
    WindowFrame
        Frame k once frame k + 3g has arrived (or the stream ended); memory holds 6g + 1 frames.

    Raises
    ------
    ValueError
        The clip has too few frames to form a background (fewer than ``MIN_SAMPLES + 1``).
    """
    if gap_frames < 1:
        raise ValueError(f"gap_frames: expected an integer >= 1, got {gap_frames}")
    g = int(gap_frames)
    reach = SIDE_SAMPLES * g
    buf: deque[tuple[VideoFrame, np.ndarray]] = deque()
    first_index: int | None = None
    noise: np.ndarray | None = None
    noise_c: np.ndarray | None = None
    done = 0
    total = 0

    def ready(pos: int) -> WindowFrame:
        nonlocal noise, noise_c, done
        frame, low = buf[pos]
        picks = []
        for j in range(1, SIDE_SAMPLES + 1):
            for q in (pos - j * g, pos + j * g):
                if 0 <= q < len(buf):
                    picks.append(q)
        if len(picks) < MIN_SAMPLES:  # a short clip: use every other frame there is
            picks = [q for q in range(len(buf)) if q != pos]
        if len(picks) < MIN_SAMPLES:
            raise ValueError(
                f"video has too few frames ({total}) to model the background (need at least {MIN_SAMPLES + 1})"
            )
        bg = median_of([buf[q][1] for q in picks])
        diff = cv2.subtract(low, bg, dtype=cv2.CV_16S)
        h2, w2 = diff.shape[0] // 2, diff.shape[1] // 2
        coarse = None
        if h2 >= 8 and w2 >= 8:
            d32 = diff[: 2 * h2, : 2 * w2].astype(np.float32)
            coarse = cv2.resize(d32, (w2, h2), interpolation=cv2.INTER_LINEAR)  # exact 2×2 means
        if noise is None or done % NOISE_EVERY == 0:
            noise = noise_map(diff)
            noise_c = noise_map(coarse, tile=max(8, NOISE_TILE // 2)) if coarse is not None else None
        done += 1
        return WindowFrame(
            frame=frame,
            low=low,
            diff_low=diff,
            noise_low=noise,
            samples=tuple(buf[q][0] for q in picks),
            scale=scale,
            diff_coarse=coarse,
            noise_coarse=noise_c,
        )

    # buf holds frames k - reach .. k + reach; position of frame k is `reach` once the buffer is full.
    for fr in frames:
        total += 1
        if first_index is None:
            first_index = fr.index
        buf.append((fr, downsample(fr.luma, scale) if low_of is None else low_of(fr)))
        # frame k = newest - reach is ready; its position in buf:
        pos = len(buf) - 1 - reach
        if pos >= 0:
            yield ready(pos)
        if len(buf) > 2 * reach:
            buf.popleft()
    # Flush: frames whose future samples are cut by the end of the clip.
    start = max(0, len(buf) - reach)
    if total <= reach:
        start = 0
    for pos in range(start, len(buf)):
        yield ready(pos)
