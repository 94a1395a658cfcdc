"""Level and scale check from a drop: a ball let fall in the flight plane, filmed by the rigged camera.

A free fall measures g in the rig's metres and the clip's seconds, so a wrong frame rate (g scales as the
square of the time scale) or a wrong scale (g scales with it) shows at once; the direction of the fall
gives the direction of gravity in the board's frame, which levels the world frame when the board was not
level. Self-contained: simple detection by differencing against a median background (no tracker).

Conventions
-----------
World frame: x downrange, y up, z toward the camera, metres; pixels (u, v) in OpenCV order; images indexed
(row, col); times in seconds since the clip's first frame (container timestamps unless overridden).

The fitted motion along the fall direction ĝ = (sin θ, −cos θ) (θ: tilt of gravity from the board's −y
toward +x) is s(t) = w0 t + ½ g t² − k (w0² t²/2 + w0 g t³/3 + g² t⁴/12): free fall with an optional
quadratic-drag term to first order in k (the drag deceleration per squared speed, 1/m); the fit and the
release search live in :mod:`calibration.freefall`, the ball's detection in :mod:`calibration.dropclip`
(their public names are importable from here too).

References
----------
Galilei, G. (1638). Discorsi e dimostrazioni matematiche intorno a due nuove scienze (free fall, s ∝ t²).
Bevington, P. R. & Robinson, D. K. (2003). Data Reduction and Error Analysis for the Physical Sciences,
3rd ed., McGraw-Hill, sec. 8.1 (parameter errors from the curvature matrix) and 11.4 (F test for an
added term).
"""

from __future__ import annotations

import dataclasses
import math
import os

import numpy as np

from hopscope.shared.constants import STANDARD_GRAVITY_MPS2

from .dropcheck import DropCheck, Measured
from .dropclip import DropClip, _moving, find_ball
from .freefall import (
    MIN_DROP_POINTS,
    FreeFallFit,
    find_release,
    fit_free_fall,
    lag1_autocorrelation,
)
from .rig import Rig

__all__ = [
    "MIN_DROP_POINTS",
    "DropCheck",
    "DropClip",
    "FreeFallFit",
    "Measured",
    "apply_level",
    "check_drop",
    "drop_refusal",
    "find_ball",
    "find_release",
    "fit_free_fall",
    "lag1_autocorrelation",
]

#: Allowance for local gravity around the standard value, m/s²: normal gravity runs from 9.7803 (equator)
#: to 9.8322 (poles) (WGS84 Somigliana formula, NIMA TR8350.2 (2000) eq. 4-1). # from memory (constants)
LOCAL_GRAVITY_ALLOWANCE_MPS2 = 0.026

#: A measured g further than DROP_SIGMA_LIMIT standard errors (plus the allowance) from the expected value
#: is inconsistent. # common practice, no published source
DROP_SIGMA_LIMIT = 3.0

#: A drop whose g is known worse than this (relative standard error) gets a warning: it cannot catch a
#: frame-rate or scale error of a few per cent.
WEAK_DROP_RELATIVE_STDERR = 0.01

#: Systematic centroid error of the ball along its fall, px: a drift this size across the fall tilts the
#: fitted direction by (it / fall length in px) rad, so it is added to the tilt's standard error. On the
#: lane-long render the found centroids drift ≈ 0.05 px along a 77 px fall (a 0.22° tilt at 4 fit σ)
#: [measured]; 0.1 px keeps such a drift from levelling a level board.
CENTROID_SYSTEMATIC_PX = 0.1

#: The tilt is applied (the world frame levelled) when it is this many standard errors from zero.
TILT_SIGNIFICANCE = 3.0

#: A fall is a clean parabola when the lag-1 autocorrelation of its fit residuals stays below this
#: (noise: ≈ 0 ± 1/√N; a contact phase or a wrong model leaves a trend near 1). # common practice, no
#: published source (threshold; the statistic: Durbin & Watson 1950, Biometrika 37:409)
CLEAN_AUTOCORRELATION = 0.5

#: Camera frame rates, Hz: a wrong g that a true rate among these explains (within COMMON_RATE_TOLERANCE)
#: is blamed on the frame rate. # common practice, no published source
COMMON_FRAME_RATES_HZ = (24, 25, 30, 48, 50, 60, 90, 100, 120, 180, 200, 240, 250, 300, 400, 480, 500, 600,
                         960, 1000, 1200, 1920, 2000, 2500, 3000, 4000, 5000, 10000)  # fmt: skip
COMMON_RATE_TOLERANCE = 0.01


def _likely_cause(ratio: float, fps: float, clean: bool) -> str:
    """Which error best explains g measured ``ratio`` × expected: not free fall when the fall is not a
    clean parabola; the frame rate when a common camera rate explains it; else the scale."""
    if not clean:
        return "not free fall"
    if math.isfinite(fps) and fps > 0:
        true_fps = fps / math.sqrt(ratio)
        if any(abs(true_fps / r - 1) < COMMON_RATE_TOLERANCE for r in COMMON_FRAME_RATES_HZ):
            return "frame rate"
    return "scale"


def _calibration_stderr(rig: Rig, t_s: np.ndarray, uv_px: np.ndarray, g_nominal: float, drag: str) -> float:
    """RMS spread of g about ``g_nominal`` over the rig's ensemble members (the fall mapped through each),
    m/s²; 0 without an ensemble."""
    if not rig.ensemble or len(uv_px) == 0:
        return 0.0
    g = []
    for xy in rig.ensemble_pixel_to_world(uv_px):
        member = fit_free_fall(t_s, xy, drag=drag)
        if member.ok and math.isfinite(member.g_mps2):
            g.append(member.g_mps2)
    return math.sqrt(float(np.mean(np.square(np.array(g) - g_nominal)))) if g else 0.0


def check_drop(
    rig: Rig,
    path: str | os.PathLike[str],
    *,
    fps: float | None = None,
    g_expected_mps2: float = STANDARD_GRAVITY_MPS2,
    drag: str = "auto",
    readout_s: float = 0.0,
) -> tuple[DropCheck, tuple[str, ...]]:
    """Measure g from a drop clip through ``rig`` and judge it.

    Only the free fall is fitted: the frames where the ball sits still are left out, then
    :func:`find_release` finds where it leaves its holder. The fit's residuals decide whether the fall
    is a clean parabola (:func:`lag1_autocorrelation` below :data:`CLEAN_AUTOCORRELATION`); only then can a
    wrong g be blamed on the frame rate or the scale.

    Returns
    -------
    (drop_check, warnings): the :class:`~calibration.dropcheck.DropCheck` (verdict "consistent",
    "inconsistent" or "failed", ``likely_cause``, ``levelled`` false until :func:`apply_level`);
    ``warnings`` name the likely cause when g is off or why the check failed.

    Notes
    -----
    World frame: x downrange, y up (as the rig has it before levelling), metres; seconds from the clip.
    """
    if not (math.isfinite(g_expected_mps2) and g_expected_mps2 > 0):
        raise ValueError(f"--g-expected: expected a positive acceleration, got {g_expected_mps2!r}")
    clip = find_ball(path, fps=fps, readout_s=readout_s)
    if clip.frame_size != tuple(rig.image_size):
        raise ValueError(
            f"{clip.source}: drop clip frames are {clip.frame_size[0]}x{clip.frame_size[1]}, the rig's images "
            f"{rig.image_size[0]}x{rig.image_size[1]} (the drop must be filmed with the calibrated setting)"
        )
    mask = _moving(clip)
    xy = rig.pixel_to_world(clip.uv_px[mask]) if mask.any() else np.zeros((0, 2))
    t_fall, uv_fall, frames_fall = clip.t_s[mask], clip.uv_px[mask], clip.frames[mask]
    release = find_release(t_fall, xy) if len(xy) else 0
    t_fall, xy, uv_fall, frames_fall = (
        t_fall[release:],
        xy[release:],
        uv_fall[release:],
        frames_fall[release:],
    )
    fit = fit_free_fall(t_fall, xy, drag=drag)
    base = DropCheck(
        clip=clip.source,
        timing=clip.timing,
        fps=clip.fps if math.isfinite(clip.fps) else None,
        frames=clip.n_frames,
        g_expected_mps2=g_expected_mps2,
        verdict="failed",
        release_frame=int(frames_fall[0]) if len(frames_fall) else None,
    )
    if not fit.ok:
        failed = dataclasses.replace(base, reason=fit.reason, likely_cause="not free fall")
        return failed, (f"drop check failed on {clip.source}: {fit.reason}",)
    fall_px = float(np.linalg.norm(uv_fall[-1] - uv_fall[0]))
    tilt_sys = CENTROID_SYSTEMATIC_PX / max(fall_px, 1.0)
    tilt_err = math.hypot(fit.tilt_stderr_rad, tilt_sys)
    dev = fit.g_mps2 - g_expected_mps2
    # the rig's own scale doubt at the drop: g through each ensemble member (the check asks whether the
    # rig is consistent with gravity, so a scale error the rig already owns to is no failure)
    g_cal = _calibration_stderr(rig, t_fall, uv_fall, fit.g_mps2, "off" if fit.drag_per_m is None else "on")
    g_err = math.hypot(fit.g_stderr_mps2, g_cal)
    allowed = DROP_SIGMA_LIMIT * g_err + LOCAL_GRAVITY_ALLOWANCE_MPS2
    verdict = "consistent" if abs(dev) <= allowed else "inconsistent"
    ratio = fit.g_mps2 / g_expected_mps2
    clean = abs(fit.residual_autocorrelation) < CLEAN_AUTOCORRELATION
    cause = "" if verdict == "consistent" else _likely_cause(ratio, clip.fps, clean)
    rate_hint = ""
    if math.isfinite(clip.fps):
        rate_hint = f" (a true frame rate of {clip.fps / math.sqrt(ratio):.4g} fps instead of {clip.fps:.4g})"
    reasons = {
        "": "",
        "frame rate": f"the frame rate is probably wrong{rate_hint}: g scales with its square; or the scale "
        "(--square-mm, plane offsets, parallax) is off, which scales g by its own error",
        "scale": "the scale is probably wrong (--square-mm, plane offsets typed in the wrong unit, parallax), "
        f"which scales g by its own error; or the frame rate{rate_hint}, which scales g by its square",
        "not free fall": "the ball's path is not a clean parabola (it touched the holder or a hand, or "
        "something else moved): film a ball falling freely; neither the frame rate nor the scale is blamed",
    }
    check = dataclasses.replace(
        base,
        verdict=verdict,
        reason=reasons[cause],
        g_measured_mps2=Measured(fit.g_mps2, g_err),
        g_ratio=ratio,
        tilt_deg=Measured(math.degrees(fit.tilt_rad), math.degrees(tilt_err)),
        tilt_fit_stderr_deg=math.degrees(fit.tilt_stderr_rad),
        tilt_centroid_stderr_deg=math.degrees(tilt_sys),
        fall_px=fall_px,
        drag_per_m=None if fit.drag_per_m is None else Measured(fit.drag_per_m, fit.drag_stderr_per_m or 0.0),
        points=fit.n_points,
        duration_s=fit.duration_s,
        residual_rms_m=fit.residual_rms_m,
        clean_parabola=bool(clean),
        likely_cause=cause,
    )
    warns = []
    if fit.g_stderr_mps2 > WEAK_DROP_RELATIVE_STDERR * g_expected_mps2:
        warns.append(
            f"drop check on {clip.source} is weak: g is known only to ±{100 * fit.g_stderr_mps2 / g_expected_mps2:.1f} % "
            f"from {fit.n_points} points over {1e3 * fit.duration_s:.0f} ms; film a longer fall (≥ 0.2 s in view)"
        )
    if verdict == "inconsistent":
        warns.append(
            f"drop check: measured g = {fit.g_mps2:.4g} ± {g_err:.2g} m/s² (fall {fit.g_stderr_mps2:.2g}, "
            f"calibration {g_cal:.2g}), expected "
            f"{g_expected_mps2:.4g} ({100 * (ratio - 1):+.2f} %): {reasons[cause]}"
        )
    return check, tuple(warns)


def drop_refusal(check: DropCheck) -> str:
    """The one line ``calibrate`` stops with when the rig fails its own drop check."""
    if check.g_measured_mps2 is None:
        return (
            f"{check.clip}: drop check failed ({check.reason}); rerun with --keep-failed-drop to keep the rig"
        )
    g = check.g_measured_mps2
    return (
        f"{check.clip}: drop check failed: g = {g.value:.4g} ± {g.stderr:.2g} m/s², expected "
        f"{check.g_expected_mps2:.4g}; likely cause: {check.likely_cause} ({check.reason}); "
        "rerun with --keep-failed-drop to keep the rig anyway"
    )


def apply_level(
    rig: Rig,
    drop_check: DropCheck,
    warnings: tuple[str, ...] = (),
    *,
    rng: int | np.random.Generator | None = 0,
) -> Rig:
    """Attach ``drop_check`` to the rig and, when its tilt is significant, level the world frame.

    The world frame is turned about z by −tilt, so gravity points along −y: the origin and the plane stay;
    every mapped x, y is then in the levelled frame. Each ensemble member is turned by its own draw
    −(tilt + δ), δ ~ N(0, σ_tilt²), so the tilt's uncertainty reaches the error bars. Levelled or not is
    recorded in ``drop_check``. A check that is not consistent never levels the rig (its fall is not
    trusted).
    """
    check = dataclasses.replace(drop_check, levelled=False)
    tilt = check.tilt_deg
    out = rig
    if tilt is not None and check.verdict == "consistent":
        value, err = tilt.value, tilt.stderr
        if math.isfinite(err) and abs(value) > TILT_SIGNIFICANCE * err:
            gen = rng if isinstance(rng, np.random.Generator) else np.random.default_rng(rng)
            angle = -math.radians(value)
            out = rig.rotated_about_z(angle)
            draws = gen.normal(0.0, math.radians(err), len(rig.ensemble))
            members = tuple(
                dataclasses.replace(m, rotation=m.rotation @ _rz(angle - float(dd)).T)
                for m, dd in zip(rig.ensemble, draws, strict=True)
            )
            out = dataclasses.replace(out, ensemble=members)
            check = dataclasses.replace(check, levelled=True)
    return out.with_drop_check(check, warnings=warnings)


def _rz(angle_rad: float) -> np.ndarray:
    c, s = math.cos(angle_rad), math.sin(angle_rad)
    return np.array([[c, -s, 0.0], [s, c, 0.0], [0.0, 0.0, 1.0]])
