"""BB properties (a uniform 6 mm-class plastic sphere)."""

from __future__ import annotations

import math
from dataclasses import dataclass

from hopscope.shared.constants import DEFAULT_BB_DIAMETER_M


@dataclass(frozen=True)
class BB:
    """A BB: a uniform sphere.

    Attributes
    ----------
    mass_kg : mass, kg (a 0.25 g BB is 2.5e-4 kg).
    diameter_m : diameter, m (default 5.95e-3 m, common practice).
    """

    mass_kg: float
    diameter_m: float = DEFAULT_BB_DIAMETER_M

    def __post_init__(self) -> None:
        if not (math.isfinite(self.mass_kg) and self.mass_kg > 0):
            raise ValueError(f"BB mass must be a positive finite number of kg, got {self.mass_kg!r}")
        if not (math.isfinite(self.diameter_m) and self.diameter_m > 0):
            raise ValueError(f"BB diameter must be a positive finite number of m, got {self.diameter_m!r}")
        if not (1e-5 <= self.mass_kg <= 1e-2):
            raise ValueError(f"BB mass {self.mass_kg:g} kg is outside 0.01..10 g")
        if not (1e-3 <= self.diameter_m <= 2e-2):
            raise ValueError(f"BB diameter {self.diameter_m:g} m is outside 1..20 mm")

    @property
    def radius_m(self) -> float:
        return 0.5 * self.diameter_m

    @property
    def area_m2(self) -> float:
        """Frontal (cross-section) area pi d²/4, m²."""
        return math.pi * self.diameter_m**2 / 4.0

    @property
    def inertia_kgm2(self) -> float:
        """Moment of inertia of a uniform solid sphere, (2/5) m r², kg·m²."""
        return 0.4 * self.mass_kg * self.radius_m**2

    def q_per_m(self, density_kgm3: float) -> float:
        """q = ½ ρ A / m, 1/m: drag deceleration is q·C_D·u², Magnus lift acceleration q·C_L·u².

        Parameters
        ----------
        density_kgm3 : air density, kg/m³.
        """
        return 0.5 * density_kgm3 * self.area_m2 / self.mass_kg

    def kinetic_energy_j(self, speed_mps: float) -> float:
        """Translational kinetic energy ½ m v², J."""
        return 0.5 * self.mass_kg * speed_mps * speed_mps


#: Default standard uncertainty of a BB's mass, as a fraction of the nominal mass: 1 %, i.e. a bag's stated
#: weight taken as good to ±2 % at about 95 % (k = 2).  # common practice, no published source
DEFAULT_MASS_REL_SIGMA = 0.01

#: Default standard uncertainty of a BB's diameter, m: 0.01 mm (a 5.95 mm BB good to ±0.02 mm at k = 2).
#: # common practice, no published source
DEFAULT_DIAMETER_SIGMA_M = 1e-5


@dataclass(frozen=True)
class BBTolerance:
    """Standard uncertainties of a BB's mass and diameter (SI).

    Attributes
    ----------
    mass_sigma_kg : standard uncertainty of the mass, kg (≥ 0).
    diameter_sigma_m : standard uncertainty of the diameter, m (≥ 0).
    origin : where they come from, e.g. ``"given"`` or ``"default"`` (carried into the output).

    Notes
    -----
    A trajectory fixes the drag and lift *accelerations* q·C_D·u² and q·C_L·u², q = ½ρA/m ∝ d²/m, so at a
    fixed measured path C_D and C_L (and the aerodynamic decay's torque slope) scale as m/d²: their
    relative standard uncertainty from the BB is √((σ_m/m)² + (2σ_d/d)²). The kinetic energy ½mv² scales
    as m (speed is measured kinematically). The predicted path does not depend on m or d at all.
    """

    mass_sigma_kg: float
    diameter_sigma_m: float
    origin: str = "given"

    def __post_init__(self) -> None:
        for name in ("mass_sigma_kg", "diameter_sigma_m"):
            v = getattr(self, name)
            if not (math.isfinite(v) and v >= 0):
                raise ValueError(f"{name} must be a finite number >= 0, got {v!r}")

    @classmethod
    def default_for(cls, bb: BB) -> BBTolerance:
        """The default tolerance (:data:`DEFAULT_MASS_REL_SIGMA`, :data:`DEFAULT_DIAMETER_SIGMA_M`)."""
        return cls(DEFAULT_MASS_REL_SIGMA * bb.mass_kg, DEFAULT_DIAMETER_SIGMA_M, "default")

    def mass_rel(self, bb: BB) -> float:
        """σ_m / m."""
        return self.mass_sigma_kg / bb.mass_kg

    def aero_rel(self, bb: BB) -> float:
        """Relative standard uncertainty of C_D and C_L from the BB, √((σ_m/m)² + (2σ_d/d)²)."""
        return math.hypot(self.mass_sigma_kg / bb.mass_kg, 2.0 * self.diameter_sigma_m / bb.diameter_m)
