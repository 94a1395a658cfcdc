"""Screen summaries of the commands: the rows and tables each command prints at the end, in user units.

Presenters only: they format the stages' results (SI inside) for the terminal, converting units here and
nowhere else in the app's output. Frame rates are written as frames/s; speeds in m/s with fps (feet per
second) beside them. Every function returns rows ``(label, value)`` for :func:`hopscope.console.summary`
or, for the fit, the finished table.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from hopscope.console import summary, warn
from hopscope.shared.units import kg_to_grams, m_to_mm, mps_to_fps, rad_to_deg, radps_to_rpm, s_to_ms

if TYPE_CHECKING:  # types only: the presenters never run the stages
    from hopscope.calibration.dragbound import DragBound
    from hopscope.calibration.pipeline import CalibrationRun
    from hopscope.fitting.estimate import Estimate, FlightFit
    from hopscope.fitting.profile import BBProfile
    from hopscope.pipeline import RunOutcome
    from hopscope.tracker.pipeline import TrackResult

Rows = list[tuple[str, str]]


def frame_rate_text(hz: float) -> str:
    """A frame rate for the screen: ``2000 frames/s`` (never "fps", which is a speed here)."""
    return f"{hz:.6g} frames/s"


def speed_text(v_mps: float, fmt: str = ".4g") -> str:
    """A speed in m/s with feet per second beside it: ``95.2 m/s (312.3 fps)``."""
    return f"{v_mps:{fmt}} m/s ({mps_to_fps(v_mps):{fmt}} fps)"


def estimate_text(e: Estimate | None, scale: float = 1.0, fmt: str = ".4g") -> str:
    """``value ± stderr`` of an estimate times ``scale``; ``± ?`` without a standard error."""
    if e is None or e.value is None:
        return "not determined"
    if e.stderr is None:
        return f"{e.value * scale:{fmt}} ± ?"
    return f"{e.value * scale:{fmt}} ± {e.stderr * scale:.2g}"


def _cal(e: Estimate | None) -> str:
    share = None if e is None else e.calibration_share
    return "" if share is None else f"  (calibration {100 * share:.0f} % of variance)"


def serial_text(x: float, y: float) -> str:
    """The position errors' correlation between neighbouring frames per axis."""
    return f"x {x:.2f}, y {y:.2f} between neighbouring frames (widens the error bars)"


def loss_text(asked: str, used: str) -> str:
    """The robust loss asked for and the one the final fit used (they differ when no residual called
    for the robust loss)."""
    if asked == used:
        return f"loss {used}"
    return f"loss {asked} asked, {used} used (no residual called for {asked})"


# ============================================================================================ fit


def parameter_table(result: FlightFit, title: str = "hopscope fit") -> str:
    """The fit's on-screen table: parameters ± σ in user units, residual RMS, goodness of fit, laws."""
    rows: Rows = []
    for s in result.shots:
        rows.append((f"{s.label}", f"{s.n_points} points, first at t = {s.t0_s:.6f} s"))
        rows.append(
            (
                "  speed",
                f"{estimate_text(s.speed_mps, fmt='.5g')} m/s = "
                f"{estimate_text(s.speed_mps, mps_to_fps(1.0), '.5g')} fps{_cal(s.speed_mps)}",
            )
        )
        rows.append(("  elevation", f"{estimate_text(s.elevation_rad, rad_to_deg(1.0))}°"))
        rows.append(("  lift coefficient C_L0", estimate_text(s.lift_coefficient)))
        spin = s.spin_radps_model
        if spin.value is not None:
            rows.append(("  spin (model-based, k = 1)", f"{estimate_text(spin, radps_to_rpm(1.0))} rpm"))
        rows.append(("  residual rms", f"{1e3 * s.residual_rms_m:.3g} mm = {s.residual_rms_sigma:.3g} σ"))
    rows.append(("C_D", f"{estimate_text(result.drag_coefficient)}{_cal(result.drag_coefficient)}"))
    if result.drag_scale is not None:
        rows.append(("C_D scale (sphere law)", estimate_text(result.drag_scale)))
    tau = result.spin_decay_time_s
    rows.append(
        ("spin decay τ", f"{estimate_text(tau)} s" if tau.value is not None else "not determined by the data")
    )
    st = result.statistics
    rows.append(("residual rms", f"{1e3 * st.residual_rms_m:.3g} mm = {st.residual_rms_sigma:.3g} σ"))
    rows.append(("χ² / dof", f"{st.chi2:.4g} / {st.dof} (error bars ×{st.stderr_scale:.3g})"))
    if st.serial_correlation_x > 0 or st.serial_correlation_y > 0:
        rows.append(("error correlation", serial_text(st.serial_correlation_x, st.serial_correlation_y)))
    rows.append(("AIC / BIC", f"{st.aic:.5g} / {st.bic:.5g}"))
    corr = result.correlation
    if corr.shape[0] > 1:
        off = np.abs(corr - np.diag(np.diag(corr)))
        i, j = np.unravel_index(int(np.argmax(off)), off.shape)
        names = result.free_names
        rows.append(
            ("strongest correlation", f"{names[i]} – {names[j]}: {corr[i, j]:+.2f} (all in fit.json)")
        )
    rows.append(("outliers", f"{st.n_outliers} of {st.n_points} points"))
    m = result.spec
    rows.append(
        (
            "laws",
            f"drag {m.drag}, lift {m.lift}, decay {m.decay}; {loss_text(result.loss_requested, result.loss)}",
        )
    )
    rows.append(("converged", "yes" if result.converged else f"NO: {result.reason}"))
    return summary(title, rows)


# ============================================================================================ measured spin


def spin_rate_text(value_radps: float, stderr_radps: float | None) -> str:
    """A measured spin rate in rpm with rad/s beside it: ``61500 ± 290 rpm (6440 ± 30 rad/s)``."""
    e = "?" if stderr_radps is None else f"{radps_to_rpm(stderr_radps):.2g}"
    es = "?" if stderr_radps is None else f"{stderr_radps:.2g}"
    return f"{radps_to_rpm(value_radps):.0f} ± {e} rpm ({value_radps:.5g} ± {es} rad/s)"


def spin_candidates_text(candidates_radps: Sequence[float]) -> str:
    """The candidate rates of an aliased flicker, in rpm with rad/s: ``132000 rpm (13823 rad/s), ...``."""
    return ", ".join(f"{radps_to_rpm(c):.0f} rpm ({c:.0f} rad/s)" for c in candidates_radps)


def spin_choice_text(record: Mapping[str, Any]) -> str:
    """Which candidate of an aliased ``spin_measured`` record was taken and by which prior (its
    ``method`` names it), or that none was and why (its ``reason``); empty when not aliased."""
    if len(record["candidates_radps"]) <= 1:
        return ""
    if record["rate_radps"]["value"] is not None:
        return f"picked by a stated prior: {record['method']}"
    return f"none picked: {record['reason']}"


def spin_record_text(record: Mapping[str, Any]) -> str:
    """One ``spin_measured`` record of ``fit.json`` in one line: the rate ± σ (rpm, rad/s) at its time,
    the marking and the method, and the candidates when aliased; or why there is no rate."""
    rate = record["rate_radps"]
    cands = record["candidates_radps"]
    aliased = (
        f"; aliased, candidates {spin_candidates_text(cands)}; {spin_choice_text(record)}"
        if len(cands) > 1
        else ""
    )
    if rate["value"] is None:
        return f"not measured: {record['reason']}" + (
            f"; aliased, candidates {spin_candidates_text(cands)}" if len(cands) > 1 else ""
        )
    return (
        f"{spin_rate_text(rate['value'], rate['stderr'])} at t = {s_to_ms(record['at_t_s']):.3f} ms; "
        f"marking {record['marking']}; {record['method']}{aliased}"
    )


def spin_decay_text(block: Mapping[str, Any] | None) -> str:
    """``aero.spin_decay`` of ``fit.json`` in one line: its source, λ ± σ (1/s), τ ± σ (s) and its note."""
    if not block:
        return "not recorded in this fit file"
    lam, tau = block.get("rate_per_s") or {}, block.get("time_s") or {}
    parts = [f"source {block['source']}"]
    if lam.get("value") is not None:
        parts.append(f"λ = {lam['value']:.3g} ± {lam['stderr']:.2g} 1/s")
    if tau.get("value") is not None:
        parts.append(f"τ = {tau['value']:.3g} ± {tau['stderr']:.2g} s")
    note = block.get("note")
    return ", ".join(parts) + (f" ({note})" if note else "")


def measured_spin_rows(doc: Mapping[str, Any]) -> Rows:
    """Rows for a fit document (``fit.json``): one per shot with ``spin_measured`` (its
    :func:`spin_record_text`), then the shared decay estimate; none when no shot has a measured spin."""
    rows: Rows = [
        (f"{s['label']} spin (measured)", spin_record_text(s["spin_measured"]))
        for s in doc["shots"]
        if "spin_measured" in s
    ]
    if rows:
        rows.append(("spin decay (shared)", spin_decay_text(doc.get("aero", {}).get("spin_decay"))))
    return rows


# ============================================================================================ calibrate


def calibration_rows(result: CalibrationRun) -> list[tuple[str, str]]:
    """The one-screen summary: views, RMS, focal length ± σ, plane distance, scale, edge errors, drop."""
    rig, lens, fig = result.rig, result.lens, result.figures
    rows = [
        ("views used / rejected", f"{len(lens.views_used)} / {len(lens.views_rejected)}"),
    ]
    for name, reason in lens.views_rejected[:6]:
        rows.append(("  rejected", f"{name}: {reason}"))
    if len(lens.views_rejected) > 6:
        rows.append(("  rejected", f"... and {len(lens.views_rejected) - 6} more (see rig.json provenance)"))
    rows += [
        ("reprojection RMS", f"{lens.rms_px:.3f} px (frame coverage {lens.frame_coverage:.0%})"),
        ("worst view", _worst_view(lens)),
        ("focal length", f"{fig.focal_px:.2f} ± {fig.focal_std_px:.2f} px"),
        ("principal point", f"({rig.camera_matrix[0, 2]:.1f}, {rig.camera_matrix[1, 2]:.1f}) px"),
        ("plane distance", f"{fig.plane_distance_m:.3f} m"),
        ("scale at centre", f"{fig.mm_per_px_centre:.3f} mm/px, field width {fig.field_width_m:.2f} m"),
    ]
    plane = rig.provenance.get("plane", {})
    for p in plane.get("placements", []):
        rows.append(("  placement", f"{p['image']} at {p['offset_m']:g} m: residual {p['rms_px']:.3f} px"))
    x0, x1, y0, y1 = rig.coverage_m
    rows.append(("plane references cover", f"x {x0:.2f}..{x1:.2f} m, y {y0:.2f}..{y1:.2f} m"))
    if fig.edge_error_mm:
        e = fig.edge_error_mm
        rows.append(
            (
                "mapping error (1σ)",
                f"left edge {e['left']:.2f} mm, right edge {e['right']:.2f} mm, corners {e['corners']:.2f} mm "
                f"({len(rig.ensemble)} ensemble members)",
            )
        )
    else:
        rows.append(("mapping error", "not estimated (--ensemble 0)"))
    rows.append(drag_bound_row(fig.drag_bound))
    if rig.plane_z_m:
        rows.append(("flight plane", f"{m_to_mm(rig.plane_z_m):.1f} mm in front of the board (parallax)"))
    d = rig.drop_check
    if d is not None:
        if d.g_measured_mps2 is None or d.tilt_deg is None:
            rows.append(("drop check", f"failed: {d.reason}"))
        else:
            g, t = d.g_measured_mps2, d.tilt_deg
            kept = f", likely cause: {d.likely_cause} (kept by --keep-failed-drop)" if d.failed else ""
            rows.append(
                (
                    "drop check",
                    f"g = {g.value:.4f} ± {g.stderr:.4f} m/s² (expected {d.g_expected_mps2:.4f}): {d.verdict}{kept}",
                )
            )
            rows.append(
                (
                    "level",
                    f"tilt {t.value:+.3f} ± {t.stderr:.3f}°, {'levelled' if d.levelled else 'board taken as level'}",
                )
            )
    rows.append(("rig digest", rig.digest[:16]))
    return rows


def drag_bound_row(bound: DragBound | None) -> tuple[str, str]:
    """The summary row of the C_D bound the plane pose allows (:func:`calibration.dragbound.drag_bound`):
    what the ensemble's scale error over the field costs a reference BB's C_D, and what helps."""
    label = "C_D bound from geometry"
    if bound is None or not np.isfinite(bound.cd_relative):
        return label, "not estimated (no ensemble)"
    bb = f"{kg_to_grams(bound.reference_mass_kg):g} g BB"
    if bound.n_placements == 1:
        advice = (
            "one board placement: its pose sets this (it tilts the plane and bends the scale toward the "
            "field's edges); placing the board at two or three more places along the field lowers it"
        )
    else:
        advice = f"{bound.n_placements} placements; more along the field lower it further"
    return (
        label,
        f"±{100 * bound.cd_relative:.2g} % (1σ, a {bb} across the {bound.field_m:.2f} m field): {advice}",
    )


def _worst_view(lens) -> str:
    if not lens.per_view_rms_px:
        return "-"
    i = max(range(len(lens.per_view_rms_px)), key=lambda j: lens.per_view_rms_px[j])
    return f"{lens.views_used[i]}: {lens.per_view_rms_px[i]:.3f} px"


# ============================================================================================ track


def track_rows(
    video: str, result: TrackResult, *, readout_ms: float, exposure_ms: float | None, written: str
) -> Rows:
    """``hopscope track``'s summary: timing, shots, points, candidates, σ and each shot's speed."""
    track = result.track
    if track is None:  # the pipeline raises first; this keeps the types honest
        raise ValueError(f"{video}: the tracker returned no track")
    s = result.summary
    rows = [
        ("video", f"{video} ({result.info.width}x{result.info.height} px, {s.frames_read} frames)"),
        ("timing", f"{track.meta.timing_source}, {frame_rate_text(s.frame_rate_hz)}"),
        (
            "readout / exposure",
            f"{readout_ms:g} ms / " + ("unknown" if exposure_ms is None else f"{exposure_ms:g} ms"),
        ),
        ("polarity", s.polarity),
        ("shots", str(len(track.shot_ids))),
        ("points", f"{s.points} in {s.frames_with_points} frames"),
        (
            "candidates",
            f"{s.candidates} found, {s.fitted} localised, {s.rejected_candidates} rejected, "
            f"{s.outliers} outliers dropped",
        ),
        (
            "tracks not the BB",
            f"{s.rejected_track_count}" + (f" (e.g. {s.rejected_tracks[0]})" if s.rejected_tracks else ""),
        ),
        (
            "median sigma",
            f"{_median(track.sigma_px):.3f} px, {m_to_mm(_median(track.sigma_m)):.3f} mm",
        ),
    ]
    for i, sp in enumerate(s.shot_speeds_mps):
        rows.append((f"shot {i} speed", f"{speed_text(sp, '.4g')}, at its first point (local quadratic)"))
    rows.append(("written", written))
    return rows


def _median(a) -> float:
    return float(np.median(a)) if len(a) else float("nan")


# ============================================================================================ run


def run_rows(outcome: RunOutcome) -> Rows:
    """``hopscope run``'s own rows: per clip what was tracked, then the files written."""
    rows: Rows = []
    for c in outcome.clips:
        s = c.result.summary
        track = c.result.track
        n_shots = 0 if track is None else len(track.shot_ids)
        rows.append(
            (
                c.video.name,
                f"{s.frames_read} frames at {frame_rate_text(s.frame_rate_hz)}, "
                f"{n_shots} shot{'s' if n_shots != 1 else ''}, {s.points} points",
            )
        )
    fit = outcome.fitted.result
    rows.append(
        ("fit", f"{len(fit.shots)} shot(s) jointly, {'converged' if fit.converged else 'NOT converged'}")
    )
    folder = outcome.plan.report_path.parent
    names = ", ".join(Path(p).name for p in outcome.written)
    rows.append(("written to", f"{folder}/: {names}"))
    if outcome.removed:
        rows.append(("removed", f"{len(outcome.removed)} file(s) of the folder's earlier run"))
    return rows


def show_run(outcome: RunOutcome, title: str) -> None:
    """Print a run's parameter table and summary, then the fit's warnings not shown while tracking."""
    fit = outcome.fitted.result
    print(parameter_table(fit))
    print(summary(title, run_rows(outcome)))
    # the tracker's warnings were shown while tracking; the fit carries them prefixed with the track's name
    shown = {f"{c.track_path.name}: {w}" for c in outcome.clips for w in c.result.warnings}
    for w in fit.warnings:
        if w not in shown:
            warn(w)
    if not fit.converged:
        warn(f"the fit did not converge: {fit.reason} ({outcome.plan.fit_path} says converged: false)")


# ============================================================================================ demo


@dataclass(frozen=True)
class Comparison:
    """One recovered quantity beside its true value (user units).

    Attributes
    ----------
    name, unit : what and in which unit.
    recovered, stderr : the fit's value and standard error (None when not determined).
    truth : the scene's true value.
    """

    name: str
    unit: str
    recovered: float | None
    stderr: float | None
    truth: float

    @property
    def relative_error(self) -> float | None:
        """(recovered − truth) / truth, or None."""
        if self.recovered is None or self.truth == 0:
            return None
        return (self.recovered - self.truth) / self.truth

    @property
    def deviation_sigma(self) -> float | None:
        """(recovered − truth) / σ, or None."""
        if self.recovered is None or not self.stderr:
            return None
        return (self.recovered - self.truth) / self.stderr


def comparison_rows(rows: Sequence[Comparison]) -> Rows:
    """Lines of the recovered-vs-true table."""
    out = []
    for c in rows:
        unit = f" {c.unit}" if c.unit else ""
        if c.recovered is None:
            out.append((c.name, f"not determined (true {c.truth:.6g}{unit})"))
            continue
        sig = "± ?" if c.stderr is None else f"± {c.stderr:.2g}"
        rel = "" if c.relative_error is None else f", {100 * c.relative_error:+.3f} %"
        dev = "" if c.deviation_sigma is None else f", {c.deviation_sigma:+.2f} σ"
        out.append((c.name, f"{c.recovered:.6g} {sig}{unit}  true {c.truth:.6g}{unit}{rel}{dev}"))
    return out


# ============================================================================================ profile


def profile_rows(prof: BBProfile, *, n_shots: int, n_files: int, written: Sequence[Path]) -> Rows:
    """``hopscope profile``'s summary: C_D per Reynolds-number bin and the spin decay."""
    import math

    rows = [("shots", f"{n_shots} from {n_files} track file(s)")]
    for b in prof.drag:
        cd = "not determined" if b.cd is None else f"{b.cd:.4f} ± {b.cd_stderr or 0.0:.2g}"
        share = "" if b.cd_stderr_bb is None or b.cd is None else f", BB tolerance ± {b.cd_stderr_bb:.2g}"
        rows.append((f"C_D, Re {b.re_lo:.3g}..{b.re_hi:.3g}", f"{cd} ({b.n_shots} shots{share})"))
    tol = prof.tolerance
    if tol is not None:
        rows.append(
            (
                "BB tolerance",
                f"mass ± {kg_to_grams(tol.mass_sigma_kg):.3g} g, diameter ± {m_to_mm(tol.diameter_sigma_m):.3g} mm "
                f"(1σ, {tol.origin}), in every C_D and C_L error bar",
            )
        )
    tau = prof.spin_decay_time_s
    rows.append(
        ("spin decay τ", "not determined" if tau is None or not math.isfinite(tau) else f"{tau:.3g} s")
    )
    rows.append(("wrote", ", ".join(str(p) for p in written)))
    return rows
