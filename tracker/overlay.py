"""Overlays for people who would rather look than read: a contact sheet (PNG/JPEG) or an annotated video.

The contact sheet shows the clip's first frame with every shot's points joined (one colour per shot) and
the rejected candidates as small grey crosses, above a grid of enlarged crops around shot points with a
cross-hair at the fitted centre. The annotated video is the clip itself with the same marks, frame by
frame (a second decoding pass, streamed).

Pixel (u, v) = (col, row), centre of the top-left pixel at (0, 0).
"""

from __future__ import annotations

import math
import os
from collections.abc import Sequence
from pathlib import Path

import av
import cv2
import numpy as np

from .pipeline import TrackResult
from .video import iter_frames

IMAGE_SUFFIXES = (".png", ".jpg", ".jpeg")
VIDEO_SUFFIXES = (".mp4", ".mkv", ".avi", ".mov")

#: Colours (BGR) for shots 0, 1, 2, ... and for rejected candidates.
SHOT_COLOURS = ((60, 220, 60), (40, 170, 255), (255, 120, 40), (220, 60, 220), (40, 220, 220))
REJECT_COLOUR = (150, 150, 150)
#: Colour of fitted paths projected back into the image (BGR).
FIT_COLOUR = (255, 0, 255)

#: Enlargement of the contact-sheet crops and crops per row.
CROP_ZOOM = 4
CROPS_PER_ROW = 12

#: Drawing coordinates carry this many fractional bits (OpenCV's ``shift``), for sub-pixel marks.
_SHIFT = 4


def check_overlay_path(path: str | os.PathLike[str]) -> None:
    """Raise a one-line ValueError when the overlay's suffix is neither an image nor a video format."""
    suffix = Path(path).suffix.lower()
    if suffix not in IMAGE_SUFFIXES + VIDEO_SUFFIXES:
        raise ValueError(
            f"--overlay {path}: unknown format {suffix or '(none)'!r}; use one of "
            f"{', '.join(IMAGE_SUFFIXES + VIDEO_SUFFIXES)}"
        )


def _pt(u: float, v: float) -> tuple[int, int]:
    return int(round(u * (1 << _SHIFT))), int(round(v * (1 << _SHIFT)))


def _marks(
    img: np.ndarray,
    result: TrackResult,
    upto_frame: int | None = None,
    only_frame: int | None = None,
    fitted_uv: Sequence[np.ndarray] = (),
):
    """Draw rejected candidates, fitted paths, shot paths (up to a frame) and the current points (BGR)."""
    scale = max(1, img.shape[1] // 640)
    for uv in fitted_uv:
        uv = np.asarray(uv, dtype=float)
        uv = uv[np.all(np.isfinite(uv), axis=1)]
        if len(uv) > 1:
            pts = np.array([_pt(u, v) for u, v in uv], np.int32)
            # wider than the tracked path drawn over it, so it shows as a band around the points
            cv2.polylines(img, [pts.reshape(-1, 1, 2)], False, FIT_COLOUR, 3 * scale, cv2.LINE_AA, _SHIFT)
    for (d, _sign), shot in zip(result.detections, result.in_shot, strict=True):
        if not d.ok or shot >= 0 or (only_frame is not None and d.frame != only_frame):
            continue
        if not (math.isfinite(d.u_px) and math.isfinite(d.v_px)):
            continue
        cv2.drawMarker(
            img,
            (int(round(d.u_px)), int(round(d.v_px))),
            REJECT_COLOUR,
            cv2.MARKER_TILTED_CROSS,
            4 * scale + 4,
            1,
        )
    tr = result.track
    if tr is None:
        return
    for s in tr.shot_ids:
        m = tr.shot == s
        if upto_frame is not None:
            m &= tr.frame <= upto_frame
        if not np.any(m):
            continue
        col = SHOT_COLOURS[s % len(SHOT_COLOURS)]
        pts = np.array([_pt(u, v) for u, v in zip(tr.u_px[m], tr.v_px[m], strict=True)], np.int32)
        if len(pts) > 1:
            cv2.polylines(img, [pts.reshape(-1, 1, 2)], False, col, 1, cv2.LINE_AA, _SHIFT)
        for (pu, pv), f in zip(pts, tr.frame[m], strict=True):
            if only_frame is None or f == only_frame:
                cv2.circle(img, (int(pu), int(pv)), (3 * scale + 3) << _SHIFT, col, 1, cv2.LINE_AA, _SHIFT)
        if upto_frame is None:
            u0, v0 = float(tr.u_px[m][0]), float(tr.v_px[m][0])
            cv2.putText(
                img,
                f"shot {s}",
                (int(u0) + 6, int(v0) - 8),
                cv2.FONT_HERSHEY_SIMPLEX,
                0.4 * scale,
                col,
                1,
                cv2.LINE_AA,
            )


#: Most crops on a contact sheet, and their half size, px.
MAX_CROPS = 240
CROP_HALF_PX = 16


def _crop(luma: np.ndarray, u: float, v: float) -> tuple[int, int, np.ndarray]:
    """A (2·CROP_HALF_PX)² window of ``luma`` around (u, v), zero-padded at the border: (col0, row0, image)."""
    h, w = luma.shape
    cu, cv = int(round(u)), int(round(v))
    out = np.zeros((2 * CROP_HALF_PX, 2 * CROP_HALF_PX), np.uint8)
    r0, c0 = cv - CROP_HALF_PX, cu - CROP_HALF_PX
    rr0, cc0 = max(r0, 0), max(c0, 0)
    rr1, cc1 = min(r0 + 2 * CROP_HALF_PX, h), min(c0 + 2 * CROP_HALF_PX, w)
    if rr1 > rr0 and cc1 > cc0:
        out[rr0 - r0 : rr1 - r0, cc0 - c0 : cc1 - c0] = luma[rr0:rr1, cc0:cc1]
    return c0, r0, out


def shot_crops(result: TrackResult, video: str) -> list[tuple[int, int, int, np.ndarray]]:
    """(frame, col0, row0, image) crops around a sample of the shot points (one decoding pass)."""
    tr = result.track
    if tr is None or tr.n_points == 0:
        return []
    step = max(1, math.ceil(tr.n_points / MAX_CROPS))
    picks = list(range(0, tr.n_points, step))[:MAX_CROPS]
    want: dict[int, list[int]] = {}
    for j in picks:
        want.setdefault(int(tr.frame[j]), []).append(j)
    last = max(want)
    out = []
    for fr in iter_frames(video):
        for j in want.get(fr.index, []):
            c0, r0, img = _crop(fr.luma, float(tr.u_px[j]), float(tr.v_px[j]))
            out.append((fr.index, c0, r0, img))
        if fr.index >= last:
            break
    return out


def contact_sheet(
    result: TrackResult, video: str | None = None, fitted_uv: Sequence[np.ndarray] = ()
) -> np.ndarray:
    """The contact sheet as a BGR uint8 image (crops read from ``video`` when given).

    ``fitted_uv`` are fitted paths projected into the image, (M, 2) pixel arrays, drawn as lines.
    """
    still = (
        result.still
        if result.still is not None
        else np.zeros((result.info.height, result.info.width), np.uint8)
    )
    top = cv2.cvtColor(np.ascontiguousarray(still), cv2.COLOR_GRAY2BGR)
    _marks(top, result, fitted_uv=fitted_uv)
    s = result.summary
    text = (
        f"{Path(result.info.path).name}: {s.points} points in {len(s.shot_speeds_mps)} shot(s), "
        f"{s.rejected_candidates} rejected candidates, polarity {s.polarity}"
        + (", fitted path drawn" if len(fitted_uv) else "")
    )
    cv2.putText(top, text, (8, 18), cv2.FONT_HERSHEY_SIMPLEX, 0.5, (0, 255, 255), 1, cv2.LINE_AA)
    crops = shot_crops(result, video) if video is not None else []
    if not crops:
        return top
    tile = crops[0][3].shape[0] * CROP_ZOOM
    per_row = max(1, min(CROPS_PER_ROW, len(crops)))
    n_rows = math.ceil(len(crops) / per_row)
    width = max(top.shape[1], per_row * (tile + 4))
    if width > top.shape[1]:
        top = np.hstack([top, np.zeros((top.shape[0], width - top.shape[1], 3), np.uint8)])
    sheet = np.zeros((n_rows * (tile + 4), width, 3), np.uint8)
    tr = result.track
    for k, (frame, c0, r0, img) in enumerate(crops):
        big = cv2.resize(img, (tile, tile), interpolation=cv2.INTER_NEAREST)
        big = cv2.cvtColor(big, cv2.COLOR_GRAY2BGR)
        if tr is not None:
            hit = np.flatnonzero(tr.frame == frame)
            if hit.size:
                j = int(
                    hit[
                        np.argmin(
                            np.hypot(
                                tr.u_px[hit] - (c0 + img.shape[1] / 2), tr.v_px[hit] - (r0 + img.shape[0] / 2)
                            )
                        )
                    ]
                )
                cu = (tr.u_px[j] - c0 + 0.5) * CROP_ZOOM - 0.5
                cv = (tr.v_px[j] - r0 + 0.5) * CROP_ZOOM - 0.5
                col = SHOT_COLOURS[int(tr.shot[j]) % len(SHOT_COLOURS)]
                cv2.drawMarker(big, (int(round(cu)), int(round(cv))), col, cv2.MARKER_CROSS, tile // 3, 1)
        cv2.putText(big, str(frame), (2, 12), cv2.FONT_HERSHEY_SIMPLEX, 0.35, (0, 255, 255), 1, cv2.LINE_AA)
        rr, cc = divmod(k, per_row)
        y0, x0 = rr * (tile + 4), cc * (tile + 4)
        sheet[y0 : y0 + tile, x0 : x0 + tile] = big
    return np.vstack([top, sheet])


def write_overlay(
    path: str | os.PathLike[str], result: TrackResult, video: str, *, fitted_uv: Sequence[np.ndarray] = ()
) -> None:
    """Write the overlay for ``result``: a contact sheet (.png/.jpg) or an annotated copy of ``video``.

    Parameters
    ----------
    path : output file; its suffix chooses the kind (the app passes a temporary name with the same suffix).
    result : the tracking result.
    video : the clip that was tracked (read again for an annotated video).
    fitted_uv : fitted paths projected back into the image, (M, 2) pixel arrays (OpenCV order), drawn as
        lines; empty before the fit.

    Raises
    ------
    ValueError
        Unknown suffix.
    OSError
        The file could not be written.
    """
    check_overlay_path(path)
    p = Path(path)
    if p.suffix.lower() in IMAGE_SUFFIXES:
        if not cv2.imwrite(str(p), contact_sheet(result, video, fitted_uv)):
            raise OSError(f"{p}: could not write the overlay image")
        return
    _annotated_video(p, result, video, fitted_uv)


def _annotated_video(
    path: Path, result: TrackResult, video: str, fitted_uv: Sequence[np.ndarray] = ()
) -> None:
    rate = result.summary.frame_rate_hz
    try:
        out = av.open(str(path), mode="w")
    except av.error.FFmpegError as exc:
        raise OSError(f"{path}: could not write the overlay video ({exc})") from None
    try:
        stream = out.add_stream(
            "libx264" if path.suffix.lower() != ".avi" else "mpeg4", rate=max(1, round(rate))
        )
        stream.width = result.info.width - result.info.width % 2
        stream.height = result.info.height - result.info.height % 2
        stream.pix_fmt = "yuv420p"
        for fr in iter_frames(video):
            img = cv2.cvtColor(np.ascontiguousarray(fr.luma), cv2.COLOR_GRAY2BGR)
            _marks(img, result, upto_frame=fr.index, only_frame=fr.index, fitted_uv=fitted_uv)
            img = np.ascontiguousarray(img[: stream.height, : stream.width], dtype=np.uint8)
            vf = av.VideoFrame.from_ndarray(img, format="bgr24")  # type: ignore[arg-type]
            for pkt in stream.encode(vf):
                out.mux(pkt)
        for pkt in stream.encode():
            out.mux(pkt)
    finally:
        out.close()
