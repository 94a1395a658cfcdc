"""The fit file (``fit.json``, schema ``hopscope.fit/1``): a fit's inputs, estimates and diagnostics.

Layout (JSON object, SI units; every estimate is an object ``{"value", "stderr", "stderr_noise",
"stderr_calibration", "calibration_share", "stderr_bb", "bb_share"}`` whose ``value``/``stderr`` are null
where the data cannot determine the quantity; the ``bb`` parts are the BB tolerance's, null without it)::

    schema        "hopscope.fit/1"
    converged     true/false;  reason: why not ("" when converged)
    warnings      [one line each]
    inputs        {"tracks": [{"path", "rig_digest", "shots": [labels]}], "chronograph": null or
                   {"speed_mps", "sigma_mps", "muzzle_x_m"}}
    bb            {"mass_kg", "diameter_m"; with the BB tolerance in the error bars also "mass_sigma_kg",
                   "diameter_sigma_m", "tolerance_origin"}
    air           {"temperature_k", "pressure_pa", "relative_humidity", "density_kgm3", "viscosity_pas"}
    model         {"drag", "lift", "decay", "lift_k", "sphere_correlation", "gravity_mps2", "wind_mps",
                   "loss" (of the final fit), "loss_requested", "f_scale_sigma", "method", "decay_fixed_value", "spin_note", "residuals"}
    aero          {"drag_coefficient", "drag_scale" (sphere law, else null), "spin_decay_time_s",
                   "spin_decay_parameter" (1/τ in 1/s or torque slope; null when fixed),
                   "spin_decay_parameter_name", "spin_decay" (λ, τ and their source: fitting.decay_source)}
    shots[i]      {"label", "rig_digest", "n_points", "n_outliers",
                   "initial": {"t_s" (a number: the first tracked time), "x_m", "y_m", "speed_mps",
                               "elevation_deg" (degrees, the one non-SI field)},
                   "lift_coefficient" (C_L at the first point), "drag_coefficient" (C_D there),
                   "spin_radps_model" (an assumption from the saturating law's published C_L(S); null
                   under the linear law), "residual_rms_m", "residual_rms_sigma", "chi2",
                   "residuals": {"t_s": [...], "dx_m": [...], "dy_m": [...], "outlier": [...]}}
    statistics    {"n_points", "n_residuals", "n_parameters", "dof", "chi2", "reduced_chi2",
                   "stderr_scale", "aic", "bic", "residual_rms_m", "residual_rms_sigma", "n_outliers",
                   "robust_chi2", "n_calibrations", "serial_correlation": {"model", "x", "y"}}
                   (χ², dof, RMS over inliers; AIC = robust_chi2 + 2k, BIC = robust_chi2 + k ln n over
                   all n residuals; serial_correlation: the position errors' correlation between
                   neighbouring frames per axis, ρ^k at k frames, which widens the error bars:
                   fitting.serial)
    parameters    {"names", "values", "free", "covariance" (free × free), "correlation" (free × free),
                   "covariance_calibration" (free × free)}

A shot of a marked-BB track also has ``spin_measured`` (its flicker's spin; :func:`fitting.spin.shot_spin_to_json`).

Muzzle state (``shots[i].muzzle``, ``group``) and ``energy_limit``: :func:`fitting.decisionfile.add_decisions`.
Residuals are observed − model. ``speed_mps`` is along the direction of flight; ``elevation_deg`` above
horizontal. Stage I/O serialises to text; the app writes the file atomically.
"""

from __future__ import annotations

import json
import os
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from hopscope.shared.parse import finite_or_none, is_finite_number, json_finite
from hopscope.shared.units import rad_to_deg

from .air import Air
from .bb import BB
from .decay_source import trajectory_decay_block
from .layout import ParamLayout, decay_param_name
from .observe import ModelSpec
from .results import ChronoPrior, Estimate, FittedModel, FlightFit
from .spin import check_spin_measured

SCHEMA = "hopscope.fit/1"

SPIN_NOTE_LINEAR = (
    "spin is not measured: a trajectory fixes the lift force, so under the linear law only k·ω₀ is "
    "identifiable (k = {k:g} is a convention), and no spin figure is given (spin_radps_model is null); "
    "fit with the saturating law for a spin derived from its published C_L(S) relation"
)
SPIN_NOTE_SATURATING = (
    "spin is not measured: spin_radps_model is an assumption, derived by inverting the saturating lift "
    "relation C_L = 1.12·S/(0.583 + 2.333·S) for spheres (published form, see fitting.laws.SaturatingLift); "
    "a marked BB measures spin directly"
)


_num = finite_or_none


def estimate_to_dict(e: Estimate | None, scale: float = 1.0) -> dict[str, float | None] | None:
    """An estimate as ``{"value", "stderr", "stderr_noise", "stderr_calibration", "calibration_share"}``.

    ``scale`` multiplies value and errors (unit conversion at the edge, e.g. rad → deg).
    """
    if e is None:
        return None

    def sc(v: float | None) -> float | None:
        return None if v is None else _num(v * scale)

    return {
        "value": sc(e.value),
        "stderr": sc(e.stderr),
        "stderr_noise": sc(e.stderr_noise),
        "stderr_calibration": sc(e.stderr_calibration),
        "calibration_share": _num(e.calibration_share),
        "stderr_bb": sc(e.stderr_bb),
        "bb_share": _num(e.bb_share),
    }


def _matrix(a: np.ndarray) -> list[list[float | None]]:
    return [[_num(v) for v in row] for row in np.asarray(a, dtype=float)]


def fit_to_dict(result: FlightFit, *, inputs: Sequence[Mapping[str, Any]] = ()) -> dict[str, Any]:
    """The fit as a JSON-ready dict (see the module docstring for the layout).

    Parameters
    ----------
    result : the fit.
    inputs : one entry per track file, ``{"path": str, "rig_digest": str | None, "shots": [labels]}``.
    """
    spec = result.spec
    air = spec.air
    note = SPIN_NOTE_LINEAR.format(k=spec.lift_k) if spec.lift == "linear" else SPIN_NOTE_SATURATING
    st = result.statistics
    shots = []
    for s in result.shots:
        shots.append(
            {
                "label": s.label,
                "rig_digest": s.rig_digest,
                "n_points": s.n_points,
                "n_outliers": int(np.count_nonzero(s.outlier)),
                "initial": {
                    "t_s": float(s.t0_s),
                    "x_m": estimate_to_dict(s.x0_m),
                    "y_m": estimate_to_dict(s.y0_m),
                    "speed_mps": estimate_to_dict(s.speed_mps),
                    "elevation_deg": estimate_to_dict(s.elevation_rad, rad_to_deg(1.0)),
                },
                "lift_coefficient": estimate_to_dict(s.lift_coefficient),
                "drag_coefficient": estimate_to_dict(s.drag_coefficient),
                "spin_radps_model": estimate_to_dict(s.spin_radps_model),
                "residual_rms_m": _num(s.residual_rms_m),
                "residual_rms_sigma": _num(s.residual_rms_sigma),
                "chi2": _num(s.chi2),
                "residuals": {
                    "t_s": [float(v) for v in s.residual_t_s],
                    "dx_m": [_num(v) for v in s.residual_dx_m],
                    "dy_m": [_num(v) for v in s.residual_dy_m],
                    "outlier": [bool(v) for v in s.outlier],
                },
            }
        )
    chrono = None
    if result.chrono is not None:
        c = result.chrono
        chrono = {"speed_mps": c.speed_mps, "sigma_mps": c.sigma_mps, "muzzle_x_m": c.muzzle_x_m}
    return {
        "schema": SCHEMA,
        "converged": bool(result.converged),
        "reason": result.reason,
        "warnings": list(result.warnings),
        "inputs": {"tracks": [dict(i) for i in inputs], "chronograph": chrono},
        "bb": _bb_dict(result),
        "air": {
            "temperature_k": air.temperature_k,
            "pressure_pa": air.pressure_pa,
            "relative_humidity": air.relative_humidity,
            "density_kgm3": air.density_kgm3,
            "viscosity_pas": air.viscosity_pas,
        },
        "model": {
            "drag": spec.drag,
            "lift": spec.lift,
            "decay": spec.decay,
            "lift_k": spec.lift_k,
            "sphere_correlation": spec.sphere_correlation,
            "gravity_mps2": spec.gravity_mps2,
            "wind_mps": list(spec.wind_mps),
            "loss": result.loss,
            "loss_requested": result.loss_requested,
            "f_scale_sigma": result.f_scale_sigma,
            "method": result.method,
            "decay_fixed_value": _num(result.decay_fixed_value),
            "spin_note": note,
            "residuals": "observed minus model, m",
        },
        "aero": {
            "drag_coefficient": estimate_to_dict(result.drag_coefficient),
            "drag_scale": estimate_to_dict(result.drag_scale),
            "spin_decay_time_s": estimate_to_dict(result.spin_decay_time_s),
            "spin_decay_parameter": estimate_to_dict(result.spin_decay_parameter),
            "spin_decay_parameter_name": decay_param_name(spec),
            "spin_decay": trajectory_decay_block(result),
        },
        "shots": shots,
        "statistics": {
            "n_points": st.n_points,
            "n_residuals": st.n_residuals,
            "n_parameters": st.n_parameters,
            "dof": st.dof,
            "chi2": _num(st.chi2),
            "reduced_chi2": _num(st.reduced_chi2),
            "stderr_scale": _num(st.stderr_scale),
            "aic": _num(st.aic),
            "bic": _num(st.bic),
            "residual_rms_m": _num(st.residual_rms_m),
            "residual_rms_sigma": _num(st.residual_rms_sigma),
            "n_outliers": st.n_outliers,
            "robust_chi2": _num(st.robust_chi2),
            "n_calibrations": result.n_calibrations,
            "serial_correlation": {
                "model": "rho^k between points k frames apart",
                "x": _num(st.serial_correlation_x),
                "y": _num(st.serial_correlation_y),
            },
        },
        "parameters": {
            "names": list(result.parameter_names),
            "values": [float(v) for v in result.parameter_values],
            "free": [bool(v) for v in result.free],
            "covariance": _matrix(result.covariance),
            "correlation": _matrix(result.correlation),
            "covariance_calibration": _matrix(result.covariance_calibration),
        },
    }


def _bb_dict(result: FlightFit) -> dict[str, Any]:
    bb, tol = result.spec.bb, result.bb_tolerance
    out: dict[str, Any] = {"mass_kg": bb.mass_kg, "diameter_m": bb.diameter_m}
    if tol is not None:
        out.update(
            mass_sigma_kg=tol.mass_sigma_kg,
            diameter_sigma_m=tol.diameter_sigma_m,
            tolerance_origin=tol.origin,
        )
    return out


def fit_to_json(result: FlightFit, *, inputs: Sequence[Mapping[str, Any]] = ()) -> str:
    """The fit as ``fit.json`` text (schema ``hopscope.fit/1``; non-finite numbers become null)."""
    return (
        json.dumps(fit_to_dict(result, inputs=inputs), indent=2, ensure_ascii=False, allow_nan=False) + "\n"
    )


# ---------------------------------------------------------------------------------------------- reading


class _Reader:
    def __init__(self, source: str) -> None:
        self.source = source

    def fail(self, key: str, what: str) -> ValueError:
        return ValueError(f"{self.source}: key {key}: {what}")

    def get(self, obj: Mapping[str, Any], key: str, where: str) -> Any:
        path = f"{where}.{key}" if where else key
        if not isinstance(obj, Mapping):
            raise self.fail(where or "(top)", "expected an object")
        if key not in obj:
            raise self.fail(path, "missing")
        return obj[key]

    def number(self, obj, key, where, *, allow_null=False) -> float | None:
        v = self.get(obj, key, where)
        path = f"{where}.{key}" if where else key
        if v is None and allow_null:
            return None
        if not is_finite_number(v):
            raise self.fail(path, f"expected a finite number, got {v!r}")
        return float(v)

    def real(self, obj, key, where) -> float:
        """A required finite number."""
        return json_finite(self.get(obj, key, where), f"{self.source}: key {where}.{key}")

    def string(self, obj, key, where) -> str:
        v = self.get(obj, key, where)
        if not isinstance(v, str):
            raise self.fail(f"{where}.{key}" if where else key, f"expected a string, got {v!r}")
        return v

    def estimate(self, obj, key, where, *, allow_null_value=True) -> Estimate:
        e = self.get(obj, key, where)
        path = f"{where}.{key}"
        if not isinstance(e, Mapping):
            raise self.fail(path, "expected an estimate object {value, stderr}")
        value = self.number(e, "value", path, allow_null=allow_null_value)
        stderr = self.number(e, "stderr", path, allow_null=True)
        if stderr is not None and stderr < 0:
            raise self.fail(f"{path}.stderr", f"expected >= 0, got {stderr!r}")
        parts = [
            self.number(e, k, path, allow_null=True) if k in e else None
            for k in ("stderr_noise", "stderr_calibration", "stderr_bb")
        ]
        return Estimate(value, stderr, *parts)

    def vector(self, obj, key, where, n: int | None = None) -> np.ndarray:
        v = self.get(obj, key, where)
        path = f"{where}.{key}"
        if not isinstance(v, list) or (n is not None and len(v) != n):
            raise self.fail(path, f"expected a list of {n if n is not None else 'some'} numbers")
        for i, x in enumerate(v):
            if not is_finite_number(x):
                raise self.fail(f"{path}[{i}]", f"expected a finite number, got {x!r}")
        return np.array(v, dtype=float)

    def matrix(self, obj, key, where, n: int) -> np.ndarray:
        v = self.get(obj, key, where)
        path = f"{where}.{key}"
        if not isinstance(v, list) or len(v) != n:
            raise self.fail(path, f"expected a {n}×{n} matrix")
        for i, row in enumerate(v):
            if not isinstance(row, list) or len(row) != n:
                raise self.fail(f"{path}[{i}]", f"expected a row of {n} numbers")
            for j, x in enumerate(row):
                if not is_finite_number(x):
                    raise self.fail(f"{path}[{i}][{j}]", f"expected a finite number, got {x!r}")
        return np.array(v, dtype=float).reshape(n, n)


@dataclass(frozen=True, eq=False)
class FitFile:
    """A validated ``fit.json``: the raw dict plus typed accessors (SI).

    Attributes
    ----------
    data : the JSON object as read.
    source : the file name (for messages).
    spec : the model (BB, air, laws) rebuilt from the file.
    """

    data: Mapping[str, Any]
    source: str
    spec: ModelSpec

    @property
    def converged(self) -> bool:
        return bool(self.data["converged"])

    @property
    def reason(self) -> str:
        return str(self.data["reason"])

    @property
    def warnings(self) -> tuple[str, ...]:
        return tuple(self.data["warnings"])

    @property
    def n_shots(self) -> int:
        return len(self.data["shots"])

    @property
    def labels(self) -> tuple[str, ...]:
        return tuple(s["label"] for s in self.data["shots"])

    @property
    def bb(self) -> BB:
        return self.spec.bb

    @property
    def air(self) -> Air:
        return self.spec.air

    def shot(self, i: int) -> Mapping[str, Any]:
        return self.data["shots"][i]

    def value(self, *keys: str | int) -> float | None:
        """The ``value`` of the estimate at a key path, e.g. ``value("aero", "drag_coefficient")``."""
        obj: Any = self.data
        for k in keys:
            obj = obj[k]
        return None if obj is None else obj["value"]

    @property
    def drag_coefficient(self) -> float:
        return float(self.data["aero"]["drag_coefficient"]["value"])

    @property
    def spin_decay_time_s(self) -> float | None:
        """τ, s, or None where the data could not determine it."""
        v = self.data["aero"]["spin_decay_time_s"]["value"]
        return None if v is None else float(v)

    @property
    def chrono(self) -> ChronoPrior | None:
        c = self.data["inputs"]["chronograph"]
        return None if c is None else ChronoPrior(c["speed_mps"], c["sigma_mps"], c.get("muzzle_x_m"))

    def fitted_model(self) -> FittedModel:
        """Model, parameter vector and covariance, for prediction."""
        p = self.data["parameters"]
        names = tuple(p["names"])
        free = np.array(p["free"], dtype=bool)
        return FittedModel(
            self.spec,
            names,
            np.array(p["values"], dtype=float),
            free,
            np.array(p["covariance"], dtype=float).reshape(int(free.sum()), int(free.sum())),
            self.labels,
            np.array([s["initial"]["t_s"] for s in self.data["shots"]], dtype=float),
            np.array(p["covariance_calibration"], dtype=float).reshape(int(free.sum()), int(free.sum())),
        )


def fit_from_json(text: str, source: str = "<fit>") -> FitFile:
    """Parse and validate ``fit.json`` text; errors name ``source`` and the key."""
    try:
        data = json.loads(text)
    except json.JSONDecodeError as exc:
        raise ValueError(f"{source}: not valid JSON (line {exc.lineno}: {exc.msg})") from None
    rd = _Reader(source)
    if not isinstance(data, dict):
        raise ValueError(f"{source}: expected a JSON object")
    schema = data.get("schema")
    if schema != SCHEMA:
        raise rd.fail("schema", f"expected {SCHEMA!r}, got {schema!r}")
    conv = rd.get(data, "converged", "")
    if not isinstance(conv, bool):
        raise rd.fail("converged", f"expected true or false, got {conv!r}")
    rd.string(data, "reason", "")
    warns = rd.get(data, "warnings", "")
    if not isinstance(warns, list) or not all(isinstance(w, str) for w in warns):
        raise rd.fail("warnings", "expected a list of strings")
    bbd = rd.get(data, "bb", "")
    mass = rd.real(bbd, "mass_kg", "bb")
    diam = rd.real(bbd, "diameter_m", "bb")
    try:
        bb = BB(mass, diam)
    except ValueError as exc:
        raise rd.fail("bb", str(exc)) from None
    aird = rd.get(data, "air", "")
    airvals = [rd.real(aird, k, "air") for k in ("temperature_k", "pressure_pa", "relative_humidity")]
    rho = rd.real(aird, "density_kgm3", "air")
    mu = rd.real(aird, "viscosity_pas", "air")
    if not (rho > 0 and mu > 0):
        raise rd.fail("air", "density_kgm3 and viscosity_pas must be positive")
    air = Air(airvals[0], airvals[1], airvals[2], rho, mu)
    md = rd.get(data, "model", "")
    try:
        wind = rd.vector(md, "wind_mps", "model", 3)
        spec = ModelSpec(
            bb,
            air,
            rd.string(md, "drag", "model"),
            rd.string(md, "lift", "model"),
            rd.string(md, "decay", "model"),
            rd.real(md, "lift_k", "model"),
            rd.string(md, "sphere_correlation", "model"),
            rd.real(md, "gravity_mps2", "model"),
            (float(wind[0]), float(wind[1]), float(wind[2])),
        )
    except ValueError as exc:
        msg = str(exc)
        raise (exc if msg.startswith(source) else rd.fail("model", msg)) from None
    aero = rd.get(data, "aero", "")
    rd.estimate(aero, "drag_coefficient", "aero", allow_null_value=not conv)
    rd.estimate(aero, "spin_decay_time_s", "aero")
    shots = rd.get(data, "shots", "")
    if not isinstance(shots, list) or not shots:
        raise rd.fail("shots", "expected a non-empty list")
    for i, s in enumerate(shots):
        w = f"shots[{i}]"
        rd.string(s, "label", w)
        ini = rd.get(s, "initial", w)
        rd.number(ini, "t_s", f"{w}.initial")
        for k in ("x_m", "y_m", "speed_mps", "elevation_deg"):
            rd.estimate(ini, k, f"{w}.initial", allow_null_value=not conv)
        rd.estimate(s, "lift_coefficient", w, allow_null_value=not conv)
        if "spin_measured" in s:
            check_spin_measured(s["spin_measured"], f"{source}: {w}.spin_measured")
        res = rd.get(s, "residuals", w)
        n_t = len(rd.vector(res, "t_s", f"{w}.residuals"))
        for k in ("dx_m", "dy_m"):
            v = rd.get(res, k, f"{w}.residuals")
            if not isinstance(v, list) or len(v) != n_t:
                raise rd.fail(f"{w}.residuals.{k}", f"expected {n_t} values")
    p = rd.get(data, "parameters", "")
    names = rd.get(p, "names", "parameters")
    if not isinstance(names, list) or not all(isinstance(nm, str) for nm in names):
        raise rd.fail("parameters.names", "expected a list of strings")
    expected = ParamLayout(len(shots)).size
    if len(names) != expected:
        raise rd.fail(
            "parameters.names", f"expected {expected} names for {len(shots)} shots, got {len(names)}"
        )
    rd.vector(p, "values", "parameters", expected)
    free = rd.get(p, "free", "parameters")
    if not isinstance(free, list) or len(free) != expected or not all(isinstance(f, bool) for f in free):
        raise rd.fail("parameters.free", f"expected a list of {expected} booleans")
    n_free = sum(free)
    for key in ("covariance", "covariance_calibration"):
        if conv:
            rd.matrix(p, key, "parameters", n_free)
        else:
            cov = rd.get(p, key, "parameters")
            if not isinstance(cov, list) or len(cov) != n_free:
                raise rd.fail(f"parameters.{key}", f"expected a {n_free}×{n_free} matrix")
    return FitFile(data, source, spec)


def read_fit(path: str | os.PathLike[str]) -> FitFile:
    """Read and validate a ``fit.json`` file (OSError if unreadable, ValueError naming file and key)."""
    p = Path(path)
    text = p.read_text(encoding="utf-8")
    return fit_from_json(text, str(p))


__all__ = ["SCHEMA", "FitFile", "estimate_to_dict", "fit_from_json", "fit_to_dict", "fit_to_json", "read_fit"]
