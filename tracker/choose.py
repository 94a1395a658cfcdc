"""Which tracks are the BB's shots (:func:`_select_tracks`).

Each polarity's detections are linked (:func:`tracker.associate.link`) and every smooth track is judged as a
BB (:mod:`tracker.select`); the BB's tracks of the polarity with most points are the shots, the rest are
turned down with their reasons.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from hopscope.calibration.rig import Rig
from hopscope.shared.constants import STANDARD_GRAVITY_MPS2

from .associate import SIGMA_FLOOR_PX, LinkOptions, link
from .localise import Detection
from .options import TrackOptions
from .select import TrackJudgement, describe_rejections, judge_track, lift_accel_max_mps2, likely_time_scale
from .video import VideoInfo


@dataclass(frozen=True)
class _Selection:
    """Tracks chosen as the BB's shots (indices into the detections) and what was turned down."""

    tracks: tuple[np.ndarray, ...]
    polarity: str
    rejected: tuple[str, ...]
    n_rejected_tracks: int
    outliers: int
    warnings: tuple[str, ...]


def _select_tracks(
    dets: list[tuple[Detection, int, float, bool]],
    want: int,
    opt: TrackOptions,
    info: VideoInfo,
    rig: Rig,
    timestamp_rate_hz: float,
) -> _Selection:
    """Link each polarity's detections, judge every smooth track as a BB (:mod:`tracker.select`), keep the BB's.

    Every track the linker accepts, of either polarity, is compared with a BB: image size at the flight
    plane, speed band, fall under gravity within a plausible lift, drag. Of the tracks that pass, those of
    the polarity with more points are the shots. When none passes but some fail only in the way playback
    timing makes them fail (too slow, falling too little for their speed), those are kept with a warning
    naming the likely capture rate.
    """
    diag = math.hypot(info.width, info.height)
    lopt = opt.link
    if lopt.max_first_step_px is None:  # not set: half the frame diagonal
        lopt = LinkOptions(**{**lopt.__dict__, "max_first_step_px": 0.5 * diag})
    search = opt.search
    judged: list[tuple[int, np.ndarray, TrackJudgement]] = []
    rejected: list[str] = []
    outliers = 0
    for sign in (1, -1, 0):
        if want and sign != want:
            continue
        sel = np.array([i for i, d in enumerate(dets) if d[1] == sign], dtype=np.int64)
        if not sel.size:
            continue
        d = [dets[i][0] for i in sel]
        uv = np.array([[x.u_px, x.v_px] for x in d])
        xy = rig.pixel_to_world(uv)
        t = np.array([dets[i][2] for i in sel])
        sig = np.array([x.sigma_px for x in d])
        res = link(np.array([x.frame for x in d]), t, uv[:, 0], uv[:, 1], sig, lopt, world_xy=xy)
        rejected.extend(r for _, r in res.rejected)
        outliers += int(res.outliers.size)
        for tr in res.tracks:
            tr = np.asarray(tr, dtype=np.int64)
            ok = np.all(np.isfinite(xy[tr]), axis=1)
            if ok.sum() < 3:
                rejected.append("maps to no point of the flight plane")
                continue
            mpp = float(np.median(rig.metres_per_pixel(uv[tr][ok])))
            j = judge_track(
                t[tr][ok],
                xy[tr][ok, 0],
                xy[tr][ok, 1],
                np.maximum(sig[tr][ok], SIGMA_FLOOR_PX) * mpp,
                np.array([d[i].width_px for i in tr[ok]]),
                mpp,
                search,
            )
            judged.append((sign, sel[tr], j))
    names = {1: "bright", -1: "dark", 0: "marked"}
    bb = [x for x in judged if x[2].is_bb]
    warns: list[str] = []
    pool = bb
    if not bb:
        pool = [x for x in judged if x[2].timing_suspect]
    if not pool:
        rejected.extend(x[2].reason for x in judged)
        pol = names[want] if want else "bright"
        return _Selection((), pol, describe_rejections(rejected), len(rejected), outliers, ())
    points = {s: sum(x[1].size for x in pool if x[0] == s) for s in (1, -1, 0)}
    sign = max((1, -1, 0), key=lambda s: points[s])
    keep = [x for x in pool if x[0] == sign]
    kept = {id(x) for x in keep}
    for x in judged:
        if id(x) in kept:
            continue
        rejected.append(
            x[2].reason or f"a BB-like track of {names[x[0]]} polarity beside more {names[sign]} points"
        )
    if not bb:
        for x in keep:
            j = x[2]
            k = likely_time_scale(
                j.start_speed_mps, j.accel_y_mps2, search, timestamp_rate_hz=timestamp_rate_hz
            )
            rate = f"about {k * timestamp_rate_hz:.6g} fps" if k else "unknown"
            warns.append(
                f"a track moves like a BB's image but at {j.speed_mps:.3g} m/s and falls at "
                f"{-j.accel_y_mps2:.3g} m/s² where a BB falls at g = {STANDARD_GRAVITY_MPS2:.4g} m/s² less at most "
                f"{lift_accel_max_mps2(j.speed_mps, search.diameter_m):.3g} m/s² of lift: the times look "
                f"scaled (playback timing of a slow-motion clip); likely capture rate {rate}: rerun with --fps"
            )
    keep.sort(key=lambda x: float(dets[int(x[1][0])][2]))
    return _Selection(
        tuple(x[1] for x in keep),
        names[sign],
        describe_rejections(rejected),
        len(rejected),
        outliers,
        tuple(dict.fromkeys(warns)),
    )
