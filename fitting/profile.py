"""BB profile: drag coefficient vs Reynolds number and lift vs spin ratio (or speed), for one BB type.

From shots of one BB type at different speeds:

- **drag**: the shots are binned by the Reynolds number at their first tracked point; each bin is fitted
  jointly (shared C_D, the spin decay fixed at the all-shot fit's value) → C_D ± σ per bin, with the bin's
  Reynolds-number span and mean;
- **lift**: every shot's C_L at its first point, from the all-shot joint fit, against its Reynolds number
  and speed; against the spin ratio S = rω/u only where the spin is known (measured ``spin_radps`` per
  shot). A trajectory fixes the lift force, not the spin (under the linear law only k·ω₀), so without a
  measured spin the profile says so instead of inventing S.

The BB's mass and diameter tolerance (:class:`fitting.bb.BBTolerance`) widens every C_D and C_L error bar
by its own share, added in quadrature (:func:`fitting.bbshare.with_bb_share`): at a fixed measured path
C_D and C_L scale as m/d². Each estimate keeps that share as ``stderr_bb``.

Files: ``profile.json`` (schema ``hopscope.profile/1``) and a CSV with the same rows (``kind`` = drag or
lift) and ``#`` header lines (schema, BB, air, notes, warnings), both loadable by a trajectory simulator.

Notes
-----
Reynolds number Re = ρ u d / μ at the shot's first tracked point (air-relative speed).
"""

from __future__ import annotations

import io
import json
import math
import os
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from hopscope.shared.parse import finite_or_none, json_finite

from .air import Air
from .bb import BB, BBTolerance
from .bbshare import with_bb_share
from .estimate import fit_shots
from .laws import reynolds_number
from .observe import ShotData

SCHEMA = "hopscope.profile/1"
DEFAULT_BINS = 4
CSV_COLUMNS = (
    "kind", "label", "re_lo", "re_hi", "re", "speed_mps", "spin_ratio", "coefficient", "stderr", "stderr_bb",
    "n_shots", "spin_source",
)  # fmt: skip


@dataclass(frozen=True)
class DragBin:
    """C_D of one Reynolds-number bin (SI; Re dimensionless). ``cd_stderr`` includes the BB tolerance's
    share ``cd_stderr_bb`` (None: no tolerance applied)."""

    re_lo: float
    re_hi: float
    re: float
    speed_mps: float
    cd: float | None
    cd_stderr: float | None
    n_shots: int
    converged: bool
    cd_stderr_bb: float | None = None


@dataclass(frozen=True)
class LiftPoint:
    """C_L at one shot's first tracked point.

    ``spin_ratio`` is None unless the spin is known: ``spin_source`` says how — ``"measured"`` (a measured
    spin was given), ``"assumed k=…"`` (S = C_L/k under the linear law for an assumed k: model-based) or
    ``""`` (unknown). ``cl_stderr`` includes the BB tolerance's share ``cl_stderr_bb`` (None: none applied).
    """

    label: str
    re: float
    speed_mps: float
    spin_ratio: float | None
    cl: float | None
    cl_stderr: float | None
    spin_source: str = ""
    cl_stderr_bb: float | None = None


@dataclass(frozen=True)
class BBProfile:
    """A BB type's local aerodynamic profile (SI).

    Attributes
    ----------
    label : name of the BB type. mass_kg, diameter_m : the BB. density_kgm3, viscosity_pas : the air.
    drag : C_D per Reynolds-number bin. lift : C_L per shot.
    spin_decay_time_s, spin_decay_time_stderr_s : τ from the all-shot fit (None where undetermined).
    notes, warnings : one line each.
    tolerance : the BB's mass and diameter tolerance in the C_D and C_L error bars (None: not applied).
    """

    label: str
    mass_kg: float
    diameter_m: float
    density_kgm3: float
    viscosity_pas: float
    drag: tuple[DragBin, ...]
    lift: tuple[LiftPoint, ...]
    spin_decay_time_s: float | None
    spin_decay_time_stderr_s: float | None
    notes: tuple[str, ...]
    warnings: tuple[str, ...]
    tolerance: BBTolerance | None = None


def _edges(re: np.ndarray, n_bins: int) -> np.ndarray:
    n_bins = max(1, min(n_bins, re.size))
    q = np.quantile(re, np.linspace(0, 1, n_bins + 1))
    q[0] *= 1 - 1e-9
    q[-1] *= 1 + 1e-9
    return np.unique(q)


def build_profile(
    shots: Sequence[ShotData],
    *,
    bb: BB,
    air: Air,
    label: str = "",
    re_edges: Sequence[float] | None = None,
    n_bins: int = DEFAULT_BINS,
    spin_radps: Sequence[float | None] | None = None,
    assumed_lift_k: float | None = None,
    lift: str = "linear",
    tolerance: BBTolerance | None = None,
) -> BBProfile:
    """Build a BB profile from shots of one BB type (see the module docstring).

    Parameters
    ----------
    shots : tracked shots of one BB type, at different speeds.
    bb, air : the BB and the air.
    label : name of the BB type (for the files).
    re_edges : Reynolds-number bin edges (ascending); default ``n_bins`` bins with equal shot counts.
    n_bins : number of bins when ``re_edges`` is not given.
    spin_radps : measured spin at each shot's first tracked point, rad/s (None entries: not measured).
    assumed_lift_k : for shots without a measured spin, give S = C_L/k under the linear law for this
        assumed k (model-based, marked so in ``spin_source``); None: leave S unknown.
    lift : lift law for the fits.
    tolerance : the BB's mass and diameter standard uncertainties (SI); default
        :meth:`fitting.bb.BBTolerance.default_for`. Its share, |C|·√((σ_m/m)² + (2σ_d/d)²), is added in
        quadrature to every C_D and C_L (:func:`fitting.bbshare.with_bb_share`).
    """
    shots = tuple(shots)
    if len(shots) < 2:
        raise ValueError("shots: a profile needs at least two shots")
    if assumed_lift_k is not None:
        if lift != "linear":
            raise ValueError("assumed_lift_k: only meaningful with the linear lift law")
        if not (math.isfinite(assumed_lift_k) and assumed_lift_k > 0):
            raise ValueError(f"assumed_lift_k must be positive, got {assumed_lift_k!r}")
    if spin_radps is not None and len(spin_radps) != len(shots):
        raise ValueError(f"spin_radps: expected {len(shots)} entries (one per shot), got {len(spin_radps)}")
    tol = BBTolerance.default_for(bb) if tolerance is None else tolerance
    rel = tol.aero_rel(bb)
    allfit = fit_shots(shots, bb=bb, air=air, lift=lift)
    warnings = [f"all shots: {w}" for w in allfit.warnings]
    if not allfit.converged:
        warnings.append(f"all-shot fit did not converge: {allfit.reason}")
    speeds = np.array([s.speed_mps.value for s in allfit.shots], dtype=float)
    re = np.asarray(reynolds_number(speeds, bb.diameter_m, air.density_kgm3, air.viscosity_pas), dtype=float)
    if re_edges is None:
        edges = _edges(re, n_bins)
    else:
        edges = np.asarray(re_edges, dtype=float)
        if edges.ndim != 1 or edges.size < 2 or np.any(np.diff(edges) <= 0) or not np.all(np.isfinite(edges)):
            raise ValueError("re_edges: expected at least two finite, strictly ascending Reynolds numbers")
    decay_value = float(allfit.parameter_values[allfit.layout.decay])
    bins = []
    for lo, hi in zip(edges[:-1], edges[1:], strict=True):
        members = [i for i in range(len(shots)) if lo <= re[i] < hi or (hi == edges[-1] and re[i] == hi)]
        if not members:
            continue
        f = fit_shots([shots[i] for i in members], bb=bb, air=air, lift=lift, decay_fixed=decay_value)
        if not f.converged:
            warnings.append(f"Re {lo:.4g}..{hi:.4g}: fit did not converge: {f.reason}")
        cd = with_bb_share(f.drag_coefficient, rel)
        bins.append(
            DragBin(
                re_lo=float(lo),
                re_hi=float(hi),
                re=float(np.mean(re[members])),
                speed_mps=float(np.mean(speeds[members])),
                cd=cd.value,
                cd_stderr=cd.stderr,
                n_shots=len(members),
                converged=f.converged,
                cd_stderr_bb=cd.stderr_bb,
            )
        )
    lift_pts = []
    measured = 0
    for i, s in enumerate(allfit.shots):
        w = None if spin_radps is None else spin_radps[i]
        ratio = None
        source = ""
        if w is not None:
            if not math.isfinite(w):
                raise ValueError(f"spin_radps[{i}]: expected a finite spin, got {w!r}")
            ratio = bb.radius_m * float(w) / speeds[i]
            source = "measured"
            measured += 1
        elif assumed_lift_k is not None and s.lift_coefficient.value is not None:
            ratio = s.lift_coefficient.value / assumed_lift_k
            source = f"assumed k={assumed_lift_k:g}"
        cl = with_bb_share(s.lift_coefficient, rel)
        lift_pts.append(
            LiftPoint(
                s.label, float(re[i]), float(speeds[i]), ratio, cl.value, cl.stderr, source, cl.stderr_bb
            )
        )
    notes = [
        "drag: C_D per Reynolds-number bin (Re at the first tracked point), each bin fitted jointly",
        "lift: C_L at each shot's first tracked point from the all-shot joint fit",
        f"BB tolerance ({tol.origin}): mass ± {tol.mass_sigma_kg:.3g} kg, diameter ± {tol.diameter_sigma_m:.3g} m "
        f"(1σ), {100 * rel:.3g} % of C_D and C_L added in quadrature to their error bars (stderr_bb)",
    ]
    if measured < len(shots) and assumed_lift_k is not None:
        notes.append(
            f"spin not measured for {len(shots) - measured} shots: their S = C_L/k for an assumed "
            f"k = {assumed_lift_k:g} (model-based, not a measurement of spin)"
        )
    elif measured < len(shots):
        notes.append(
            "spin not measured for "
            + (f"{len(shots) - measured} shots" if measured else "any shot")
            + ": their C_L is given against Re and speed only (a trajectory fixes the lift force, not the "
            "spin; under the linear law S = C_L/k for an assumed k)"
        )
    tau = allfit.spin_decay_time_s
    return BBProfile(
        label=label,
        mass_kg=bb.mass_kg,
        diameter_m=bb.diameter_m,
        density_kgm3=air.density_kgm3,
        viscosity_pas=air.viscosity_pas,
        drag=tuple(bins),
        lift=tuple(lift_pts),
        spin_decay_time_s=tau.value,
        spin_decay_time_stderr_s=tau.stderr,
        notes=tuple(notes),
        warnings=tuple(warnings),
        tolerance=tol,
    )


# ---------------------------------------------------------------------------------------------- files


_num = finite_or_none


def _tolerance_dict(tol: BBTolerance | None) -> dict[str, Any] | None:
    if tol is None:
        return None
    return {
        "mass_sigma_kg": tol.mass_sigma_kg,
        "diameter_sigma_m": tol.diameter_sigma_m,
        "origin": tol.origin,
    }


def profile_to_dict(p: BBProfile) -> dict[str, Any]:
    """``profile.json`` as a dict: ``bb.tolerance`` ``{mass_sigma_kg, diameter_sigma_m, origin}`` (or null),
    and every ``drag_coefficient``/``lift_coefficient`` ``{value, stderr, stderr_bb}`` (``stderr`` includes
    the BB's share ``stderr_bb``)."""
    return {
        "schema": SCHEMA,
        "label": p.label,
        "bb": {"mass_kg": p.mass_kg, "diameter_m": p.diameter_m, "tolerance": _tolerance_dict(p.tolerance)},
        "air": {"density_kgm3": p.density_kgm3, "viscosity_pas": p.viscosity_pas},
        "drag": [
            {
                "re_lo": b.re_lo,
                "re_hi": b.re_hi,
                "re": b.re,
                "speed_mps": b.speed_mps,
                "drag_coefficient": {
                    "value": _num(b.cd),
                    "stderr": _num(b.cd_stderr),
                    "stderr_bb": _num(b.cd_stderr_bb),
                },
                "n_shots": b.n_shots,
                "converged": b.converged,
            }
            for b in p.drag
        ],
        "lift": [
            {
                "label": lp.label,
                "re": lp.re,
                "speed_mps": lp.speed_mps,
                "spin_ratio": _num(lp.spin_ratio),
                "spin_source": lp.spin_source,
                "lift_coefficient": {
                    "value": _num(lp.cl),
                    "stderr": _num(lp.cl_stderr),
                    "stderr_bb": _num(lp.cl_stderr_bb),
                },
            }
            for lp in p.lift
        ],
        "spin_decay_time_s": {"value": _num(p.spin_decay_time_s), "stderr": _num(p.spin_decay_time_stderr_s)},
        "notes": list(p.notes),
        "warnings": list(p.warnings),
    }


def profile_to_json(p: BBProfile) -> str:
    """``profile.json`` text (schema ``hopscope.profile/1``)."""
    return json.dumps(profile_to_dict(p), indent=2, ensure_ascii=False, allow_nan=False) + "\n"


def _cell(x: Any) -> str:
    if x is None:
        return ""
    if isinstance(x, float):
        return repr(x)
    text = str(x)
    if any(c in text for c in ',"\n'):
        text = '"' + text.replace('"', '""') + '"'
    return text


def profile_to_csv(p: BBProfile) -> str:
    """Profile CSV text: ``#`` header lines, then one row per drag bin and per lift point."""
    out = io.StringIO()
    out.write(f"# schema: {SCHEMA}\n")
    out.write(f"# label: {p.label}\n")
    out.write(f"# bb: mass_kg={p.mass_kg!r} diameter_m={p.diameter_m!r}\n")
    out.write(f"# air: density_kgm3={p.density_kgm3!r} viscosity_pas={p.viscosity_pas!r}\n")
    if p.tolerance is not None:
        t = p.tolerance
        out.write(
            f"# bb_tolerance: mass_sigma_kg={t.mass_sigma_kg!r} diameter_sigma_m={t.diameter_sigma_m!r} "
            f"origin={t.origin}\n"
        )
    if p.spin_decay_time_s is not None:
        out.write(f"# spin_decay_time_s: {p.spin_decay_time_s!r} +- {p.spin_decay_time_stderr_s!r}\n")
    for n in p.notes:
        out.write(f"# note: {n}\n")
    for w in p.warnings:
        out.write(f"# warning: {w}\n")
    out.write(",".join(CSV_COLUMNS) + "\n")
    for b in p.drag:
        row = [
            "drag",
            "",
            b.re_lo,
            b.re_hi,
            b.re,
            b.speed_mps,
            None,
            _num(b.cd),
            _num(b.cd_stderr),
            _num(b.cd_stderr_bb),
            b.n_shots,
            "",
        ]
        out.write(",".join(_cell(v) for v in row) + "\n")
    for lp in p.lift:
        row = ["lift", lp.label, None, None, lp.re, lp.speed_mps, _num(lp.spin_ratio), _num(lp.cl),
               _num(lp.cl_stderr), _num(lp.cl_stderr_bb), 1, lp.spin_source]  # fmt: skip
        out.write(",".join(_cell(v) for v in row) + "\n")
    return out.getvalue()


def profile_from_json(text: str, source: str = "<profile>") -> BBProfile:
    """Parse and validate ``profile.json`` text; errors name ``source`` and the key."""
    try:
        d = json.loads(text)
    except json.JSONDecodeError as exc:
        raise ValueError(f"{source}: not valid JSON (line {exc.lineno}: {exc.msg})") from None
    if not isinstance(d, dict) or d.get("schema") != SCHEMA:
        got = d.get("schema") if isinstance(d, dict) else None
        raise ValueError(f"{source}: key schema: expected {SCHEMA!r}, got {got!r}")

    def num(obj, key, where, null=False):
        if not isinstance(obj, dict) or key not in obj:
            raise ValueError(f"{source}: key {where}.{key}: missing")
        v = obj[key]
        if v is None and null:
            return None
        return json_finite(v, f"{source}: key {where}.{key}")

    def est(obj, key, where):
        if not isinstance(obj, dict) or not isinstance(obj.get(key), dict):
            raise ValueError(f"{source}: key {where}.{key}: expected an estimate {{value, stderr}}")
        e = obj[key]
        return num(e, "value", f"{where}.{key}", True), num(e, "stderr", f"{where}.{key}", True)

    def bb_part(obj, key, where):  # the BB tolerance's share (files written before it have none)
        e = obj[key]
        return num(e, "stderr_bb", f"{where}.{key}", True) if "stderr_bb" in e else None

    for key in ("drag", "lift", "notes", "warnings"):
        if not isinstance(d.get(key), list):
            raise ValueError(f"{source}: key {key}: expected a list")
    bins = []
    for i, b in enumerate(d["drag"]):
        w = f"drag[{i}]"
        cd, cds = est(b, "drag_coefficient", w)
        bins.append(DragBin(num(b, "re_lo", w), num(b, "re_hi", w), num(b, "re", w), num(b, "speed_mps", w),
                            cd, cds, int(num(b, "n_shots", w)), bool(b.get("converged", True)),
                            bb_part(b, "drag_coefficient", w)))  # fmt: skip
    pts = []
    for i, lp in enumerate(d["lift"]):
        w = f"lift[{i}]"
        cl, cls = est(lp, "lift_coefficient", w)
        pts.append(LiftPoint(str(lp.get("label", "")), num(lp, "re", w), num(lp, "speed_mps", w),
                             num(lp, "spin_ratio", w, True), cl, cls, str(lp.get("spin_source", "")),
                             bb_part(lp, "lift_coefficient", w)))  # fmt: skip
    tau, taus = est(d, "spin_decay_time_s", "(top)")
    tol_obj = d.get("bb", {}).get("tolerance") if isinstance(d.get("bb"), dict) else None
    tolerance = None
    if tol_obj is not None:
        m_sig = num(tol_obj, "mass_sigma_kg", "bb.tolerance")
        d_sig = num(tol_obj, "diameter_sigma_m", "bb.tolerance")
        try:
            tolerance = BBTolerance(m_sig, d_sig, str(tol_obj.get("origin", "")))
        except ValueError as exc:
            raise ValueError(f"{source}: key bb.tolerance: {exc}") from None
    return BBProfile(
        label=str(d.get("label", "")),
        mass_kg=num(d.get("bb"), "mass_kg", "bb"),
        diameter_m=num(d.get("bb"), "diameter_m", "bb"),
        density_kgm3=num(d.get("air"), "density_kgm3", "air"),
        viscosity_pas=num(d.get("air"), "viscosity_pas", "air"),
        drag=tuple(bins),
        lift=tuple(pts),
        spin_decay_time_s=tau,
        spin_decay_time_stderr_s=taus,
        notes=tuple(str(n) for n in d["notes"]),
        warnings=tuple(str(w) for w in d["warnings"]),
        tolerance=tolerance,
    )


def read_profile(path: str | os.PathLike[str]) -> BBProfile:
    """Read and validate a ``profile.json`` file."""
    p = Path(path)
    return profile_from_json(p.read_text(encoding="utf-8"), str(p))


__all__ = [
    "SCHEMA",
    "BBProfile",
    "DragBin",
    "LiftPoint",
    "build_profile",
    "profile_from_json",
    "profile_to_csv",
    "profile_to_json",
    "read_profile",
]
