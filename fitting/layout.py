"""The parameter vector of a (joint) fit: five own slots per shot, then the shared drag and decay parameters.

One owner for the layout: names, bounds, start vector and the indices of every slot. Everything else
(the residual, the covariance, prediction, dispersion, the fit file) asks a :class:`ParamLayout` where a
parameter lives instead of writing ``5*i+k`` or ``[-1]``.

Layout (SI)::

    s0_x0_m, s0_y0_m, s0_speed_mps, s0_elevation_rad, s0_lift_coefficient,   (shot 0)
    s1_x0_m, ...                                                               (shot 1, ...)
    drag parameter  (``drag_coefficient`` for the constant law, ``drag_scale`` for the sphere law)
    decay parameter (``spin_decay_rate_per_s`` = 1/τ for the exponential law, ``spin_torque_slope``)
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from .guess import BOUNDS, guess_decay_param, guess_drag_param, guess_shot
from .observe import ModelSpec, RowParams, ShotData

#: The own slots of each shot, in order.
OWN_SLOTS: tuple[str, ...] = ("x0_m", "y0_m", "speed_mps", "elevation_rad", "lift_coefficient")
N_OWN = len(OWN_SLOTS)
N_SHARED = 2

#: Bounds on a shot's first position: the first tracked point ± (this + POSITION_PAD_SIGMAS·σ), m.
POSITION_PAD_M = 0.1
POSITION_PAD_SIGMAS = 100.0
#: |C_L| bound under the saturating law, as a fraction of its ceiling (the inverse diverges there).
CL_CEILING_FRACTION = 0.98
#: A parameter within this fraction of its bound range from a bound "ran to its bound".
BOUND_HIT_FRACTION = 1e-6
#: Start values are kept this fraction of the bound range inside the bounds.
START_MARGIN = 1e-3


def drag_param_name(spec: ModelSpec) -> str:
    """Name of the shared drag parameter for the spec's drag law."""
    return "drag_coefficient" if spec.drag == "constant" else "drag_scale"


def decay_param_name(spec: ModelSpec) -> str:
    """Name of the shared spin-decay parameter for the spec's decay law."""
    return "spin_decay_rate_per_s" if spec.decay == "exponential" else "spin_torque_slope"


@dataclass(frozen=True)
class ParamLayout:
    """Where each parameter of a fit of ``n_shots`` shots lives in the full vector.

    Attributes
    ----------
    n_shots : number of shots.
    drag_name, decay_name : names of the shared parameters (depend on the laws).
    """

    n_shots: int
    drag_name: str = "drag_coefficient"
    decay_name: str = "spin_decay_rate_per_s"

    def __post_init__(self) -> None:
        if not (isinstance(self.n_shots, int | np.integer) and self.n_shots >= 1):
            raise ValueError(f"n_shots must be a positive integer, got {self.n_shots!r}")

    @classmethod
    def for_spec(cls, spec: ModelSpec, n_shots: int) -> ParamLayout:
        return cls(int(n_shots), drag_param_name(spec), decay_param_name(spec))

    @classmethod
    def from_names(cls, names: Sequence[str]) -> ParamLayout:
        """The layout of a stored name list (checks that it is one)."""
        n = (len(names) - N_SHARED) // N_OWN
        if n < 1 or len(names) != N_OWN * n + N_SHARED:
            raise ValueError(f"parameter names: {len(names)} names is not {N_OWN}·n + {N_SHARED}")
        layout = cls(n, str(names[-2]), str(names[-1]))
        if tuple(names) != layout.names:
            raise ValueError(
                "parameter names: not in the layout of own slots per shot, then drag, then decay"
            )
        return layout

    # ---------------------------------------------------------------------------------------- indices
    @property
    def size(self) -> int:
        """Length of the full vector."""
        return N_OWN * self.n_shots + N_SHARED

    @property
    def names(self) -> tuple[str, ...]:
        """``s{i}_{slot}`` for each shot, then the drag and decay names."""
        own = tuple(f"s{i}_{slot}" for i in range(self.n_shots) for slot in OWN_SLOTS)
        return (*own, self.drag_name, self.decay_name)

    @property
    def slot_names(self) -> tuple[str, ...]:
        """The seven kinds of parameter: the own slots, then drag and decay."""
        return (*OWN_SLOTS, self.drag_name, self.decay_name)

    def own(self, shot: int) -> slice:
        """Slice of shot ``shot``'s own slots."""
        return slice(N_OWN * shot, N_OWN * (shot + 1))

    def index(self, shot: int, slot: str) -> int:
        """Index of ``slot`` (one of :data:`OWN_SLOTS`) of shot ``shot``."""
        return N_OWN * shot + OWN_SLOTS.index(slot)

    def slot(self, slot: str) -> np.ndarray:
        """Indices of ``slot`` for every shot, shape (n_shots,)."""
        return N_OWN * np.arange(self.n_shots) + OWN_SLOTS.index(slot)

    @property
    def own_block(self) -> slice:
        """Slice of all own slots."""
        return slice(0, N_OWN * self.n_shots)

    @property
    def shared(self) -> slice:
        """Slice of the shared (drag, decay) parameters."""
        return slice(N_OWN * self.n_shots, self.size)

    @property
    def drag(self) -> int:
        return N_OWN * self.n_shots

    @property
    def decay(self) -> int:
        return N_OWN * self.n_shots + 1

    def shot_of(self, name: str) -> int | None:
        """The shot index of an own parameter's name, or None for a shared one."""
        i = self.names.index(name)
        return None if i >= N_OWN * self.n_shots else i // N_OWN

    # ---------------------------------------------------------------------------------------- vectors
    def rows(self, theta: np.ndarray) -> RowParams:
        """Per-shot row parameters (n_shots rows) of a full vector."""
        th = np.asarray(theta, dtype=float)
        own = th[self.own_block].reshape(self.n_shots, N_OWN)
        drag = np.full(self.n_shots, float(th[self.drag]))
        decay = np.full(self.n_shots, float(th[self.decay]))
        return RowParams(own[:, 0], own[:, 1], own[:, 2], own[:, 3], own[:, 4], drag, decay)

    def shot_rows(self, thetas: np.ndarray, shot: int) -> RowParams:
        """Row parameters of one shot for each vector in ``thetas`` (m, size): m rows."""
        th = np.atleast_2d(np.asarray(thetas, dtype=float))
        own = th[:, self.own(shot)]
        return RowParams(
            own[:, 0], own[:, 1], own[:, 2], own[:, 3], own[:, 4], th[:, self.drag], th[:, self.decay]
        )

    def bounds(self, spec: ModelSpec, shots: Sequence[ShotData]) -> tuple[np.ndarray, np.ndarray]:
        """Lower and upper bounds of the full vector: physical ranges, positions near the first point."""
        lo, hi = np.empty(self.size), np.empty(self.size)
        cl_lo, cl_hi = BOUNDS["lift_coefficient"]
        if math.isfinite(spec.cl_limit):
            lim = CL_CEILING_FRACTION * spec.cl_limit
            cl_lo, cl_hi = max(cl_lo, -lim), min(cl_hi, lim)
        for i, s in enumerate(shots):
            pad = POSITION_PAD_M + POSITION_PAD_SIGMAS * float(s.sigma_m[0])
            lo[self.own(i)] = [s.x_m[0] - pad, s.y_m[0] - pad, BOUNDS["speed_mps"][0], BOUNDS["elevation_rad"][0], cl_lo]  # fmt: skip
            hi[self.own(i)] = [s.x_m[0] + pad, s.y_m[0] + pad, BOUNDS["speed_mps"][1], BOUNDS["elevation_rad"][1], cl_hi]  # fmt: skip
        for k, name in ((self.drag, self.drag_name), (self.decay, self.decay_name)):
            lo[k], hi[k] = BOUNDS[name]
        return lo, hi

    def start(
        self, spec: ModelSpec, shots: Sequence[ShotData], lower: np.ndarray, upper: np.ndarray
    ) -> np.ndarray:
        """Start vector from the data (:mod:`fitting.guess`), kept just inside the bounds."""
        guesses = [guess_shot(s, spec) for s in shots]
        theta = np.empty(self.size)
        for i, g in enumerate(guesses):
            theta[self.own(i)] = [g.x0_m, g.y0_m, g.speed_mps, g.elevation_rad, g.lift_coefficient]
        theta[self.drag] = guess_drag_param(guesses, spec)
        theta[self.decay] = guess_decay_param(spec)
        span = upper - lower
        return np.clip(theta, lower + START_MARGIN * span, upper - START_MARGIN * span)


__all__ = ["N_OWN", "OWN_SLOTS", "ParamLayout", "decay_param_name", "drag_param_name"]
