"""The stages glued end to end: calibrate, track, fit and report, each step writing its files atomically.

Plain functions returning frozen results; ``hopscope run`` and ``hopscope demo`` call them, and hold no
physics or image maths of their own (that lives in ``calibration/``, ``tracker/`` and ``fitting/``).

Outputs of one step are written through :func:`hopscope.shared.fileio.atomic_path` (temporary file, then rename),
so a step that fails leaves none of its own files behind. Files of earlier steps that completed stay
(a track is still useful when the fit fails, and a rerun overwrites it).

World frame: x downrange, y up, metres (the rig's); times are the tracks' (rolling shutter included).
"""

from __future__ import annotations

import contextlib
import json
import os
from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np

from hopscope.calibration.rig import Rig, read_rig
from hopscope.fitting.air import Air
from hopscope.fitting.bb import BB, BBTolerance
from hopscope.fitting.estimate import DEFAULT_LOSS, ChronoPrior, FlightFit, fit_shots
from hopscope.fitting.fitfile import fit_to_dict, fit_to_json
from hopscope.fitting.predict import fitted_span_path
from hopscope.fitting.spin import add_spin_measured, spin_prior_for_fit_shot
from hopscope.shared.fileio import atomic_path, write_bytes_atomic, write_text_atomic
from hopscope.tracker.overlay import check_overlay_path, write_overlay
from hopscope.tracker.pipeline import TrackOptions, TrackResult, track_video
from hopscope.tracker.trackfile import replace_meta, track_to_csv

from .console import progress as progress_bar
from .decisions import Convention, FitDecisions, decide, with_decisions
from .folders import RunFolder, run_folder
from .inputs import expand_videos, marked_shot_spins, shots_from_track, shots_from_tracks
from .report import load_report_inputs, write_report
from .report.build import DEFAULT_RANGE_M
from .scene_calibration import calibrate_scene

# re-exported: their documented place (DEVELOPERS.md) and the tests' import
__all__ = ["calibrate_scene", "expand_videos", "shots_from_track"]

#: Output names of a run in its folder (one clip; several clips get ``track_<stem>.csv`` and so on).
TRACK_NAME = "track.csv"
OVERLAY_NAME = "overlay.png"
FIT_NAME = "fit.json"
REPORT_NAME = "report.html"
RIG_NAME = "rig.json"

FrameProgress = Callable[[Iterable, int | None], Iterable]


# ============================================================================================ results


@dataclass(frozen=True, eq=False)
class TrackedClip:
    """One clip tracked and written.

    Attributes
    ----------
    video : the clip.
    track_path : the track file written (schema ``hopscope.track/1``).
    overlay_path : the overlay written, or None.
    result : the tracker's result (track, summary, warnings).
    """

    video: Path
    track_path: Path
    overlay_path: Path | None
    result: TrackResult


@dataclass(frozen=True, eq=False)
class FittedTracks:
    """A joint fit of track files, written to ``fit_path``.

    Attributes
    ----------
    fit_path : the fit.json written.
    result : the fit (``converged`` False means the file says so too).
    track_paths : the track files fitted, in order.
    """

    fit_path: Path
    result: FlightFit
    track_paths: tuple[Path, ...]
    #: muzzle state and energy verdict (:func:`hopscope.decisions.decide`); ``result`` is its fit
    decisions: FitDecisions | None = None


@dataclass(frozen=True)
class RunPlan:
    """Where each output of a run goes.

    Attributes
    ----------
    videos : the clips, in order.
    track_paths, overlay_paths : per clip.
    fit_path, report_path : the joint fit and the combined report.
    rig_path : the rig's copy in the folder (the report links it, so the folder can move as a whole).
    """

    videos: tuple[Path, ...]
    track_paths: tuple[Path, ...]
    overlay_paths: tuple[Path, ...]
    fit_path: Path
    report_path: Path
    rig_path: Path


@dataclass(frozen=True)
class FitSettings:
    """How to fit tracks: the BB, the air, the laws, the chronograph prior and the robust loss.

    Attributes
    ----------
    bb, air : the BB and the air (SI inside).
    drag, lift, decay : law names (:mod:`fitting.laws`).
    chrono : a chronograph prior, or None.
    loss : robust loss asked for (used only when a residual calls for it).
    notes : warnings made before the fit (for example defaulted air conditions), shown first.
    tolerance : the BB's mass/diameter tolerance (None: the default for the BB).
    muzzle_x_m : the muzzle's downrange position, m (None: values at each shot's first tracked point).
    limit_j : the field's energy limit, J, or None.
    """

    bb: BB
    air: Air
    drag: str = "constant"
    lift: str = "linear"
    decay: str = "exponential"
    chrono: ChronoPrior | None = None
    loss: str = DEFAULT_LOSS
    notes: tuple[str, ...] = ()
    tolerance: BBTolerance | None = None
    muzzle_x_m: float | None = None
    limit_j: float | None = None


@dataclass(frozen=True)
class RunRequest:
    """Everything ``hopscope run`` needs, checked and in SI (built by :func:`hopscope.options.run_request`).

    Attributes
    ----------
    videos : the clips (expanded, existing, not empty).
    rig_path : the rig file.
    fit : how to fit.
    track : the tracker's options (timing, polarity).
    out : the output folder.
    range_m : distance of the report's predicted path, m.
    title : the report's title (None: the first clip's name).
    convention : muzzle height, band and engagement range of the report's prediction and hop verdict.
    """

    videos: tuple[Path, ...]
    rig_path: Path
    fit: FitSettings
    track: TrackOptions
    out: Path
    range_m: float = DEFAULT_RANGE_M
    title: str | None = None
    convention: Convention = Convention()


@dataclass(frozen=True, eq=False)
class RunOutcome:
    """What a run made.

    Attributes
    ----------
    plan : where each output went.
    clips : the tracked clips.
    fitted : the joint fit.
    report_path : the report written.
    written : every file the run wrote into the folder, in order.
    removed : files of the folder's earlier run that this run removed.
    """

    plan: RunPlan
    clips: tuple[TrackedClip, ...]
    fitted: FittedTracks
    report_path: Path
    written: tuple[Path, ...]
    removed: tuple[Path, ...] = ()


# ============================================================================================ inputs


def plan_run(videos: Sequence[Path], out_dir: str | os.PathLike[str]) -> RunPlan:
    """Output paths of a run: ``track.csv``/``overlay.png`` for one clip, ``track_<stem>.csv``/
    ``overlay_<stem>.png`` for several, plus ``fit.json`` and ``report.html``.

    Raises
    ------
    ValueError
        Two clips with the same file stem (their outputs would collide).
    """
    out = Path(out_dir)
    videos = tuple(Path(v) for v in videos)
    tracks: tuple[Path, ...]
    overlays: tuple[Path, ...]
    if len(videos) == 1:
        tracks, overlays = (out / TRACK_NAME,), (out / OVERLAY_NAME,)
    else:
        stems: dict[str, Path] = {}
        for v in videos:
            if v.stem in stems:
                raise ValueError(f"{v}: same file name stem as {stems[v.stem]} (their outputs would collide)")
            stems[v.stem] = v
        tracks = tuple(out / f"track_{v.stem}.csv" for v in videos)
        overlays = tuple(out / f"overlay_{v.stem}.png" for v in videos)
    return RunPlan(videos, tracks, overlays, out / FIT_NAME, out / REPORT_NAME, out / RIG_NAME)


# ============================================================================================ steps


def with_rig_warning(result: TrackResult, rig: Rig, rig_name: str) -> TrackResult:
    """``result`` with the rig's failed-drop-check warning (:attr:`Rig.drop_check_warning`, named by the rig
    file) first in its warnings and in its track's ``# warning:`` lines; unchanged for a rig that passed."""
    line = rig.drop_check_warning
    if line is None:
        return result
    line = f"{rig_name}: {line}"
    track = result.track
    if track is not None:
        track = replace_meta(track, warnings=(line, *track.meta.warnings))
    return replace(result, track=track, warnings=(line, *result.warnings))


def track_to_files(
    video: str | os.PathLike[str],
    rig: Rig,
    options: TrackOptions,
    *,
    track_path: str | os.PathLike[str],
    overlay_path: str | os.PathLike[str] | None = None,
    rig_name: str = "rig",
    progress: FrameProgress | None = None,
    on_warning: Callable[[str], None] | None = None,
) -> TrackedClip:
    """Track a clip through the rig and write its track file (and overlay), both or neither.

    ``on_warning`` is called with each of the tracker's warnings before anything is written (so they are
    shown even when no BB is found); a rig that failed its own drop check adds its warning first
    (:func:`with_rig_warning`), which the track file then carries on to the fit and the report.

    Raises
    ------
    OSError, ValueError
        Unreadable, empty or corrupt video, a rig for another image size, bad options (from the tracker),
        or no BB found in the clip (the message names the clip and the tracker's reason).
    """
    if overlay_path is not None:
        check_overlay_path(overlay_path)
    result = with_rig_warning(
        track_video(str(video), rig, options, progress=progress, rig_name=rig_name), rig, rig_name
    )
    if on_warning is not None:
        for w in result.warnings:
            on_warning(w)
    if result.track is None:
        raise ValueError(f"{video}: {result.reason}; no track written")
    with contextlib.ExitStack() as stack:
        tmp_track = stack.enter_context(atomic_path(track_path))
        if overlay_path is not None:
            tmp_overlay = stack.enter_context(atomic_path(overlay_path))
            write_overlay(tmp_overlay, result, str(video))
        tmp_track.write_text(track_to_csv(result.track), encoding="utf-8")
    return TrackedClip(
        Path(video), Path(track_path), None if overlay_path is None else Path(overlay_path), result
    )


def fit_track_files(
    track_paths: Sequence[str | os.PathLike[str]], fit_path: str | os.PathLike[str], settings: FitSettings
) -> FittedTracks:
    """Fit all shots of the track files jointly (one BB type) and write ``fit.json``.

    The fit's warnings are the settings' notes, then the tracks' own warnings (and one when different
    rigs mapped them), then the fitter's.

    Raises
    ------
    OSError, ValueError
        A missing or malformed track file (named), fewer points than parameters, bad options.
    """
    tracks = shots_from_tracks(track_paths)
    f = settings
    result = fit_shots(
        list(tracks.shots), bb=f.bb, air=f.air, drag=f.drag, lift=f.lift, decay=f.decay, chrono=f.chrono,
        loss=f.loss,
    )  # fmt: skip
    pre = (*f.notes, *tracks.warnings)
    if pre:
        result = replace(result, warnings=tuple(pre) + result.warnings)
    decisions = decide(result, tolerance=f.tolerance, muzzle_x_m=f.muzzle_x_m, limit_j=f.limit_j)
    text = with_decisions(_fit_text_with_spin(decisions.fit, tracks.records), decisions)
    write_text_atomic(fit_path, text)
    return FittedTracks(Path(fit_path), decisions.fit, tuple(Path(p) for p in track_paths), decisions)


def _fit_text_with_spin(result: FlightFit, records: Sequence[dict]) -> str:
    """``fit.json`` text, with ``shots[i].spin_measured`` for the shots of marked-BB tracks (polarity
    ``marked``): the spin from their brightness flicker (:mod:`hopscope.fitting.spin`)."""
    doc = fit_to_dict(result, inputs=records)
    radius_m = 0.5 * float(doc["bb"]["diameter_m"])
    shots = {s["label"]: s for s in doc["shots"]}
    spins = marked_shot_spins(
        records, prior_for=lambda label: spin_prior_for_fit_shot(shots[label], radius_m=radius_m)
    )
    if not spins:
        return fit_to_json(result, inputs=records)
    return json.dumps(add_spin_measured(doc, spins), indent=2, ensure_ascii=False, allow_nan=False) + "\n"


def fitted_paths_px(fit: FlightFit, rig: Rig, *, points: int = 200) -> dict[str, np.ndarray]:
    """Each fitted shot's path over its tracked span, projected back into the image through the rig.

    Returns {shot label: (M, 2) pixel points (u, v), OpenCV order}. Prediction is the fitter's
    (:func:`fitting.predict.predict_path`), projection the rig's (:meth:`calibration.rig.Rig.world_to_pixel`).
    """
    out = {}
    for i, shot in enumerate(fit.shots):
        path = fitted_span_path(fit, shot=i, points=points)
        out[shot.label] = rig.world_to_pixel(np.column_stack([path.x_m, path.y_m]))
    return out


def overlay_with_fit(clip: TrackedClip, fit: FlightFit, rig: Rig) -> None:
    """Rewrite a clip's overlay with its shots' fitted paths drawn in (atomically; no-op without overlay)."""
    if clip.overlay_path is None:
        return
    paths = fitted_paths_px(fit, rig)
    prefix = f"{clip.track_path.name}#"
    mine = [uv for label, uv in paths.items() if label.startswith(prefix)]
    with atomic_path(clip.overlay_path) as tmp:
        write_overlay(tmp, clip.result, str(clip.video), fitted_uv=mine)


def sibling_links(report_path: Path, paths: Iterable[Path | None]) -> tuple[tuple[str, str], ...]:
    """(label, href) links from the report to files beside it (hrefs relative to the report's folder)."""
    base = report_path.parent.resolve()
    out = []
    for p in paths:
        if p is None:
            continue
        try:
            href = os.path.relpath(Path(p).resolve(), base)
        except ValueError:  # another drive (Windows)
            href = Path(p).resolve().as_uri()
        out.append((Path(p).name, Path(href).as_posix()))
    return tuple(out)


# ============================================================================================ run


def run_to_folder(
    request: RunRequest,
    *,
    folder: RunFolder | None = None,
    on_warning: Callable[[str], None] = lambda _m: None,
) -> RunOutcome:
    """Track every clip, fit them jointly, draw the overlays and write the report into ``request.out``.

    The folder is held for the run (:func:`hopscope.folders.run_folder`: a lock, the earlier run's files
    removed, a manifest of what this run wrote) unless the caller already holds it (``folder``). The rig
    is copied into the folder, so the report's link to it survives moving the folder. ``on_warning`` gets
    the tracker's warnings as they come (the fit carries them too).

    Raises
    ------
    OSError, ValueError
        Unreadable inputs, no BB in a clip, another run holding the folder.
    """
    rig = read_rig(request.rig_path)
    plan = plan_run(request.videos, request.out)
    if folder is None:
        with run_folder(request.out, keep=(request.rig_path, *request.videos), on_warning=on_warning) as held:
            return _run_in(request, rig, plan, held, on_warning)
    return _run_in(request, rig, plan, folder, on_warning)


def _run_in(request: RunRequest, rig: Rig, plan: RunPlan, folder: RunFolder, on_warning) -> RunOutcome:
    n = len(plan.videos)
    clips: list[TrackedClip] = []
    for i, (video, track_path, overlay_path) in enumerate(
        zip(plan.videos, plan.track_paths, plan.overlay_paths, strict=True)
    ):
        desc = "tracking" if n == 1 else f"tracking {i + 1}/{n}"

        def bar(frames, total, desc=desc):
            return progress_bar(frames, total=total, desc=desc, unit="frame")

        def warn_clip(w: str, video: Path = video) -> None:
            on_warning(f"{video.name}: {w}" if n > 1 else w)

        clip = track_to_files(
            video, rig, request.track, track_path=track_path, rig_name=str(request.rig_path), progress=bar,
            on_warning=warn_clip,
        )  # fmt: skip
        folder.own(track_path)
        # the overlay is drawn once, after the fit, with the fitted path in it
        clips.append(replace(clip, overlay_path=overlay_path))
    fitted = fit_track_files(plan.track_paths, plan.fit_path, request.fit)
    folder.own(plan.fit_path)
    for clip in clips:
        overlay_with_fit(clip, fitted.result, rig)
        folder.own(clip.overlay_path)
    if request.rig_path.resolve() != plan.rig_path.resolve():  # the report links the folder's own copy
        write_bytes_atomic(plan.rig_path, request.rig_path.read_bytes())
        folder.own(plan.rig_path)
    links = sibling_links(
        plan.report_path, [*plan.overlay_paths, *plan.track_paths, plan.fit_path, plan.rig_path]
    )
    title = request.title or (plan.videos[0].stem if n == 1 else f"{n} clips")
    inputs = load_report_inputs(
        plan.fit_path, track_paths=plan.track_paths, rig_path=plan.rig_path, range_m=request.range_m,
        links=links, title=title, limit_j=request.fit.limit_j, convention=request.convention,
    )  # fmt: skip
    folder.own(*write_report(plan.report_path, inputs, figures_dir=plan.report_path.parent))
    return RunOutcome(plan, tuple(clips), fitted, plan.report_path, folder.owned, folder.removed)
