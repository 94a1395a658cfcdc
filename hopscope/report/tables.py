"""The report's tables and key-figure cards, from the fit file (and the rig and tracks), in user units.

Presenters only: values come from the fit file and the stages (:mod:`fitting.verdict` for the hop
verdict); units are converted here for display.
"""

from __future__ import annotations

import math
from pathlib import Path
from typing import TYPE_CHECKING

from hopscope.fitting.fitfile import FitFile
from hopscope.fitting.verdict import judge_hop, lift_to_weight
from hopscope.shared.units import kg_to_grams, mps_to_fps, radps_to_rpm, s_to_ms

from ..summaries import (
    loss_text,
    serial_text,
    spin_candidates_text,
    spin_choice_text,
    spin_decay_text,
    spin_rate_text,
)

if TYPE_CHECKING:
    from .build import ReportInputs


def _pm(value: float | None, stderr: float | None, fmt: str = ".4g", scale: float = 1.0) -> tuple[str, str]:
    if value is None:
        return "not determined", ""
    v = f"{value * scale:{fmt}}"
    e = "" if stderr is None else f"{stderr * scale:.2g}"
    return v, e


def _est(obj) -> tuple[float | None, float | None]:
    if obj is None:
        return None, None
    return obj.get("value"), obj.get("stderr")


def _share(obj) -> str:
    share = None if obj is None else obj.get("calibration_share")
    return "" if not share else f"calibration {100 * share:.0f} % of variance"


def _unc(stderr: float | None, scale: float = 1.0) -> str:
    """'± σ' for a card, or '± ?' where the fit could not give the standard error."""
    return "± ?" if stderr is None else f"± {stderr * scale:.2g}"


def cards(fit: FitFile, verdict_text, spread) -> list[dict[str, str]]:
    s0 = fit.shot(0)
    cards = []
    v, e = _est(s0["initial"]["speed_mps"])
    if v is not None:
        cards.append(
            {
                "label": "speed at first point",
                "value": f"{v:.1f} m/s",
                "detail": f"{_unc(e)} m/s · {mps_to_fps(v):.0f} {_unc(e, mps_to_fps(1.0))} fps",
            }
        )
        energy = fit.bb.kinetic_energy_j(v)
        cards.append(
            {
                "label": "energy at first point",
                "value": f"{energy:.2f} J",
                "detail": f"{_unc(e, 2 * energy / v)} J · {kg_to_grams(fit.bb.mass_kg):.2f} g BB",  # dE = 2E dv/v
            }
        )
    cd, cde = _est(fit.data["aero"]["drag_coefficient"])
    if cd is not None:
        cards.append({"label": "drag coefficient C_D", "value": f"{cd:.3f}", "detail": _unc(cde)})
    cl, cle = _est(s0["lift_coefficient"])
    if cl is not None:
        cards.append(
            {
                "label": "lift coefficient C_L0",
                "value": f"{cl:.4f}",
                "detail": f"{_unc(cle)} at the first point",
            }
        )
    tau, taue = _est(fit.data["aero"]["spin_decay_time_s"])
    cards.append(
        {
            "label": "spin decay time τ",
            "value": "not determined" if tau is None else f"{tau:.2g} s",
            "detail": "" if tau is None else f"{_unc(taue)} s",
        }
    )
    if spread is not None and spread.effective_range_m is not None:
        err = spread.effective_range_stderr_m
        cards.append(
            {
                "label": "effective range",
                "value": f"{spread.effective_range_m:.1f} m",
                "detail": (f"± {err:.1f} m · " if err is not None else "")
                + f"{100 * spread.hit_fraction:.0f} % inside {100 * spread.target_diameter_m:.0f} cm",
            }
        )
    elif spread is not None:
        cards.append({"label": "effective range", "value": "not determined", "detail": spread.reason})
    else:
        cards.append(
            {
                "label": "effective range",
                "value": "needs ≥ 2 shots",
                "detail": "the spread between shots sets it",
            }
        )
    if verdict_text is not None:
        cards.append(
            {
                "label": "hop verdict",
                "value": verdict_text.headline,
                "detail": f"lift/weight {verdict_text.ratio:.2f} ± {verdict_text.ratio_stderr:.2f}",
            }
        )
    return cards


def verdict(fit: FitFile):
    s0 = fit.shot(0)
    cl, cle = _est(s0["lift_coefficient"])
    v, ve = _est(s0["initial"]["speed_mps"])
    if cl is None or v is None:
        return None
    ratio = lift_to_weight(cl, v, bb=fit.bb, air=fit.air, gravity_mps2=fit.spec.gravity_mps2)
    if cle is None or ve is None or cl == 0:
        return None  # no verdict without the uncertainty that decides it
    # first-order propagation: L/W ∝ C_L·v²
    rel = math.hypot(cle / cl, 2 * ve / v)
    return judge_hop(ratio, abs(ratio) * rel)


def parameter_rows(fit: FitFile) -> list[dict[str, str]]:
    rows = []
    for i in range(fit.n_shots):
        s = fit.shot(i)
        init = s["initial"]
        for name, obj, unit, fmt, scale in (
            ("speed (along flight)", init["speed_mps"], "m/s", ".5g", 1.0),
            ("speed (along flight)", init["speed_mps"], "fps", ".5g", mps_to_fps(1.0)),
            ("elevation", init["elevation_deg"], "°", ".4g", 1.0),
            ("x at first point", init["x_m"], "m", ".5g", 1.0),
            ("y at first point", init["y_m"], "m", ".5g", 1.0),
            ("lift coefficient C_L0", s["lift_coefficient"], "", ".4g", 1.0),
        ):
            v, e = _pm(*_est(obj), fmt=fmt, scale=scale)
            rows.append(
                {"name": name, "shot": s["label"], "value": v, "stderr": e, "unit": unit, "note": _share(obj)}
            )
        spin = s.get("spin_radps_model")
        if spin and spin.get("value") is not None:
            v, e = _pm(spin["value"], spin.get("stderr"), ".4g", radps_to_rpm(1.0))
            rows.append(
                {
                    "name": "spin (model-based)",
                    "shot": s["label"],
                    "value": v,
                    "stderr": e,
                    "unit": "rpm",
                    "note": "assumes the lift law's nominal k; not measured",
                }
            )
    aero = fit.data["aero"]
    for name, key, unit in (
        ("drag coefficient C_D", "drag_coefficient", ""),
        ("C_D scale (sphere law)", "drag_scale", ""),
        ("spin decay time τ", "spin_decay_time_s", "s"),
    ):
        obj = aero.get(key)
        if obj is None:
            continue
        v, e = _pm(*_est(obj))
        rows.append({"name": name, "shot": "all", "value": v, "stderr": e, "unit": unit, "note": _share(obj)})
    return rows


def calibration_rows(inputs: ReportInputs) -> list[tuple[str, str]]:
    rows: list[tuple[str, str]] = []
    rig = inputs.rig
    if rig is not None:
        k = rig.camera_matrix
        rows += [
            ("image size", f"{rig.image_size[0]} × {rig.image_size[1]} px"),
            ("focal length", f"{k[0, 0]:.1f} × {k[1, 1]:.1f} px"),
            ("reprojection RMS", f"{rig.reprojection_rms_px:.3f} px"),
            ("ensemble members (calibration uncertainty)", str(len(rig.ensemble))),
        ]
        if rig.coverage_m is not None:
            x0, x1, y0, y1 = rig.coverage_m
            rows.append(("plane covered by references", f"x {x0:.2f}..{x1:.2f} m, y {y0:.2f}..{y1:.2f} m"))
        if rig.drop_check:
            g = rig.drop_check.g_measured_mps2
            gv, gs = (float("nan"), float("nan")) if g is None else (g.value, g.stderr)
            rows.append(("drop check", f"g = {gv:.4g} ± {gs:.2g} m/s² ({rig.drop_check.verdict})"))
        rows.append(("rig digest", rig.digest[:16]))
    for path, tr in inputs.tracks:
        m = tr.meta
        exposure = "unknown" if m.exposure_s is None else f"{m.exposure_s * 1e3:.3g} ms"
        rows.append(
            (
                f"track {Path(path).name}",
                f"{tr.n_points if hasattr(tr, 'n_points') else len(tr.t_s)} points; timing {m.timing_source} at "
                f"{m.frame_rate_hz:.6g} Hz; readout {m.readout_s * 1e3:.3g} ms; exposure {exposure}; "
                f"video {m.video}",
            )
        )
    return rows


def quality_rows(fit: FitFile) -> list[tuple[str, str]]:
    st = fit.data["statistics"]
    model = fit.data["model"]
    return [
        ("converged", "yes" if fit.converged else f"no — {fit.reason}"),
        ("laws", f"drag {model['drag']}, lift {model['lift']}, decay {model['decay']}"),
        ("robust loss", loss_text(str(model.get("loss_requested", model["loss"])), str(model["loss"]))),
        ("points (outliers)", f"{st['n_points']} ({st['n_outliers']})"),
        (
            "χ² / degrees of freedom",
            f"{st['chi2']:.4g} / {st['dof']} (error bars scaled ×{st['stderr_scale']:.3g})",
        ),
        ("residual RMS", f"{1e3 * st['residual_rms_m']:.3g} mm = {st['residual_rms_sigma']:.3g} σ"),
        *(
            [
                (
                    "frame-to-frame error correlation",
                    serial_text(float(sc.get("x") or 0), float(sc.get("y") or 0)),
                )
            ]
            if (sc := st.get("serial_correlation")) and (sc.get("x") or sc.get("y"))
            else []
        ),
        ("AIC / BIC", f"{st['aic']:.5g} / {st['bic']:.5g}"),
        ("air density", f"{fit.air.density_kgm3:.4f} kg/m³"),
        ("BB", f"{kg_to_grams(fit.bb.mass_kg):.3g} g, {fit.bb.diameter_m * 1e3:.3g} mm"),
    ]


def rig_warnings(inputs: ReportInputs) -> list[str]:
    """The calibration's own warnings (and a failed drop check kept by the user), named by the rig file."""
    rig = inputs.rig
    if rig is None:
        return []
    out = [f"{inputs.rig_name}: {w}" for w in rig.warnings]
    drop = rig.drop_check_warning
    if drop:
        out.append(f"{inputs.rig_name}: {drop}")
    return out


def chrono_rows(fit: FitFile) -> list[tuple[str, str]]:
    """The chronograph speed given with --chrono-mps beside each shot's video speed, and their difference.

    The fit used the chronograph as a prior, so the video speed is not independent of it: a difference of
    more than about 2σ means the prior and the track disagree (a wrong --chrono-mps, or a scale error).
    """
    c = fit.chrono
    if c is None:
        return []
    where = "at the first tracked point" if c.muzzle_x_m is None else f"at x = {c.muzzle_x_m:g} m (muzzle)"
    rows = [
        (
            "chronograph (--chrono-mps)",
            f"{c.speed_mps:.5g} ± {c.sigma_mps:.2g} m/s ({mps_to_fps(c.speed_mps):.5g} fps), {where}; "
            "a prior of the fit",
        )
    ]
    for i in range(fit.n_shots):
        shot = fit.shot(i)
        v, e = _est(shot["initial"]["speed_mps"])
        if v is None:
            continue
        label = f"video speed {shot['label']}"
        if c.muzzle_x_m is not None:
            x0 = float(shot["initial"]["x_m"]["value"])
            rows.append((label, f"{v:.5g} {_unc(e)} m/s at the first tracked point, x = {x0:.3g} m"))
            continue
        diff = v - c.speed_mps
        sigma = math.hypot(e, c.sigma_mps) if e is not None else None
        dev = "" if not sigma else f", {diff / sigma:+.1f} σ"
        rows.append((label, f"{v:.5g} {_unc(e)} m/s: {diff:+.3g} m/s from the chronograph{dev}"))
    return rows


def measured_spin_rows(fit: FitFile) -> list[dict[str, str]]:
    """One row per shot with ``spin_measured`` (a marked BB's flicker): the rate in rpm and rad/s with its σ
    and its time, the marking, the method, and the candidates with the prior's choice when aliased; a shot
    without a rate gives the record's reason instead."""
    rows = []
    for i in range(fit.n_shots):
        s = fit.shot(i)
        rec = s.get("spin_measured")
        if rec is None:
            continue
        rate = rec["rate_radps"]
        cands = rec["candidates_radps"]
        measured = rate["value"] is not None
        rows.append(
            {
                "shot": s["label"],
                "rate": spin_rate_text(rate["value"], rate["stderr"]) if measured else "not measured",
                "at": f"{s_to_ms(rec['at_t_s']):.3f} ms" if measured else "",
                "marking": rec["marking"],
                "method": rec["method"] if measured else str(rec.get("reason") or ""),
                "candidates": spin_candidates_text(cands) if len(cands) > 1 else "",
                "choice": spin_choice_text(rec),
            }
        )
    return rows


def spin_decay_row(fit: FitFile) -> str:
    """The shared spin-decay estimate ``aero.spin_decay`` with its named source, in one line."""
    return spin_decay_text(fit.data["aero"].get("spin_decay"))
