"""Aerodynamic laws: drag coefficient, lift coefficient and spin decay, as small frozen dataclasses.

Every law is a pure function of SI numbers. Parameters may be floats or 1-D arrays (one value per shot);
they broadcast against the per-shot state arrays of the integrator.

Sign conventions: the spin ratio S = r·ω/u is signed like ω (backspin about +z for a BB flying +x is
positive, see :mod:`fitting.flight`), so a lift law that is odd in S turns topspin into downforce.

Where the constants come from, and what they were checked against (tests/fitting/test_published_*.py):

- sphere drag: published smooth-sphere correlations, compared with the Roos & Willmarth (1971) points at
  Re 1.3e4–1.2e5 (Clift-Grace-Weber 6.5 % ± 1.4 % below them, Brown-Lawler 8.7 % ± 1.2 %) and with the
  Lapple/Schlichting tables of Morsi & Alexander (1972); the ``sphere`` law fits a scale on top;
- lift: no measurement of C_L(S) for a smooth sphere at BB Reynolds numbers (1e4–5e4) was found. The
  linear law's slope is a convention (k = 1; only k·ω₀ is identifiable); the saturating law's constants
  are a published ball-flight form read in a secondary source. Both give positive lift for backspin at
  every S, as Muto, Tsubokura & Oshima (2012) report for a smooth sphere at subcritical Re;
- spin decay: the only measurement found is for golf balls (Smits & Smith 1994, dimpled, Re 1e5–2.5e5):
  :data:`GOLF_TORQUE_SLOPE` reproduces it. Its use for smooth 6 mm BBs is an assumption (README, "Where
  the physics comes from").
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Protocol, runtime_checkable

import numpy as np

ArrayLike = float | np.ndarray


def reynolds_number(speed_mps: ArrayLike, diameter_m: float, density_kgm3: float, viscosity_pas: float):
    """Reynolds number Re = rho u d / mu (dimensionless)."""
    return density_kgm3 * np.asarray(speed_mps) * diameter_m / viscosity_pas


def spin_ratio(spin_radps: ArrayLike, speed_mps: ArrayLike, radius_m: float):
    """Spin ratio S = r ω / u (dimensionless, signed like ω)."""
    return radius_m * np.asarray(spin_radps) / np.asarray(speed_mps)


# ---------------------------------------------------------------------------------------------- sphere drag


#: Upper Reynolds-number bounds of the pieces of the Clift-Grace-Weber correlation (the last is open).
_CGW_BOUNDS = np.array([0.01, 20.0, 260.0, 1500.0, 12000.0, 44000.0, 338000.0, 400000.0])


def _cgw_piece(i: int, re: np.ndarray, w: np.ndarray) -> np.ndarray:
    if i == 0:
        return 24.0 / re + 3.0 / 16.0
    if i == 1:
        return 24.0 / re * (1 + 0.1315 * re ** (0.82 - 0.05 * w))
    if i == 2:
        return 24.0 / re * (1 + 0.1935 * re**0.6305)
    if i == 3:
        return 10 ** (1.6435 - 1.1242 * w + 0.1558 * w**2)
    if i == 4:
        return 10 ** (-2.4571 + 2.5558 * w - 0.9295 * w**2 + 0.1049 * w**3)
    if i == 5:
        return 10 ** (-1.9181 + 0.6370 * w - 0.0636 * w**2)
    if i == 6:
        return 10 ** (-4.3390 + 1.5809 * w - 0.1546 * w**2)
    if i == 7:
        return 29.78 - 5.3 * w
    return 0.19 * w - 0.49


def cd_clift_grace_weber(re: ArrayLike) -> np.ndarray:
    """Drag coefficient of a smooth sphere, piecewise correlation of Clift, Grace & Weber.

    Valid 0 < Re < 1e6 (w = log10 Re; nine pieces, e.g. 1.2e4 ≤ Re < 4.4e4:
    log10 C_D = −1.9181 + 0.6370 w − 0.0636 w²). Captures the subcritical rise of C_D between Re 1e4
    and 1e5, which matters for BBs (Re ≈ 1.5e4–7e4).

    Parameters
    ----------
    re : Reynolds number(s), dimensionless, > 0.

    Returns
    -------
    C_D, dimensionless, same shape as ``re``.

    References
    ----------
    Clift, Grace & Weber (1978), *Bubbles, Drops, and Particles*, Academic Press, Table 5.2; the same
    pieces as implemented in the ``fluids`` library (``fluids.drag.Clift``), against which it is tested.
    Against measurements: 6.5 % (± 1.4 %) below the smooth-sphere points of Roos & Willmarth (1971),
    "Some experimental results on sphere and disk drag", AIAA J. 9:285, over Re 1.3e4–1.2e5, most at the low
    end (tests/fitting/test_published_drag.py); within 4 % of Almedeij (2008), Powder Technol. 186:218.
    """
    return _cgw_unchecked(_checked_reynolds(re))


def _checked_reynolds(re: ArrayLike) -> np.ndarray:
    re = np.asarray(re, dtype=float)
    if np.any(~np.isfinite(re)) or np.any(re <= 0):
        raise ValueError("Reynolds number must be positive and finite")
    return re


def _cgw_unchecked(re: np.ndarray) -> np.ndarray:
    piece = np.searchsorted(_CGW_BOUNDS, re, side="right")
    first = int(piece.flat[0]) if re.size else 0
    if re.size and np.all(piece == first):  # the usual case inside a flight: one piece for all shots
        return np.asarray(_cgw_piece(first, re, np.log10(re)), dtype=float)
    out = np.empty_like(re)
    for i in np.unique(piece):
        sel = piece == i
        r = re[sel]
        out[sel] = _cgw_piece(int(i), r, np.log10(r))
    return out


def cd_brown_lawler(re: ArrayLike) -> np.ndarray:
    """Drag coefficient of a smooth sphere, Brown & Lawler correlation (Re < 2e5).

    C_D = (24/Re)(1 + 0.150 Re^0.681) + 0.407 / (1 + 8710/Re)

    References
    ----------
    Brown & Lawler (2003), "Sphere drag and settling velocity revisited", J. Environ. Eng. 129(3):222-231,
    eq. 19. Against measurements: 8.7 % (± 1.2 %) below Roos & Willmarth (1971), AIAA J. 9:285, over
    Re 1.3e4–1.2e5 (tests/fitting/test_published_drag.py).
    """
    return _bl_unchecked(_checked_reynolds(re))


def _bl_unchecked(re: np.ndarray) -> np.ndarray:
    return 24.0 / re * (1.0 + 0.150 * re**0.681) + 0.407 / (1.0 + 8710.0 / re)


SPHERE_CORRELATIONS = {
    "clift-grace-weber": cd_clift_grace_weber,
    "brown-lawler": cd_brown_lawler,
}

#: The same correlations without input checks, for the integrator's inner loop (Re > 0 there by
#: construction). Keys as in :data:`SPHERE_CORRELATIONS`.
SPHERE_CORRELATIONS_UNCHECKED = {
    "clift-grace-weber": _cgw_unchecked,
    "brown-lawler": _bl_unchecked,
}


# ---------------------------------------------------------------------------------------------- protocols


@runtime_checkable
class DragLaw(Protocol):
    """C_D(Re, S): ``coefficient(re, s)`` for Reynolds numbers and spin ratios (arrays), dimensionless."""

    @property
    def name(self) -> str: ...

    def coefficient(self, re: np.ndarray, s: np.ndarray) -> np.ndarray: ...


@runtime_checkable
class LiftLaw(Protocol):
    """C_L(S): ``coefficient(s)`` for signed spin ratios (arrays), dimensionless."""

    @property
    def name(self) -> str: ...

    def coefficient(self, s: np.ndarray) -> np.ndarray: ...


@runtime_checkable
class DecayLaw(Protocol):
    """dω/dt (rad/s²) from spin (rad/s), air speed (m/s) and the BB and air constants (SI)."""

    @property
    def name(self) -> str: ...

    def rate(
        self,
        spin_radps: np.ndarray,
        speed_mps: np.ndarray,
        *,
        density_kgm3: float,
        area_m2: float,
        radius_m: float,
        inertia_kgm2: float,
    ) -> np.ndarray: ...


# ---------------------------------------------------------------------------------------------- drag laws


@dataclass(frozen=True)
class ConstantDrag:
    """C_D = cd + spin_drag · S² (``spin_drag`` 0 by default).

    The optional quadratic spin-drag term follows the observation that C_D rises with spin ratio
    (Lyu et al. 2022, baseballs; Elliott, Smith, Lyu & Smith 2024, "The combined influence of spin and
    roughness frequency on sphere aerodynamics", Exp. Fluids 65:4, abstract read: lift on spheres comes with
    increased drag) in its simplest even form. No coefficient for smooth spheres at BB Reynolds numbers was
    found, so ``spin_drag`` is 0 unless given.
    """

    cd: ArrayLike
    spin_drag: ArrayLike = 0.0
    name: str = "constant"

    def coefficient(self, re: np.ndarray, s: np.ndarray) -> np.ndarray:
        shape = np.broadcast_shapes(np.shape(re), np.shape(s), np.shape(self.cd), np.shape(self.spin_drag))
        if np.ndim(self.spin_drag) == 0 and self.spin_drag == 0:
            return np.array(np.broadcast_to(np.asarray(self.cd, dtype=float), shape))
        return np.array(np.broadcast_to(self.cd + self.spin_drag * np.square(s), shape))


@dataclass(frozen=True)
class SphereDrag:
    """C_D = scale · C_D,sphere(Re) + spin_drag · S², with a published smooth-sphere correlation.

    ``correlation`` is one of :data:`SPHERE_CORRELATIONS` (default Clift-Grace-Weber, which follows the
    subcritical rise of C_D between Re 1e4 and 1e5).
    """

    scale: ArrayLike = 1.0
    correlation: str = "clift-grace-weber"
    spin_drag: ArrayLike = 0.0
    name: str = "sphere"

    def __post_init__(self) -> None:
        if self.correlation not in SPHERE_CORRELATIONS:
            raise ValueError(
                f"unknown sphere correlation {self.correlation!r}; choose one of {sorted(SPHERE_CORRELATIONS)}"
            )

    def coefficient(self, re: np.ndarray, s: np.ndarray) -> np.ndarray:
        return self.scale * SPHERE_CORRELATIONS[self.correlation](re) + self.spin_drag * np.square(s)


# ---------------------------------------------------------------------------------------------- constants

#: Saturating lift law, C_L = 1.12 S / (0.583 + 2.333 S) written as cl_max·S/(s_half + S): cl_max =
#: 1.12/2.333 ≈ 0.480 (dimensionless). The published form as reproduced in secondary sources on
#: spinning-ball lift (read, secondary source; the primary was not identified). A ball-flight shape, not a
#: smooth-sphere measurement at BB Reynolds numbers (none was found).
SATURATING_CL_MAX = 1.12 / 2.333
#: ... and s_half = 0.583/2.333 ≈ 0.250 (dimensionless spin ratio at half of cl_max), same source.
SATURATING_S_HALF = 0.583 / 2.333

#: Spin-down torque slope c of C_M = c·S (dimensionless), a golf-ball value: Smits & Smith (1994) in golf
#: units, "spin-rate loss per second = 0.0004 × speed (mph) × spin" (read in a secondary source, see
#: tests/data/published/golf_spin_decay.csv), is c = 0.019 for their 45.93 g, 42.7 mm ball in standard air
#: with I = 0.4 m r²; 0.02 reproduces their worked example within 5 %. Dimpled ball, Re 1e5–2.5e5: no
#: measurement for a smooth 6 mm sphere at Re 1e4–5e4 was found, so its use for BBs is an assumption
#: (README, "Where the physics comes from"). For a 0.25 g BB at 100 m/s it gives τ ≈ 3 s.
GOLF_TORQUE_SLOPE = 0.02


# ---------------------------------------------------------------------------------------------- lift laws


@dataclass(frozen=True)
class LinearLift:
    """C_L = k · S (k dimensionless; odd in S, so topspin gives downforce).

    Lift growing with spin ratio at small S, as measured for spinning balls (Nathan 2008, "The effect of spin
    on the flight of a baseball", Am. J. Phys. 76:119: S = 0.09–0.595 at Re 1.1e5–2.4e5, C_L not strongly
    dependent on speed at fixed S; abstract read) and of one sign at subcritical Re for a smooth sphere
    (Muto, Tsubokura & Oshima 2012, Phys. Fluids 24:014102, abstract read). The default k = 1 is a
    convention, not a measured slope: a trajectory fixes k·ω only (see design: identifiability). No
    measurement of the slope for a smooth sphere at BB Reynolds numbers was found.
    """

    k: ArrayLike = 1.0
    name: str = "linear"

    def coefficient(self, s: np.ndarray) -> np.ndarray:
        return self.k * s

    def spin_ratio_for(self, cl: ArrayLike) -> np.ndarray:
        """The spin ratio S that gives lift coefficient ``cl``: S = C_L / k (the inverse of the law)."""
        return np.asarray(cl, dtype=float) / self.k


@dataclass(frozen=True)
class SaturatingLift:
    """C_L = cl_max · S / (s_half + |S|): linear at small S, flattening toward ``cl_max`` at large S.

    The defaults :data:`SATURATING_CL_MAX` and :data:`SATURATING_S_HALF` are exactly the published form
    C_L = 1.12 S / (0.583 + 2.333 S) for S > 0, extended to S < 0 as an odd function; ``cl_max`` may be
    scaled per shot. Over S = 0.05–0.45 it lies within 15 % of the baseball lift profile of Sawicki,
    Hubbard & Stronge (2003, Am. J. Phys. 71:1152; numbers from memory) (tests/fitting/test_published_lift.py).
    It is a ball-flight shape: no smooth-sphere measurement at BB Reynolds numbers was found to confirm it.
    """

    cl_max: ArrayLike = SATURATING_CL_MAX
    s_half: float = SATURATING_S_HALF
    name: str = "saturating"

    def __post_init__(self) -> None:
        if not (math.isfinite(self.s_half) and self.s_half > 0):
            raise ValueError(f"s_half must be positive, got {self.s_half!r}")

    def coefficient(self, s: np.ndarray) -> np.ndarray:
        return self.cl_max * s / (self.s_half + np.abs(s))

    def spin_ratio_for(self, cl: ArrayLike) -> np.ndarray:
        """The spin ratio S that gives lift coefficient ``cl`` (|cl| < cl_max): S = s½·C_L / (c − |C_L|)."""
        cl = np.asarray(cl, dtype=float)
        if np.any(np.abs(cl) >= np.abs(self.cl_max)):
            raise ValueError(
                f"lift coefficient {cl!r} is out of reach of the saturating law (|C_L| < cl_max)"
            )
        return self.s_half * cl / (self.cl_max - np.abs(cl))


# ---------------------------------------------------------------------------------------------- decay laws


@dataclass(frozen=True)
class ExponentialDecay:
    """dω/dt = −ω/τ: spin decays with a fixed time constant ``tau_s`` (s; ``inf`` means no decay).

    The simplest decay law, ω = ω₀ e^(−t/τ), as used for spin in ball-flight models (e.g. Nathan 2008,
    Am. J. Phys. 76:119; from memory). ``tau_s`` must be positive (per-shot arrays allowed). The measured
    golf-ball spin-down (Smits & Smith 1994) is proportional to speed × spin, which a fixed τ follows only
    while the speed changes little (over a close-up track); over a long flight :class:`AerodynamicDecay`
    is the law that matches it (tests/fitting/test_published_decay.py).
    """

    tau_s: ArrayLike = math.inf
    name: str = "exponential"

    def __post_init__(self) -> None:
        tau = np.asarray(self.tau_s, dtype=float)
        if np.any(np.isnan(tau)) or np.any(tau <= 0):
            raise ValueError(f"tau_s must be positive (inf for no decay), got {self.tau_s!r}")

    def rate(self, spin_radps, speed_mps, *, density_kgm3, area_m2, radius_m, inertia_kgm2):
        return -np.asarray(spin_radps) / self.tau_s


@dataclass(frozen=True)
class AerodynamicDecay:
    """Spin-down torque with coefficient C_M = c·S (c = ``torque_slope``, dimensionless).

    Torque T = ½ ρ u² A r C_M = ½ ρ A r² c u ω, so dω/dt = −(c ρ A r² u / 2I) ω and spin decays
    exponentially with distance flown through the air, over the length L = 2I / (c ρ A r²)
    (= 0.8·mass / (c ρ A) for a uniform sphere). ``torque_slope`` must be finite and ≥ 0.

    The default is :data:`GOLF_TORQUE_SLOPE`, a golf-ball value; see there for its source and what it
    means for a BB.

    References
    ----------
    Smits & Smith (1994), "A new aerodynamic model of a golf ball in flight", Science and Golf II,
    pp. 340-347 (not read); their spin-down as a rule in golf units and their ball's mass and radius are
    transcribed, with where they were read, in tests/data/published/golf_spin_decay.csv. Nathan (2008),
    "The effect of spin-down on the flight of a baseball" (note, §II.A, read): ω̇R²/v² is about linear in S
    and independent of Re over (1.0-2.5)e5 — the proportional form C_M = c·S.
    """

    torque_slope: ArrayLike = GOLF_TORQUE_SLOPE
    name: str = "aerodynamic"

    def __post_init__(self) -> None:
        c = np.asarray(self.torque_slope, dtype=float)
        if np.any(~np.isfinite(c)) or np.any(c < 0):
            raise ValueError(f"torque_slope must be finite and >= 0, got {self.torque_slope!r}")

    def rate(self, spin_radps, speed_mps, *, density_kgm3, area_m2, radius_m, inertia_kgm2):
        k = self.torque_slope * density_kgm3 * area_m2 * radius_m**2 / (2.0 * inertia_kgm2)
        return -k * np.asarray(speed_mps) * np.asarray(spin_radps)

    def decay_length_m(self, *, density_kgm3: float, area_m2: float, radius_m: float, inertia_kgm2: float):
        """Distance over which spin falls by a factor e, m."""
        return 2.0 * inertia_kgm2 / (np.asarray(self.torque_slope) * density_kgm3 * area_m2 * radius_m**2)


DRAG_LAWS = ("constant", "sphere")
LIFT_LAWS = ("linear", "saturating")
DECAY_LAWS = ("exponential", "aerodynamic")
