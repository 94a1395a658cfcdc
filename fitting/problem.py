"""The problem of a (joint) fit: the residual (model − data)/σ and its batched Jacobian.

Residual entries: the tracked points of every shot, (x, y) interleaved, shot by shot; then, with a
chronograph, one prior entry per shot. The parameter vector is laid out by
:class:`fitting.layout.ParamLayout`.

Notes
-----
World frame: x downrange, y up, metres.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from .layout import N_OWN, OWN_SLOTS, ParamLayout
from .observe import ModelSpec, RowParams, ShotData, StackedShots, drag_coefficient_at, model_positions
from .results import ChronoPrior

#: Central-difference steps for the Jacobian, per parameter kind (SI). The model is smooth in every
#: parameter (fixed integration grid), so the truncation error is ~h²; these steps keep round-off small.
JAC_STEP = {
    "x0_m": 1e-6,
    "y0_m": 1e-6,
    "speed_mps": 1e-4,
    "elevation_rad": 1e-6,
    "lift_coefficient": 1e-6,
    "drag_coefficient": 1e-6,
    "drag_scale": 1e-6,
    "spin_decay_rate_per_s": 1e-4,
    "spin_torque_slope": 1e-5,
}


class FitProblem:
    """The residual of a (joint) fit as a function of the free parameters, with a batched Jacobian.

    ``residual(x)`` and ``jacobian(x)`` take the vector of free parameters (order :attr:`free_names`).
    The Jacobian uses central differences, all perturbations integrated in one vectorised call: each shot's
    residual depends only on its own five parameters and the shared ones, so perturbing slot s of every shot
    at once gives all of slot s's columns.

    Notes
    -----
    World frame: x downrange, y up, metres.
    """

    def __init__(
        self,
        shots: Sequence[ShotData],
        spec: ModelSpec,
        theta_full: np.ndarray,
        free: np.ndarray,
        lower: np.ndarray,
        upper: np.ndarray,
        chrono: ChronoPrior | None = None,
    ) -> None:
        self.shots = tuple(shots)
        self.spec = spec
        self.n = len(self.shots)
        self.theta_full = np.asarray(theta_full, dtype=float).copy()
        self.free = np.asarray(free, dtype=bool)
        self.lower_full = np.asarray(lower, dtype=float)
        self.upper_full = np.asarray(upper, dtype=float)
        self.layout = ParamLayout.for_spec(spec, self.n)
        self.names = self.layout.names
        self.chrono = chrono
        self.stack = StackedShots.from_shots(self.shots)
        mask = self.stack.mask
        # shot index of every residual entry: points (x, y interleaved), then the priors
        pts_shot = np.repeat(np.nonzero(mask)[0], 2)
        self.n_point_entries = pts_shot.size
        prior_shot = np.arange(self.n) if chrono is not None else np.zeros(0, dtype=int)
        self.entry_shot = np.concatenate([pts_shot, prior_shot])
        self.n_entries = self.entry_shot.size
        self.free_names = tuple(n for n, f in zip(self.names, self.free, strict=True) if f)
        self._col = {name: i for i, name in enumerate(self.free_names)}
        self._cache_key: bytes | None = None
        self._cache: tuple[np.ndarray, np.ndarray] | None = None
        if chrono is not None and chrono.muzzle_x_m is not None:
            for s in self.shots:
                if chrono.muzzle_x_m > s.x_m[0]:
                    raise ValueError(
                        f"muzzle position {chrono.muzzle_x_m:g} m lies downrange of the first tracked point "
                        f"of shot {s.label!r} ({s.x_m[0]:.4g} m)"
                    )

    # ------------------------------------------------------------------ vectors
    @property
    def x0(self) -> np.ndarray:
        return self.theta_full[self.free].copy()

    @property
    def lower(self) -> np.ndarray:
        return self.lower_full[self.free]

    @property
    def upper(self) -> np.ndarray:
        return self.upper_full[self.free]

    def full(self, x: np.ndarray) -> np.ndarray:
        theta = self.theta_full.copy()
        theta[self.free] = x
        return theta

    # ------------------------------------------------------------------ model
    def _prior(self, rows: RowParams) -> np.ndarray:
        c = self.chrono
        if c is None:
            raise ValueError("internal: chronograph residual requested without a prior")
        speed = np.asarray(rows.speed_mps, dtype=float)
        if c.muzzle_x_m is None:
            v_mz = speed
        else:
            cd = drag_coefficient_at(self.spec, rows.drag_param, speed)
            gap = (np.asarray(rows.x0_m) - c.muzzle_x_m) / np.cos(rows.elevation_rad)
            v_mz = speed * np.exp(self.spec.q_per_m * cd * gap)
        return (v_mz - c.speed_mps) / c.sigma_mps

    def _entries(self, pos: np.ndarray, rows: RowParams, shot_of_row: np.ndarray) -> np.ndarray:
        """Residual entries (blocks of n rows each) → (n_blocks, n_entries)."""
        res = self.stack.residuals(pos, shot_of_row)
        n_blocks = pos.shape[0] // self.n
        res = res.reshape(n_blocks, self.n, *res.shape[1:])
        pts = res[:, self.stack.mask, :].reshape(n_blocks, -1)
        if self.chrono is None:
            return pts
        pri = self._prior(rows).reshape(n_blocks, self.n)
        return np.concatenate([pts, pri], axis=1)

    def _evaluate(self, x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        key = np.asarray(x, dtype=float).tobytes()
        if key == self._cache_key and self._cache is not None:
            return self._cache
        theta = self.full(np.asarray(x, dtype=float))
        lay = self.layout
        base = lay.rows(theta)
        fields = (
            "x0_m",
            "y0_m",
            "speed_mps",
            "elevation_rad",
            "lift_coefficient",
            "drag_param",
            "decay_param",
        )
        slot_names = lay.slot_names
        slot_free = [True] * N_OWN + [bool(self.free[lay.drag]), bool(self.free[lay.decay])]
        decay_slot = N_OWN + 1
        perts: list[tuple[int, float]] = []
        for s, (name, is_free) in enumerate(zip(slot_names, slot_free, strict=True)):
            if is_free:
                h = JAC_STEP[name]
                h_minus = h
                if s == decay_slot:  # decay parameters are >= 0: shorten the lower arm at the bound
                    h_minus = min(h, float(theta[lay.decay]))
                perts += [(s, +h), (s, -h_minus)]
        blocks = [dict((f, np.asarray(getattr(base, f), dtype=float)) for f in fields)]
        for s, h in perts:
            b = {f: v.copy() for f, v in blocks[0].items()}
            b[fields[s]] = b[fields[s]] + h
            blocks.append(b)
        rows = RowParams(**{f: np.concatenate([b[f] for b in blocks]) for f in fields})
        n_blocks = len(blocks)
        shot_of_row = np.tile(np.arange(self.n), n_blocks)
        t = np.tile(self.stack.t_rel_s, (n_blocks, 1))
        pos = model_positions(self.spec, rows, t)
        ent = self._entries(pos, rows, shot_of_row)
        r = ent[0]
        jac = np.zeros((self.n_entries, len(self.free_names)))
        rows_idx = np.arange(self.n_entries)
        for j in range(len(perts) // 2):
            s, h = perts[2 * j]
            width = h - perts[2 * j + 1][1]
            diff = (ent[1 + 2 * j] - ent[2 + 2 * j]) / width
            if s < N_OWN:
                cols = np.array([self._col[f"s{i}_{OWN_SLOTS[s]}"] for i in range(self.n)])
                jac[rows_idx, cols[self.entry_shot]] = diff
            else:
                jac[:, self._col[slot_names[s]]] = diff
        self._cache_key, self._cache = key, (r, jac)
        return r, jac

    def residual(self, x: np.ndarray) -> np.ndarray:
        """Residual vector (model − data)/σ (points x, y interleaved, shot by shot; then priors)."""
        return self._evaluate(x)[0]

    def jacobian(self, x: np.ndarray) -> np.ndarray:
        """∂residual/∂x, shape (n_entries, n_free)."""
        return self._evaluate(x)[1]

    def positions(self, x: np.ndarray) -> np.ndarray:
        """Model positions (n, k, 2) of the shots at their (padded) times, m."""
        rows = self.layout.rows(self.full(x))
        return model_positions(self.spec, rows, self.stack.t_rel_s)

    def with_decay_fixed(self, x: np.ndarray, value: float) -> FitProblem:
        """The same problem at the free vector ``x`` with the decay parameter fixed at ``value``."""
        theta = self.full(x)
        theta[self.layout.decay] = value
        free = self.free.copy()
        free[self.layout.decay] = False
        return FitProblem(self.shots, self.spec, theta, free, self.lower_full, self.upper_full, self.chrono)

    def with_all_free(self, theta_full: np.ndarray) -> FitProblem:
        """The same problem from the full vector ``theta_full`` with every parameter free."""
        free = np.ones(self.layout.size, dtype=bool)
        return FitProblem(
            self.shots, self.spec, theta_full, free, self.lower_full, self.upper_full, self.chrono
        )


__all__ = ["JAC_STEP", "FitProblem"]
