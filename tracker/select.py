"""Which candidate track is the BB: expected image size, a speed band and ballistic motion.

The linker (:mod:`tracker.associate`) accepts any smooth path. Whether a smooth path is a BB is judged
here, in metres and seconds on the flight plane, from what is known before any fit:

* **size** — the rig's scale gives the BB's image diameter D = d / (m per px) at the flight plane. A
  uniform disk of diameter D has the second-moment width D/4 per axis; the lens blurs it further, so the
  fitted Gaussian width s of a BB lies between about D/4 and √((D/4)² + s_psf²) with s_psf up to
  :data:`PSF_MAX_PX`. A blob much wider (an insect twice the BB's size) or much narrower (a defect) is not
  the BB.
* **speed** — a BB from a replica flies at 20–200 m/s (:data:`SPEED_BAND_MPS`, an option).
* **ballistic motion** — a BB falls under gravity, less a lift that a plausible lift coefficient bounds,
  and drag slows it: its vertical acceleration a_y lies within g ± a_L,max(u) with
  a_L,max = ½ ρ A C_L,max u² / m_min, and it does not speed up along its path.

Time scale: a clip whose timestamps are playback time (phone slow motion stored at 30 fps) shows speeds
k times and accelerations k² times too small (k = capture rate / timestamp rate). Drag scales like u², so
it cannot tell; gravity does not scale, so a BB's fall is k² too small for its speed. When no track
passes but one fails only the speed band and the fall in that way, it is kept as the BB with a warning
that names the likely capture rate (:func:`likely_time_scale`).

Conventions: world x downrange, y up, metres; times in seconds; pixel (u, v) = (col, row).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from hopscope.shared.constants import DEFAULT_BB_DIAMETER_M, STANDARD_GRAVITY_MPS2

#: Speeds of a BB from a replica, m/s.  # common practice, no published source
SPEED_BAND_MPS = (20.0, 200.0)

#: Largest lens blur (Gaussian σ of the point-spread function) a usable clip has, px; a tracer's glow
#: adds to it.  # common practice, no published source
PSF_MAX_PX = 1.6

#: A track's median fitted width may exceed the widest a BB can look by this factor, or fall below the
#: narrowest by its inverse, before it is rejected (localisation scatter, compression).
SIZE_TOLERANCE = 1.3

#: Largest lift coefficient of a spinning BB: lift of spinning spheres stays below about 0.3 over the spin
#: ratios a hop-up gives (S ≲ 0.5); BBs in flight show a few hundredths.  # from memory
LIFT_COEFFICIENT_MAX = 0.3

#: Largest drag coefficient of a sphere at BB Reynolds numbers (about 0.4–0.5 measured, Morsi &
#: Alexander 1972, JFM 55:193, tables of Lapple and Schlichting); 1.0 leaves room for a rough BB.
DRAG_COEFFICIENT_MAX = 1.0

#: Lightest BB in use, kg (0.12 g plastic BBs).  # common practice, no published source
BB_MASS_MIN_KG = 0.12e-3

#: Densest air a clip is taken in, kg/m³ (cold air at sea level: about 1.3 at 0 °C).  # from memory
AIR_DENSITY_MAX_KGM3 = 1.3

#: How many standard errors an acceleration may miss its bound by.
ACCEL_SIGMA = 4.0

#: Fewest points for the ballistic tests (a quadratic needs three; five give it a useful error).
BALLISTIC_MIN_POINTS = 6

#: Capture rates of common high-speed and slow-motion cameras, Hz.  # common practice, no published source
COMMON_CAPTURE_RATES_HZ = (
    60.0,
    120.0,
    240.0,
    480.0,
    960.0,
    1000.0,
    1920.0,
    2000.0,
    3840.0,
    4000.0,
    5000.0,
    7680.0,
    10000.0,
    20000.0,
)

#: A typical BB speed, m/s: the likely capture rate is the common one that brings the speed at the
#: track's first point nearest it.
#: common practice, no published source
TYPICAL_SPEED_MPS = 95.0


@dataclass(frozen=True)
class BBSearch:
    """What the BB looks like and how it may move.

    Attributes
    ----------
    diameter_m : BB diameter, m.
    speed_band_mps : (lowest, highest) speed of a BB, m/s.
    """

    diameter_m: float = DEFAULT_BB_DIAMETER_M
    speed_band_mps: tuple[float, float] = SPEED_BAND_MPS

    def __post_init__(self) -> None:
        if not (math.isfinite(self.diameter_m) and 0 < self.diameter_m < 0.1):
            raise ValueError(
                f"--diameter-mm: expected a value between 0 and 100 mm, got {self.diameter_m * 1e3:g}"
            )
        lo, hi = self.speed_band_mps
        if not (math.isfinite(lo) and math.isfinite(hi) and 0 < lo < hi):
            raise ValueError(f"--speed-band-mps: expected LOW:HIGH with 0 < LOW < HIGH, got {lo:g}:{hi:g}")


@dataclass(frozen=True)
class TrackJudgement:
    """How one candidate track compares with a BB.

    Attributes
    ----------
    speed_mps : speed at the middle of the track, m/s.
    start_speed_mps : speed at its first point, m/s (the quadratic's derivative there).
    accel_y_mps2, accel_y_se_mps2 : vertical acceleration and its standard error, m/s² (y up).
    accel_along_mps2, accel_along_se_mps2 : acceleration along the path (negative: slowing), m/s².
    width_px : median fitted Gaussian width of its blobs, px.
    width_range_px : (narrowest, widest) width a BB can have here, px.
    size_ok, speed_ok, fall_ok, drag_ok : each test passed (a test without the data to decide passes).
    reason : empty when the track is a BB, else why not (one line).
    time_scale_hint : when the track fails only the speed band (too slow) and its fall is too small for
        that speed, the likely ratio capture rate / timestamp rate (else None).
    """

    speed_mps: float
    start_speed_mps: float
    accel_y_mps2: float
    accel_y_se_mps2: float
    accel_along_mps2: float
    accel_along_se_mps2: float
    width_px: float
    width_range_px: tuple[float, float]
    size_ok: bool
    speed_ok: bool
    fall_ok: bool
    drag_ok: bool
    reason: str
    time_scale_hint: float | None = None

    @property
    def is_bb(self) -> bool:
        return not self.reason

    @property
    def timing_suspect(self) -> bool:
        """A BB's image moving a BB's way, but with its time scaled (playback timing)."""
        return self.time_scale_hint is not None


def width_range_px(diameter_m: float, m_per_px: float) -> tuple[float, float]:
    """(narrowest, widest) Gaussian width s of a BB's image, px, before :data:`SIZE_TOLERANCE`.

    A uniform disk of diameter D px has the second moment (D/4)² per axis; the lens adds its own
    (up to :data:`PSF_MAX_PX`); a width never goes below the pixel's own 1/√12 px (a point on one pixel).
    """
    d_px = diameter_m / m_per_px
    s_disk = d_px / 4.0
    lo = max(s_disk, 1.0 / math.sqrt(12.0))
    hi = math.sqrt(s_disk * s_disk + PSF_MAX_PX * PSF_MAX_PX)
    return lo, hi


def lift_accel_max_mps2(speed_mps: float, diameter_m: float) -> float:
    """Largest lift acceleration ½ ρ A C_L,max u² / m_min a BB can have at ``speed_mps``, m/s²."""
    area = math.pi * diameter_m * diameter_m / 4.0
    return 0.5 * AIR_DENSITY_MAX_KGM3 * area * LIFT_COEFFICIENT_MAX * speed_mps**2 / BB_MASS_MIN_KG


def drag_accel_max_mps2(speed_mps: float, diameter_m: float) -> float:
    """Largest drag deceleration ½ ρ A C_D,max u² / m_min at ``speed_mps``, m/s²."""
    area = math.pi * diameter_m * diameter_m / 4.0
    return 0.5 * AIR_DENSITY_MAX_KGM3 * area * DRAG_COEFFICIENT_MAX * speed_mps**2 / BB_MASS_MIN_KG


def _quadratic(t: np.ndarray, y: np.ndarray, w: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Weighted quadratic y ≈ c0 + c1 t + c2 t²: coefficients and their covariance (scaled by χ²/dof ≥ 1)."""
    x = np.vander(t, 3, increasing=True)
    xw = x * w[:, None]
    cov = np.linalg.pinv(xw.T @ xw)
    c = cov @ (xw.T @ (y * w))
    r = (x @ c - y) * w
    dof = max(t.size - 3, 1)
    chi2 = float(r @ r) / dof
    return c, cov * max(chi2, 1.0)


def judge_track(
    t_s: np.ndarray,
    x_m: np.ndarray,
    y_m: np.ndarray,
    sigma_m: np.ndarray,
    width_px: np.ndarray,
    m_per_px: float,
    search: BBSearch,
    *,
    gravity_mps2: float = STANDARD_GRAVITY_MPS2,
) -> TrackJudgement:
    """Compare one candidate track with a BB (size, speed band, fall and drag).

    Parameters
    ----------
    t_s : (N,) times, s, increasing.
    x_m, y_m : (N,) positions on the flight plane, m (x downrange, y up).
    sigma_m : (N,) position uncertainty per axis, m.
    width_px : (N,) fitted Gaussian widths of the blobs, px.
    m_per_px : the rig's scale at the track, m/px.
    search : the BB's diameter and speed band.
    gravity_mps2 : g, m/s².

    Returns
    -------
    TrackJudgement
    """
    t = np.asarray(t_s, float)
    x = np.asarray(x_m, float)
    y = np.asarray(y_m, float)
    sig = np.maximum(np.asarray(sigma_m, float), 1e-12)
    tm = float(np.mean(t))
    tt = t - tm
    w = 1.0 / sig
    if t.size >= 3:
        cx, covx = _quadratic(tt, x, w)
        cy, covy = _quadratic(tt, y, w)
        vx, vy = float(cx[1]), float(cy[1])
    else:
        vx = float((x[-1] - x[0]) / (t[-1] - t[0]))
        vy = float((y[-1] - y[0]) / (t[-1] - t[0]))
        cx = cy = np.zeros(3)
        covx = covy = np.full((3, 3), np.inf)
    speed = math.hypot(vx, vy)
    t0 = float(tt[0])
    start_speed = math.hypot(vx + 2.0 * float(cx[2]) * t0, vy + 2.0 * float(cy[2]) * t0)
    ay, ay_se = 2.0 * float(cy[2]), 2.0 * math.sqrt(max(float(covy[2, 2]), 0.0))
    ux, uy = (vx / speed, vy / speed) if speed > 0 else (1.0, 0.0)
    a_al = 2.0 * float(cx[2] * ux + cy[2] * uy)
    a_al_se = 2.0 * math.sqrt(max(float(covx[2, 2] * ux * ux + covy[2, 2] * uy * uy), 0.0))
    enough = t.size >= BALLISTIC_MIN_POINTS and math.isfinite(ay_se)

    wid = float(np.median(width_px))
    lo_w, hi_w = width_range_px(search.diameter_m, m_per_px)
    size_ok = lo_w / SIZE_TOLERANCE <= wid <= hi_w * SIZE_TOLERANCE
    lo_v, hi_v = search.speed_band_mps
    speed_ok = lo_v <= speed <= hi_v
    lift = lift_accel_max_mps2(speed, search.diameter_m)
    miss = abs(ay + gravity_mps2) - lift
    fall_ok = not enough or miss <= ACCEL_SIGMA * ay_se
    drag = drag_accel_max_mps2(speed, search.diameter_m)
    drag_ok = not enough or (a_al <= ACCEL_SIGMA * a_al_se and -a_al - drag <= ACCEL_SIGMA * a_al_se)

    reasons = []
    if not size_ok:
        reasons.append(
            f"its image is {wid:.2f} px wide where a {search.diameter_m * 1e3:.3g} mm BB is "
            f"{lo_w:.2f}..{hi_w:.2f} px (Gaussian width)"
        )
    if not speed_ok:
        reasons.append(f"it moves at {speed:.3g} m/s, outside the BB speed band {lo_v:g}..{hi_v:g} m/s")
    if not fall_ok:
        reasons.append(
            f"its vertical acceleration {ay:+.3g} ± {ay_se:.2g} m/s² is not g = −{gravity_mps2:.4g} m/s² "
            f"within a plausible lift (at most {lift:.3g} m/s² at {speed:.3g} m/s)"
        )
    if not drag_ok:
        reasons.append(
            f"its acceleration along the path {a_al:+.3g} ± {a_al_se:.2g} m/s² is not a drag deceleration "
            f"(0..{drag:.3g} m/s² at {speed:.3g} m/s)"
        )
    hint = None
    if size_ok and drag_ok and speed < lo_v and (not fall_ok) and ay > -gravity_mps2:
        hint = likely_time_scale(start_speed, ay, search)
    return TrackJudgement(
        speed_mps=speed,
        start_speed_mps=start_speed,
        accel_y_mps2=ay,
        accel_y_se_mps2=ay_se,
        accel_along_mps2=a_al,
        accel_along_se_mps2=a_al_se,
        width_px=wid,
        width_range_px=(lo_w, hi_w),
        size_ok=size_ok,
        speed_ok=speed_ok,
        fall_ok=fall_ok,
        drag_ok=drag_ok,
        reason="; ".join(reasons),
        time_scale_hint=hint,
    )


def likely_time_scale(
    speed_mps: float,
    accel_y_mps2: float,
    search: BBSearch,
    *,
    gravity_mps2: float = STANDARD_GRAVITY_MPS2,
    timestamp_rate_hz: float | None = None,
) -> float | None:
    """Ratio k = capture rate / timestamp rate that makes a slow, hardly falling track a BB's flight.

    ``speed_mps`` is the track's speed at its first point (a BB enters the view near its exit speed).
    Real speed is k·u and real vertical acceleration k²·a_y. Candidates are k from 1.5 to 1000 (or, given
    ``timestamp_rate_hz``, the common capture rates over it, :data:`COMMON_CAPTURE_RATES_HZ`); kept are
    those that put the speed in the band and the fall within g ± the lift bound; of these the one whose
    speed is nearest :data:`TYPICAL_SPEED_MPS` (in ratio). None when no k fits.
    """
    if timestamp_rate_hz:
        ks = [r / timestamp_rate_hz for r in COMMON_CAPTURE_RATES_HZ if r > 1.4 * timestamp_rate_hz]
    else:
        ks = list(np.geomspace(1.5, 1000.0, 400))
    lo_v, hi_v = search.speed_band_mps
    best: tuple[float, float] | None = None
    for k in ks:
        u = k * speed_mps
        if not lo_v <= u <= hi_v:
            continue
        if abs(k * k * accel_y_mps2 + gravity_mps2) > lift_accel_max_mps2(u, search.diameter_m):
            continue
        score = abs(math.log(u / TYPICAL_SPEED_MPS))
        if best is None or score < best[0]:
            best = (score, float(k))
    return None if best is None else best[1]


def describe_rejections(reasons: Sequence[str], limit: int = 5) -> tuple[str, ...]:
    """The first ``limit`` distinct reasons, for the summary."""
    return tuple(dict.fromkeys(reasons))[:limit]
