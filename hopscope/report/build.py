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

from hopscope.calibration.dropcheck import DROP_FAILED_MARK
from hopscope.calibration.rig import Rig, read_rig
from hopscope.fitting.dispersion import effective_range
from hopscope.fitting.fitfile import FitFile, read_fit
from hopscope.fitting.predict import DEFAULT_RANGE_M as PREDICT_DEFAULT_RANGE_M
from hopscope.fitting.predict import fitted_span_path, predict_path
from hopscope.fitting.verdict import lift_profile
from hopscope.shared.fileio import write_bytes_atomic, write_text_atomic
from hopscope.tracker.trackfile import Track, read_track

from .. import __version__
from ..decisions import Convention
from ..inputs import match_track_to_fit
from . import figures, tables
from .decision_figures import forecast_figure
from .decision_sections import decision_section

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
    limit_j : the field's energy limit, J (None: the fit file's, if it has one).
    convention : muzzle height, band and engagement range of the prediction and hop verdict (None: defaults).
    """

    fit: FitFile
    tracks: tuple[tuple[str, Track], ...] = ()
    rig: Rig | None = None
    range_m: float = DEFAULT_RANGE_M
    links: tuple[tuple[str, str], ...] = ()
    title: str = ""
    extra_rows: tuple[tuple[str, str], ...] = field(default=())
    rig_name: str = "rig"
    limit_j: float | None = None
    convention: Convention | None = None


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
    limit_j: float | None = None,
    convention: Convention | None = None,
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
        fit, tracks, rig, range_m, tuple(links), title or Path(fit_path).stem, rig_name=rig_name,
        limit_j=limit_j, convention=convention,
    )  # fmt: skip


# ---------------------------------------------------------------------------------------------- helpers


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
        # the fitted path over the tracked span, with its ±1σ band
        span = fitted_span_path(fit, shot=i, n_samples=BAND_SAMPLES, rng=BAND_SEED)
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


def _png64(data: bytes) -> str:
    return base64.b64encode(data).decode("ascii")


def render_report(inputs: ReportInputs) -> str:
    """The report as one HTML string (autoescaped template, figures embedded)."""
    return _render(inputs)[0]


def _render(inputs: ReportInputs) -> tuple[str, list[tuple[str, bytes]]]:
    """The report's HTML and its figures as (key, PNG bytes)."""

    fit = inputs.fit
    curves = _shot_curves(inputs)
    verdict = tables.verdict(fit)
    decided = decision_section(inputs)
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
    if decided.decisions is not None:  # each shot's predicted path to the ground, with the verdict's band
        d = decided.decisions
        titles["prediction"] = "Predicted paths from the muzzle to the ground"
        figs.append(
            (
                "prediction",
                forecast_figure(d.forecasts, band_m=d.convention.band_m, engagement_m=d.convention.engagement_m,
                                title=titles["prediction"]),
                f"Each shot flown level from {d.convention.muzzle_height_m:g} m with its ±1σ band over the fit's "
                f"covariance; dashed: the ±{d.convention.band_m:g} m band the hop verdict judges, and the "
                "engagement range.",
            )
        )  # fmt: skip
    # the fit already carries its tracks' warnings (prefixed with the track's name, and the rig's failed drop
    # check among them when the tracks were made with that rig); the rig's own come after, each said once
    carried = [*fit.warnings, *decided.warnings]
    drop = inputs.rig.drop_check_warning if inputs.rig is not None else None
    rig_lines = [
        w for w in tables.rig_warnings(inputs) if not (drop and drop in w and any(drop in c for c in carried))
    ]
    warnings = list(dict.fromkeys([*carried, *rig_lines]))
    if not fit.converged:
        warnings.insert(0, f"the fit did not converge: {fit.reason}")
    # a rig that failed its own drop check (given with --rig, or named in the tracks' warnings) marks the page
    drop_failed = next((w for w in warnings if DROP_FAILED_MARK in w), None)
    n_points = int(fit.data["statistics"]["n_points"])
    model_note = str(fit.data["model"].get("spin_note") or "")
    html = render_page(
        "report.html",
        title=inputs.title or Path(fit.source).stem,
        n_shots=fit.n_shots,
        n_points=n_points,
        cards=decided.merge_cards(tables.cards(fit, verdict, spread)),
        verdict=None if decided.context else verdict,  # the path's verdict replaces the ratio's
        decisions=decided.context,
        warnings=warnings,
        drop_failed=drop_failed,
        parameters=tables.parameter_rows(fit),
        model_note=model_note,
        figures=[
            {"key": k, "png_base64": _png64(png), "title": titles[k], "caption": cap} for k, png, cap in figs
        ],
        calibration=tables.calibration_rows(inputs) + list(inputs.extra_rows),
        chronograph=tables.chrono_rows(fit),
        links=[{"label": lbl, "href": href} for lbl, href in inputs.links],
        quality=tables.quality_rows(fit),
        spin=tables.measured_spin_rows(fit),
        spin_decay=tables.spin_decay_row(fit),
        inputs=", ".join([Path(fit.source).name] + [Path(p).name for p, _ in inputs.tracks]),
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


def render_page(template: str, **context: object) -> str:
    """Render one of the report's pages (``report.html``, ``compare.html``) from its template.

    Every page extends ``page.html`` (the style sheet, the header, the safety cautions and the footer), so
    this supplies what every page shows: the CSS, the version, the time made and the cautions.
    """
    import jinja2

    env = jinja2.Environment(
        loader=jinja2.PackageLoader("hopscope.report", "templates"),
        autoescape=jinja2.select_autoescape(["html"]),
        undefined=jinja2.StrictUndefined,
    )
    css = env.loader.get_source(env, "report.css")[0]  # type: ignore[union-attr]
    return env.get_template(template).render(
        css=css,
        version=__version__,
        created=_dt.datetime.now(_dt.UTC).strftime("%Y-%m-%d %H:%M UTC"),
        cautions=CAUTIONS,
        **context,
    )
