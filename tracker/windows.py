"""Which candidate blobs of a frame are fitted, and in which window.

A blob that barely moved since the frame before is no BB in flight (:func:`_slow`). Overlapping bright
and dark blobs are the two halves of a marked BB, fitted as one ball in the union of their windows
(:func:`_marked_pairs`); a marked BB seen as one half only is fitted where the marked track predicts the
ball (:func:`_follow_marked`).
"""

from __future__ import annotations

import math

from .associate import MIN_STEP_PX
from .detect import Candidate
from .video import VideoInfo

#: Margin around the union of a marked BB's two half windows, px.
MARKED_PAD_PX = 3

#: A bright and a dark blob side by side are fitted as a marked BB only when the BB's image radius is at
#: least this, px (a smaller ball cannot show its two halves).
MARKED_MIN_RADIUS_PX = 2.0

#: A blob that moved less than this since the frame before is not localised, px (the linker's least step
#: per frame of a BB in flight, :data:`tracker.associate.MIN_STEP_PX`).
SLOW_STEP_PX = MIN_STEP_PX

#: A lone bright or dark blob is fitted as the marked BB when the marked track saw the ball at most this
#: many frames before (:func:`_follow_marked`).
MARKED_FOLLOW_FRAMES = 8

#: ... and the blob lies within this many image radii of where the track predicts the ball (a half's
#: centroid sits up to a radius off the ball's centre).
MARKED_FOLLOW_RADII = 3.0

#: ... plus this share of the predicted travel (a step that changes between detections).
MARKED_FOLLOW_STEP_SHARE = 0.2


def _overlap(a: Candidate, b: Candidate) -> bool:
    ar0, ar1, ac0, ac1 = a.box
    br0, br1, bc0, bc1 = b.box
    return ar0 < br1 and br0 < ar1 and ac0 < bc1 and bc0 < ac1


def _slow(c: Candidate, previous: dict[int, list[Candidate]]) -> bool:
    """A candidate within :data:`SLOW_STEP_PX` of one of the same sign in the frame before."""
    before = previous.get(c.frame - 1, ())
    return any(
        o.sign == c.sign and math.hypot(o.u_px - c.u_px, o.v_px - c.v_px) < SLOW_STEP_PX for o in before
    )


def _inside_box(c: Candidate, box: tuple[int, int, int, int]) -> bool:
    r0, r1, c0, c1 = box
    return r0 <= c.v_px < r1 and c0 <= c.u_px < c1


def _marked_pairs(cands: list[Candidate], info: VideoInfo) -> list[tuple[tuple[int, int, int, int], bool]]:
    """Union windows of bright and dark candidates that overlap (the two halves of a marked BB).

    Returns (r0, r1, c0, c1) windows grown by :data:`MARKED_PAD_PX`, clipped to the image, and whether a
    window touched the border. Each bright candidate pairs with the overlapping dark ones.
    """
    out = []
    for b in cands:
        if b.sign <= 0:
            continue
        group = [b] + [d for d in cands if d.sign < 0 and _overlap(b, d)]
        if len(group) < 2:
            continue
        r0 = min(c.box[0] for c in group) - MARKED_PAD_PX
        r1 = max(c.box[1] for c in group) + MARKED_PAD_PX
        c0 = min(c.box[2] for c in group) - MARKED_PAD_PX
        c1 = max(c.box[3] for c in group) + MARKED_PAD_PX
        edge = any(c.touches_edge for c in group) or r0 < 0 or c0 < 0 or r1 > info.height or c1 > info.width
        out.append(((max(0, r0), min(info.height, r1), max(0, c0), min(info.width, c1)), edge))
    return out


def _follow_marked(
    cands: list[Candidate],
    windows: list[tuple[tuple[int, int, int, int], bool]],
    seen: list[tuple[int, float, float, float]],
    frame: int,
    info: VideoInfo,
) -> list[tuple[tuple[int, int, int, int], bool]]:
    """A window for a marked BB seen as one half only, where the marked track predicts the ball.

    When the mark turns so that one half matches the wall, only the other half stands out and no bright and
    dark pair forms; such frames were lost from the marked track. Where the predicted ball lies wholly inside
    the image, within :data:`MARKED_FOLLOW_FRAMES` of the
    last marked detection, the unpaired candidates within :data:`MARKED_FOLLOW_RADII` image radii (plus the
    travel's uncertainty) of the position extrapolated from the last two at constant velocity get one
    window: their boxes and the predicted ball, grown by :data:`MARKED_PAD_PX`, clipped to the image.
    """
    if not seen or frame - seen[-1][0] > MARKED_FOLLOW_FRAMES:
        return []
    k1, u1, v1, rad = seen[-1]
    du = dv = 0.0
    if len(seen) == 2 and seen[0][0] < k1:
        k0, u0, v0, _ = seen[0]
        du, dv = (u1 - u0) / (k1 - k0), (v1 - v0) / (k1 - k0)
    gap = frame - k1
    pu, pv = u1 + du * gap, v1 + dv * gap
    if not (rad - 0.5 <= pu <= info.width - 0.5 - rad and rad - 0.5 <= pv <= info.height - 0.5 - rad):
        return []  # a ball cut by the image border: neither its centre nor its light can be told from half
    reach = MARKED_FOLLOW_RADII * rad + MARKED_FOLLOW_STEP_SHARE * math.hypot(du, dv) * gap
    taken = [c for c in cands if any(_inside_box(c, box) for box, _ in windows)]
    near = [c for c in cands if c not in taken and math.hypot(c.u_px - pu, c.v_px - pv) <= reach]
    if not near:
        return []
    half = rad + MARKED_PAD_PX
    r0 = min([c.box[0] for c in near] + [math.floor(pv - half)]) - MARKED_PAD_PX
    r1 = max([c.box[1] for c in near] + [math.ceil(pv + half) + 1]) + MARKED_PAD_PX
    c0 = min([c.box[2] for c in near] + [math.floor(pu - half)]) - MARKED_PAD_PX
    c1 = max([c.box[3] for c in near] + [math.ceil(pu + half) + 1]) + MARKED_PAD_PX
    edge = any(c.touches_edge for c in near) or r0 < 0 or c0 < 0 or r1 > info.height or c1 > info.width
    return [((max(0, r0), min(info.height, r1), max(0, c0), min(info.width, c1)), edge)]
