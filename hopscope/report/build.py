"""Build the HTML report from a fit file (plus, optionally, its tracks and rig).

The page is rendered from an autoescaping Jinja2 template with the figures embedded as PNG data, so it
is one self-contained file that opens offline and prints. All numbers come from the stages: the fit file
(estimates, residuals), :mod:`fitting.predict` (fitted and predicted paths with ±1σ bands) and
:mod:`fitting.verdict` (hop verdict, lift along the path). The app converts units for display only.
"""

from __future__ import annotations

import base64
import datetime as _dt
import math
import os
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from hopscope.calibration.rig import Rig, read_rig
from hopscope.fitting.dispersion import effective_range
from hopscope.fitting.fitfile import FitFile, read_fit
from hopscope.fitting.predict import DEFAULT_RANGE_M as PREDICT_DEFAULT_RANGE_M
from hopscope.fitting.predict import predict_path
from hopscope.fitting.verdict import judge_hop, lift_profile, lift_to_weight
from hopscope.shared.fileio import write_bytes_atomic, write_text_atomic
from hopscope.shared.units import kg_to_grams, mps_to_fps, radps_to_rpm
from hopscope.tracker.trackfile import Track, read_track

from .. import __version__
from ..inputs import match_track_to_fit
from ..summaries import loss_text
from . import figures

#: Safety cautions shown on every report (and in the README).
CAUTIONS = (
    "Eye protection for everyone present whenever a replica is test-fired.",
    "A safe backstop behind the grid and the whole flight path; nobody downrange.",
    "Field and local rules on muzzle energy govern. The figures here are estimates from video: "
    "the field's own chronograph is the reference, not this report.",
)

#: Default distance for the predicted path, m (the predictor's own default).
DEFAULT_RANGE_M = PREDICT_DEFAULT_RANGE_M

#: Samples of the fit's covariance behind the ±1σ bands (fixed seed: the report is reproducible).
BAND_SAMPLES = 200
#: Range given to the predictor when only the tracked span is wanted (it stops at the span's time first).
SPAN_RANGE_M = 1e3
BAND_SEED = 20261201


@dataclass(frozen=True, eq=False)
class ReportInputs:
    """Everything a report is made from.

    Attributes
    ----------
    fit : the validated fit file.
    tracks : (path, Track) pairs of the fitted tracks (optional: points then come from the fit's residuals).
    rig : the rig the tracks were mapped with (optional: for the calibration section).
    range_m : distance of the predicted path, m.
    links : (label, href) pairs to neighbouring files (overlay, track, fit).
    title : the page's title.
    extra_rows : more rows for the calibration table.
    rig_name : the rig file's name (its warnings are listed under it).
    """

    fit: FitFile
    tracks: tuple[tuple[str, Track], ...] = ()
    rig: Rig | None = None
    range_m: float = DEFAULT_RANGE_M
    links: tuple[tuple[str, str], ...] = ()
    title: str = ""
    extra_rows: tuple[tuple[str, str], ...] = field(default=())
    rig_name: str = "rig"


def _fit_times(fit: FitFile) -> dict[str, np.ndarray]:
    """Each fitted shot's point times (its residuals' times), by label."""
    return {
        fit.shot(i)["label"]: np.asarray(fit.shot(i)["residuals"]["t_s"], dtype=float)
        for i in range(fit.n_shots)
    }


def load_report_inputs(
    fit_path: str | os.PathLike[str],
    *,
    track_paths: Sequence[str | os.PathLike[str]] = (),
    rig_path: str | os.PathLike[str] | None = None,
    range_m: float = DEFAULT_RANGE_M,
    links: Sequence[tuple[str, str]] = (),
    title: str | None = None,
) -> ReportInputs:
    """Read and validate the files behind a report (each reader names the file in its errors)."""
    if not (math.isfinite(range_m) and range_m > 0):
        raise ValueError(f"--range-m: expected a positive distance in metres, got {range_m!r}")
    fit = read_fit(fit_path)
    tracks = tuple((str(p), read_track(p)) for p in track_paths)
    times = _fit_times(fit)
    for path, tr in tracks:  # a track the fit was not made from would be drawn against another shot's path
        match_track_to_fit(path, tr, fit.labels, times)
    rig = read_rig(rig_path) if rig_path is not None else None
    if rig is not None:
        for path, tr in tracks:
            if tr.meta.rig_digest and tr.meta.rig_digest != rig.digest:
                raise ValueError(f"{path}: was mapped with another rig than {rig_path} (rig digests differ)")
    rig_name = "rig" if rig_path is None else Path(rig_path).name
    return ReportInputs(
        fit, tracks, rig, range_m, tuple(links), title or Path(fit_path).stem, rig_name=rig_name
    )


# ---------------------------------------------------------------------------------------------- helpers


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


def _track_points(inputs: ReportInputs) -> dict[str, tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]]:
    """Tracked points (t, x, y, σ) by the fit's shot label (:func:`hopscope.inputs.match_track_to_fit`)."""
    out = {}
    times = _fit_times(inputs.fit)
    for path, tr in inputs.tracks:
        for label, sid in match_track_to_fit(path, tr, inputs.fit.labels, times).items():
            s = tr.select_shot(sid)
            out[label] = (s.t_s, s.x_m, s.y_m, s.sigma_m)
    return out


def _shot_curves(inputs: ReportInputs) -> list[figures.ShotCurves]:
    fit = inputs.fit
    tracked = _track_points(inputs)
    curves = []
    for i in range(fit.n_shots):
        shot = fit.shot(i)
        res = shot["residuals"]
        t = np.asarray(res["t_s"], dtype=float)
        dx = np.asarray(res["dx_m"], dtype=float)
        dy = np.asarray(res["dy_m"], dtype=float)
        t0 = float(shot["initial"]["t_s"])
        duration = max(float(t[-1] - t0), 1e-6)
        # the fitted path over the tracked span (range and ground far beyond it), with its ±1σ band
        span = predict_path(
            fit, shot=i, range_m=SPAN_RANGE_M, max_time_s=duration, n_samples=BAND_SAMPLES, rng=BAND_SEED,
            sample_s=duration / 300,
        )  # fmt: skip
        path = span
        mx = np.interp(t - t0, path.t_s, path.x_m)
        my = np.interp(t - t0, path.t_s, path.y_m)
        label = shot["label"]
        if label in tracked:
            tt, xx, yy, ss = tracked[label]
        else:
            rms = float(shot.get("residual_rms_m") or 0.0)
            tt, xx, yy, ss = t, mx + dx, my + dy, np.full_like(t, rms)
        curves.append(
            figures.ShotCurves(
                label,
                tt,
                xx,
                yy,
                ss,
                dx,
                dy,
                span.x_m,
                span.y_m,
                span.y_m - span.y_sigma_m,
                span.y_m + span.y_sigma_m,
            )
        )
    return curves


def _unc(stderr: float | None, scale: float = 1.0) -> str:
    """'± σ' for a card, or '± ?' where the fit could not give the standard error."""
    return "± ?" if stderr is None else f"± {stderr * scale:.2g}"


def _cards(fit: FitFile, verdict_text, spread) -> list[dict[str, str]]:
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


def _verdict(fit: FitFile):
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


def _parameter_rows(fit: FitFile) -> list[dict[str, str]]:
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


def _calibration_rows(inputs: ReportInputs) -> list[tuple[str, str]]:
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


def _quality_rows(fit: FitFile) -> list[tuple[str, str]]:
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
        ("AIC / BIC", f"{st['aic']:.5g} / {st['bic']:.5g}"),
        ("air density", f"{fit.air.density_kgm3:.4f} kg/m³"),
        ("BB", f"{kg_to_grams(fit.bb.mass_kg):.3g} g, {fit.bb.diameter_m * 1e3:.3g} mm"),
    ]


def _rig_warnings(inputs: ReportInputs) -> list[str]:
    """The calibration's own warnings (and a failed drop check kept by the user), named by the rig file."""
    rig = inputs.rig
    if rig is None:
        return []
    out = [f"{inputs.rig_name}: {w}" for w in rig.warnings]
    drop = rig.drop_check_warning
    if drop:
        out.append(f"{inputs.rig_name}: {drop}")
    return out


def _chrono_rows(fit: FitFile) -> list[tuple[str, str]]:
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


def _png64(data: bytes) -> str:
    return base64.b64encode(data).decode("ascii")


def render_report(inputs: ReportInputs) -> str:
    """The report as one HTML string (autoescaped template, figures embedded)."""
    return _render(inputs)[0]


def _render(inputs: ReportInputs) -> tuple[str, list[tuple[str, bytes]]]:
    """The report's HTML and its figures as (key, PNG bytes)."""
    import jinja2

    fit = inputs.fit
    curves = _shot_curves(inputs)
    verdict = _verdict(fit)
    prof = lift_profile(fit, shot=0, range_m=inputs.range_m)
    pred = predict_path(fit, shot=0, range_m=inputs.range_m, n_samples=BAND_SAMPLES, rng=BAND_SEED)
    spread = effective_range(fit, rng=BAND_SEED) if fit.n_shots >= 2 else None
    titles = {
        "plane": "Tracked points on the flight plane with the fitted path",
        "residuals": "Residuals against time",
        "speed-lift": "Speed and lift-to-weight ratio against distance",
        "range": "Predicted path to range",
        "spread": "Shots inside the target against distance",
    }
    figs = [
        (
            "plane",
            figures.plane_figure(curves, title=titles["plane"]),
            "Tracked points (±1σ) and the fitted path with its ±1σ band, height in mm against downrange distance.",
        ),
        (
            "residuals",
            figures.residual_figure(curves, title=titles["residuals"]),
            "Residuals (tracked − fitted) along x and y; the grey band is the points' ±1σ.",
        ),
        (
            "speed-lift",
            figures.speed_lift_figure(prof.x_m, prof.speed_mps, prof.ratio, title=titles["speed-lift"]),
            f"First shot: speed (top) and Magnus lift over weight (bottom) out to {inputs.range_m:g} m.",
        ),
        (
            "range",
            figures.range_figure(
                pred.x_m,
                pred.y_m,
                pred.y_m - pred.y_sigma_m,
                pred.y_m + pred.y_sigma_m,
                launch_height_m=float(pred.y_m[0]),
                title=titles["range"],
            ),
            f"First shot, predicted to {inputs.range_m:g} m ({pred.reached} reached) with its ±1σ band from the fit's covariance.",
        ),
    ]
    if spread is not None and spread.x_m.size:
        figs.append(
            (
                "spread",
                figures.spread_figure(
                    spread.x_m,
                    spread.fraction_inside,
                    hit_fraction=spread.hit_fraction,
                    target_diameter_m=spread.target_diameter_m,
                    effective_range_m=spread.effective_range_m,
                    title=titles["spread"],
                ),
                f"Monte Carlo over the shot-to-shot spread of the {fit.n_shots} fitted shots: the share of shots "
                f"within a {100 * spread.target_diameter_m:.0f} cm circle about the group centre. "
                + " ".join(n[0].upper() + n[1:] + "." for n in spread.notes),
            )
        )
    # the fit already carries its tracks' warnings (prefixed with the track's name); the rig's own come after
    warnings = list(dict.fromkeys([*fit.warnings, *_rig_warnings(inputs)]))
    if not fit.converged:
        warnings.insert(0, f"the fit did not converge: {fit.reason}")
    env = jinja2.Environment(
        loader=jinja2.PackageLoader("hopscope.report", "templates"),
        autoescape=jinja2.select_autoescape(["html"]),
        undefined=jinja2.StrictUndefined,
    )
    css = env.loader.get_source(env, "report.css")[0]  # type: ignore[union-attr]
    n_points = int(fit.data["statistics"]["n_points"])
    model_note = str(fit.data["model"].get("spin_note") or "")
    html = env.get_template("report.html").render(
        title=inputs.title or Path(fit.source).stem,
        version=__version__,
        created=_dt.datetime.now(_dt.UTC).strftime("%Y-%m-%d %H:%M UTC"),
        n_shots=fit.n_shots,
        n_points=n_points,
        cautions=CAUTIONS,
        cards=_cards(fit, verdict, spread),
        verdict=verdict,
        warnings=warnings,
        parameters=_parameter_rows(fit),
        model_note=model_note,
        figures=[
            {"key": k, "png_base64": _png64(png), "title": titles[k], "caption": cap} for k, png, cap in figs
        ],
        calibration=_calibration_rows(inputs) + list(inputs.extra_rows),
        chronograph=_chrono_rows(fit),
        links=[{"label": lbl, "href": href} for lbl, href in inputs.links],
        quality=_quality_rows(fit),
        inputs=", ".join([Path(fit.source).name] + [Path(p).name for p, _ in inputs.tracks]),
        css=css,
    )
    return html, [(k, png) for k, png, _cap in figs]


def write_report(
    out: str | os.PathLike[str], inputs: ReportInputs, *, figures_dir: str | os.PathLike[str] | None = None
) -> list[Path]:
    """Render and write the report atomically; returns the paths written (the report first).

    With ``figures_dir`` the figures are also written there as ``figure_<name>.png`` (each atomically), for
    use outside the page; the page itself embeds them either way.
    """
    html, figs = _render(inputs)
    written = [Path(out)]
    if figures_dir is not None:
        for key, png in figs:
            written.append(Path(figures_dir) / f"figure_{key}.png")
            write_bytes_atomic(written[-1], png)
    write_text_atomic(out, html)
    return written
