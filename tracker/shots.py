"""The chosen shots as a :class:`~tracker.trackfile.Track` (:func:`_build_track`).

Each shot's σ is checked against its own scatter about a smooth path and scaled up where it was too small;
point times add the rolling-shutter offset of the row and half the exposure; metres, σ in metres and the
calibration-ensemble offsets come through the rig; each point's brightness is its light per px² of the
BB's apparent image and per second of exposure (:func:`brightness_per_area`); each shot's speed at its
first point is :func:`start_speed`.
"""

from __future__ import annotations

import math

import numpy as np

from hopscope.calibration.rig import Rig

from .associate import scatter_ratio
from .localise import Detection
from .options import TrackOptions
from .trackfile import Track, TrackMeta
from .video import VideoInfo, point_times_s

#: Degree of the polynomial in time through a marked BB's fitted radii along its shot (its apparent size
#: changes smoothly as it flies nearer or farther).
RADIUS_SMOOTH_DEGREE = 2

#: Points used for the speed estimate at the start of a shot.
SPEED_POINTS = 10

#: A shot whose σ had to be scaled up by more than this gets a warning.
SIGMA_SCALE_WARN = 2.0


def start_speed(t_s: np.ndarray, x_m: np.ndarray, y_m: np.ndarray) -> float:
    """Speed at a shot's first point, m/s: derivative of a quadratic in time through its first points.

    A local polynomial derivative (the finite-difference estimate of Savitzky & Golay 1964, Anal. Chem.
    36:1627) through up to :data:`SPEED_POINTS` points, evaluated at the first one (a line for 2 points).
    """
    n = min(SPEED_POINTS, t_s.size)
    tt = t_s[:n] - t_s[0]
    deg = 2 if n >= 4 else 1
    cx = np.polyfit(tt, x_m[:n], deg)
    cy = np.polyfit(tt, y_m[:n], deg)
    return float(math.hypot(cx[-2], cy[-2]))


def brightness_per_area(light: np.ndarray, radius_px: np.ndarray, exposure_s: float | None) -> np.ndarray:
    """The track's ``brightness``: integrated light per px² of the BB's image, per second of exposure.

    Parameters
    ----------
    light : (N,) the detections' integrated light, grey levels × px (:attr:`Detection.brightness`).
    radius_px : (N,) the BB's apparent image radius r at each point, px.
    exposure_s : exposure time, s, or None when unknown (then no division by it).

    Returns
    -------
    (N,) light / (π r²) (a ball that comes nearer looks bigger, not brighter), divided by the exposure when
    it is known: grey levels per second of exposure, else grey levels.
    """
    r = np.asarray(radius_px, dtype=float)
    out = np.asarray(light, dtype=float) / (math.pi * r * r)
    return out / exposure_s if exposure_s else out


def _brightness_column(
    d: list[Detection], t_s: np.ndarray, shot: np.ndarray, rig: Rig, uv: np.ndarray, opt: TrackOptions
) -> np.ndarray:
    """Each point's brightness for the track (:func:`brightness_per_area`).

    The apparent radius is the rig's (the BB's diameter over the metres per pixel at the point) for a plain
    BB. For a marked BB it is the fitted ball radius smoothed along its shot (a polynomial of degree
    :data:`RADIUS_SMOOTH_DEGREE` in time), which is the size the image shows: the light is first moved to
    that radius (:attr:`Detection.light_per_radius`, the background a wider ball hides).
    """
    light = np.array([x.brightness for x in d])
    radius = 0.5 * opt.bb_diameter_m / rig.metres_per_pixel(uv)
    marked = np.array([math.isfinite(x.light_radius_px) for x in d], dtype=bool)
    for s_id in np.unique(shot[marked]):
        m = marked & (shot == s_id)
        fitted = np.array([2.0 * d[i].width_px for i in np.flatnonzero(m)])
        deg = min(RADIUS_SMOOTH_DEGREE, int(m.sum()) - 1)
        tt = t_s[m] - t_s[m].mean()
        smooth = (
            np.polyval(np.polyfit(tt, fitted, deg), tt) if deg >= 1 else np.full(fitted.shape, fitted.mean())
        )
        at = np.array([d[i].light_radius_px for i in np.flatnonzero(m)])
        slope = np.array([d[i].light_per_radius for i in np.flatnonzero(m)])
        light[m] = light[m] + (smooth - at) * slope
        radius[m] = smooth
    return brightness_per_area(light, radius, opt.exposure_s)


def _build_track(
    pts: list[tuple[Detection, int, float, bool]],
    shot: np.ndarray,
    rig: Rig,
    opt: TrackOptions,
    info: VideoInfo,
    video: str,
    source: str,
    rate: float,
    polarity: str,
    warns: list[str],
) -> tuple[Track, tuple[float, ...], list[str]]:
    d = [p[0] for p in pts]
    frame = np.array([x.frame for x in d], dtype=np.int64)
    t_frame = np.array([p[2] for p in pts])
    uv = np.array([[x.u_px, x.v_px] for x in d])
    sig = np.array([x.sigma_px for x in d])
    warns = list(warns)
    # σ checked against the shot's own scatter about a smooth path; scaled up where it was too small
    scales: dict[int, float] = {}
    for s_id in np.unique(shot):
        m = shot == s_id
        o = np.argsort(frame[m])
        ratio = scatter_ratio(t_frame[m][o], uv[m][o, 0], uv[m][o, 1], sig[m][o])
        scales[int(s_id)] = max(1.0, ratio)
        if ratio > 1.0:
            sig[m] *= ratio
    rows = info.height
    t = point_times_s(t_frame, uv[:, 1], rows, opt.readout_s, opt.exposure_s)
    xy = rig.pixel_to_world(uv)
    good = np.all(np.isfinite(xy), axis=1)
    if not np.all(good):
        warns.append(f"{int((~good).sum())} point(s) map to no point of the flight plane and were dropped")
    jac = rig.pixel_to_world_jacobian(uv[good]) if np.any(good) else np.zeros((0, 2, 2))
    sig_m = np.zeros(len(d))
    sig_m[good] = sig[good] * np.sqrt(0.5 * np.einsum("nij,nij->n", jac, jac))
    ens = rig.ensemble_pixel_to_world(uv[good]) if np.any(good) else np.zeros((0, 0, 2))
    k = ens.shape[0]
    cal = np.zeros((k, len(d), 2))
    if k:
        cal[:, good] = ens - xy[good][None]
        if not np.all(np.isfinite(cal[:, good])):
            bad = ~np.all(np.isfinite(cal), axis=(0, 2))
            warns.append(
                f"{int((bad & good).sum())} point(s) fall outside an ensemble rig's plane and were dropped"
            )
            good &= ~bad
    flags = []
    cov = rig.coverage_m
    has_cov = cov[1] > cov[0] and cov[3] > cov[2]
    inside = rig.in_coverage(np.where(np.isfinite(xy), xy, 0.0)) if has_cov else np.ones(len(d), bool)
    for i, x in enumerate(d):
        f = list(x.flags)
        if pts[i][3]:
            f.append("edge")
        if not inside[i]:
            f.append("outside_coverage")
        flags.append(";".join(f))
    if has_cov and not np.all(inside[good]):
        warns.append(
            f"{int((~inside[good]).sum())} point(s) lie outside the rig's calibrated area "
            "(flag outside_coverage): their metres are extrapolated"
        )
    g = good
    order = np.lexsort((t[g], shot[g]))
    # renumber shots 0.. in order of appearance
    shots_kept = shot[g][order]
    _, first = np.unique(shots_kept, return_index=True)
    remap = {int(s): r for r, s in enumerate(shots_kept[np.sort(first)])}
    shot_new = np.array([remap[int(s)] for s in shots_kept], dtype=np.int64)
    speeds: list[float] = []
    xs, ys, ts = xy[g][order, 0], xy[g][order, 1], t[g][order]
    inv = {r: s_old for s_old, r in remap.items()}
    for s in range(len(remap)):
        m = shot_new == s
        k = scales.get(inv[s], 1.0)
        if k > SIGMA_SCALE_WARN:
            warns.append(
                f"shot {s}: the points scatter {k:.1f}x more about a smooth path than their noise-based "
                "sigma says (compression or an unusual BB image); sigma_px and sigma_m were scaled up by that"
            )
        if m.sum() >= 2:
            sp = start_speed(ts[m], xs[m], ys[m])
            speeds.append(sp)
            lo, hi = opt.speed_band_mps
            if not lo <= sp <= hi:
                hint = (
                    "the timestamps may be playback time (slow motion: give the capture rate with --fps)"
                    if sp < lo
                    else "check the frame rate (--fps) and the rig's scale"
                )
                warns.append(
                    f"shot {s}: implied speed {sp:.3g} m/s is outside the plausible {lo:g}..{hi:g} m/s: {hint}"
                )
    meta = TrackMeta(
        video=video,
        timing_source=source,
        frame_rate_hz=rate,
        readout_s=opt.readout_s,
        exposure_s=opt.exposure_s,
        rig_digest=rig.digest,
        image_size=(info.width, info.height),
        warnings=tuple(dict.fromkeys(warns)),
        polarity=polarity,
    )
    sel = np.flatnonzero(g)[order]
    track = Track(
        frame=frame[sel],
        t_s=t[sel],
        u_px=uv[sel, 0],
        v_px=uv[sel, 1],
        x_m=xy[sel, 0],
        y_m=xy[sel, 1],
        sigma_px=sig[sel],
        sigma_m=sig_m[sel],
        shot=shot_new,
        brightness=_brightness_column([d[i] for i in sel], t[sel], shot_new, rig, uv[sel], opt),
        streak_len_px=np.array([d[i].streak_len_px for i in sel]),
        flags=tuple(flags[i] for i in sel),
        cal_dx_m=cal[:, sel, 0],
        cal_dy_m=cal[:, sel, 1],
        meta=meta,
    )
    return track, tuple(speeds), warns
