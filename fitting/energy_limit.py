"""Muzzle energy against a field limit: below, within the uncertainty of, or above the limit.

The margin is limit − energy (positive: below the limit), with the energy's standard uncertainty (fit
noise, calibration and the BB's mass tolerance, :mod:`fitting.muzzle`). The verdict compares the margin
with the expanded uncertainty U = k·σ at the coverage factor :data:`COVERAGE_FACTOR` (k = 2, about 95 %
for a normal distribution): "below" when margin > U, "above" when margin < −U, else "within". It is judged
on the group's highest-energy shot (what a field's chronograph check would catch) and on the mean.

References
----------
Expanded uncertainty U = k·u_c with coverage factor k = 2 for about 95 % coverage: JCGM 100:2008
(GUM), *Evaluation of measurement data — Guide to the expression of uncertainty in measurement*, §6.2-6.3.
# from memory
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from .muzzle import MuzzleState
from .results import Estimate

#: Coverage factor of the verdict (see the module docstring).
COVERAGE_FACTOR = 2.0

#: Said beside every energy verdict.
CAUTION = (
    "field and local rules on muzzle energy govern: the field's own chronograph is the reference, "
    "not this tool"
)

VERDICTS = ("below", "within", "above")


@dataclass(frozen=True)
class LimitVerdict:
    """One energy judged against the limit.

    Attributes
    ----------
    basis : ``"highest-energy shot"`` or ``"mean"``. label : the shot (None for the mean).
    energy_j : the energy judged, J. margin_j : limit − energy, J, with its standard uncertainty.
    margin_sigma : margin / σ (None when σ is 0 or unknown). verdict : one of :data:`VERDICTS`.
    """

    basis: str
    label: str | None
    energy_j: Estimate
    margin_j: Estimate
    margin_sigma: float | None
    verdict: str


@dataclass(frozen=True)
class EnergyLimit:
    """The limit, the verdict on the highest-energy shot (the headline) and on the mean."""

    limit_j: float
    highest: LimitVerdict
    mean: LimitVerdict
    coverage_factor: float
    caution: str = CAUTION

    @property
    def verdict(self) -> str:
        return self.highest.verdict

    @property
    def margin_j(self) -> Estimate:
        return self.highest.margin_j


def judge_energy(
    energy_j: Estimate, limit_j: float, *, basis: str, label: str | None = None, k: float = COVERAGE_FACTOR
) -> LimitVerdict:
    """Judge one energy estimate against ``limit_j`` (J) at coverage factor ``k``."""
    if energy_j.value is None:
        raise ValueError("energy_j: the energy is undetermined")
    sigma = 0.0 if energy_j.stderr is None else float(energy_j.stderr)
    margin = float(limit_j) - float(energy_j.value)
    m_est = Estimate(margin, sigma, energy_j.stderr_noise, energy_j.stderr_calibration, energy_j.stderr_bb)
    z = margin / sigma if sigma > 0 else None
    if margin > k * sigma:
        verdict = "below"
    elif margin < -k * sigma:
        verdict = "above"
    else:
        verdict = "within"
    return LimitVerdict(basis, label, energy_j, m_est, z, verdict)


def judge_energy_limit(muzzle: MuzzleState, limit_j: float, *, k: float = COVERAGE_FACTOR) -> EnergyLimit:
    """The group's muzzle energy against ``limit_j`` (J): on the highest-energy shot and on the mean.

    Raises
    ------
    ValueError
        ``limit_j`` not a positive finite number, or ``k`` not positive.
    """
    if not (math.isfinite(limit_j) and limit_j > 0):
        raise ValueError(f"limit_j must be a positive number of joules, got {limit_j!r}")
    if not (math.isfinite(k) and k > 0):
        raise ValueError(f"coverage factor must be positive, got {k!r}")
    top = max(muzzle.shots, key=lambda s: -math.inf if s.energy_j.value is None else s.energy_j.value)
    highest = judge_energy(top.energy_j, limit_j, basis="highest-energy shot", label=top.label, k=k)
    mean = judge_energy(muzzle.energy_j.mean, limit_j, basis="mean", k=k)
    return EnergyLimit(float(limit_j), highest, mean, float(k))


__all__ = [
    "CAUTION",
    "COVERAGE_FACTOR",
    "VERDICTS",
    "EnergyLimit",
    "LimitVerdict",
    "judge_energy",
    "judge_energy_limit",
]
