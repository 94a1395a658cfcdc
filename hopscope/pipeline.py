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
import os
from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np

from hopscope.calibration.grid import GridSpec
from hopscope.calibration.images import VIDEO_SUFFIXES, Progress, no_progress
from hopscope.calibration.pipeline import CalibrationRun, calibrate_files
from hopscope.calibration.rig import Rig, rig_to_json
from hopscope.fitting.air import Air
from hopscope.fitting.bb import BB
from hopscope.fitting.estimate import DEFAULT_LOSS, ChronoPrior, FlightFit, fit_shots
from hopscope.fitting.fitfile import fit_to_json
from hopscope.fitting.observe import ShotData
from hopscope.fitting.predict import predict_path
from hopscope.shared.fileio import atomic_path, write_text_atomic
from hopscope.shared.units import m_to_mm, mm_to_m, ms_to_s, s_to_ms
from hopscope.tracker.overlay import check_overlay_path, write_overlay
from hopscope.tracker.pipeline import TrackOptions, TrackResult, track_video
from hopscope.tracker.trackfile import read_track, track_to_csv

from . import __version__
from .report import load_report_inputs, write_report
from .report.build import DEFAULT_RANGE_M, SPAN_RANGE_M

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


@dataclass(frozen=True)
class RunPlan:
    """Where each output of a run goes.

    Attributes
    ----------
    videos : the clips, in order.
    track_paths, overlay_paths : per clip.
    fit_path, report_path : the joint fit and the combined report.
    """

    videos: tuple[Path, ...]
    track_paths: tuple[Path, ...]
    overlay_paths: tuple[Path, ...]
    fit_path: Path
    report_path: Path


# ============================================================================================ inputs


def expand_videos(items: Sequence[str | os.PathLike[str]], *, option: str = "VIDEO") -> tuple[Path, ...]:
    """Expand clip arguments: files as given, folders to their video files (sorted by name).

    Raises
    ------
    FileNotFoundError
        An item that does not exist.
    ValueError
        A folder without video files, an empty file, or the same clip twice.
    """
    out: list[Path] = []
    for item in items:
        p = Path(item)
        if p.is_dir():
            found = sorted(f for f in p.iterdir() if f.is_file() and f.suffix.lower() in VIDEO_SUFFIXES)
            if not found:
                raise ValueError(f"{p}: the folder holds no video files ({', '.join(VIDEO_SUFFIXES)})")
            out += found
        elif p.is_file():
            out.append(p)
        else:
            raise FileNotFoundError(f"{p}: no such video file or folder ({option})")
    for p in out:
        if p.stat().st_size == 0:
            raise ValueError(f"{p}: the video file is empty")
    seen: dict[Path, Path] = {}
    for p in out:
        key = p.resolve()
        if key in seen:
            raise ValueError(f"{p}: the same clip is given twice ({option})")
        seen[key] = p
    if not out:
        raise ValueError(f"{option}: no clips given")
    return tuple(out)


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
    return RunPlan(videos, tracks, overlays, out / FIT_NAME, out / REPORT_NAME)


# ============================================================================================ steps


def calibrate_scene(
    rendered,
    rig_path: str | os.PathLike[str],
    *,
    seed: int = 0,
    parallax_mm: float = 0.0,
    parallax_sigma_mm: float = 0.0,
    progress: Progress = no_progress,
) -> CalibrationRun:
    """Calibrate from a rendered scene's files as a user would (``hopscope calibrate``), write the rig.

    The grid is given as the user would type it (inner corners, square side in mm, converted back to m as
    the command does); the lens views are the rendered lens images, each plane view is ``IMAGE:OFFSET_M``,
    and the drop clip (when the scene has one) gives the g / level check.

    Parameters
    ----------
    rendered : :class:`hopscope.scenes.RenderedScene`.
    rig_path : where to write ``rig.json``.
    seed : seed of the calibration's ensemble resampling.
    parallax_mm, parallax_sigma_mm : how far the boards stood behind the flight line and its standard
        uncertainty, mm, as for ``hopscope calibrate --parallax-mm/--parallax-sigma-mm``.
    progress : wraps the lens views' iterable (a progress bar).

    Returns
    -------
    CalibrationRun (rig, lens, figures).

    Notes
    -----
    OpenCV runs single-threaded for the calibration (restored afterwards): with its worker threads the
    lens solution differs between runs in the last digits, and the demo promises identical files for the
    same seed.
    """
    board = rendered.truth["board"]
    square_mm = m_to_mm(float(board["square_m"]))
    spec = GridSpec(int(board["cols"]), int(board["rows"]), mm_to_m(square_mm))
    planes = [f"{path}:{offset!r}" for path, offset in rendered.plane_views]
    with _opencv_threads(1):
        run = calibrate_files(
            [str(p) for p in rendered.lens_view_paths],
            planes,
            spec,
            drop=None if rendered.drop_clip_path is None else str(rendered.drop_clip_path),
            # the drop is filmed with the flight's camera: the same rolling-shutter readout, as the user
            # enters it (ms on the command line)
            drop_readout_s=ms_to_s(s_to_ms(float(rendered.truth["camera"]["readout_s"]))),
            plane_z_m=mm_to_m(parallax_mm),
            plane_z_sigma_m=mm_to_m(parallax_sigma_mm),
            rng=seed,
            provenance={
                "tool": f"hopscope {__version__}",
                "seed": seed,
                "scene": rendered.truth.get("scene"),
            },
            progress=progress,
        )
    write_text_atomic(rig_path, rig_to_json(run.rig))
    return run


@contextlib.contextmanager
def _opencv_threads(n: int):
    """Run the block with OpenCV limited to ``n`` threads, then restore the previous setting."""
    import cv2

    before = cv2.getNumThreads()
    cv2.setNumThreads(n)
    try:
        yield
    finally:
        cv2.setNumThreads(before)


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
    shown even when no BB is found).

    Raises
    ------
    OSError, ValueError
        Unreadable, empty or corrupt video, a rig for another image size, bad options (from the tracker),
        or no BB found in the clip (the message names the clip and the tracker's reason).
    """
    if overlay_path is not None:
        check_overlay_path(overlay_path)
    result = track_video(str(video), rig, options, progress=progress, rig_name=rig_name)
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


def shots_from_track(path: str | os.PathLike[str]) -> tuple[list[ShotData], dict, list[str]]:
    """ShotData for every shot of a track file (labelled ``name#shot``), its input record and its warnings."""
    track = read_track(path)
    name = Path(path).name
    shots = []
    for sid in track.shot_ids:
        t = track.select_shot(sid)
        offsets = t.cal_offsets_m() if t.n_ensemble else None
        try:
            shots.append(
                ShotData(t.t_s, t.x_m, t.y_m, t.sigma_m, offsets, f"{name}#{sid}", t.meta.rig_digest)
            )
        except ValueError as exc:
            raise ValueError(f"{path}: {exc}") from None
    record = {"path": str(path), "rig_digest": track.meta.rig_digest, "shots": [s.label for s in shots]}
    warns = [f"{name}: {w}" for w in track.meta.warnings]
    return shots, record, warns


def fit_track_files(
    track_paths: Sequence[str | os.PathLike[str]],
    fit_path: str | os.PathLike[str],
    *,
    bb: BB,
    air: Air,
    drag: str = "constant",
    lift: str = "linear",
    decay: str = "exponential",
    chrono: ChronoPrior | None = None,
    loss: str = DEFAULT_LOSS,
    notes: Sequence[str] = (),
) -> FittedTracks:
    """Fit all shots of the track files jointly (one BB type) and write ``fit.json``.

    ``notes`` are warnings made before the fit (for example defaulted air conditions); they go first in
    the fit's warnings, followed by the tracks' own warnings and the fitter's.

    Raises
    ------
    OSError, ValueError
        A missing or malformed track file (named), fewer points than parameters, bad options.
    """
    shots: list[ShotData] = []
    records = []
    pre = list(notes)
    for path in track_paths:
        s, rec, w = shots_from_track(str(path))
        shots += s
        records.append(rec)
        pre += w
    result = fit_shots(shots, bb=bb, air=air, drag=drag, lift=lift, decay=decay, chrono=chrono, loss=loss)
    if pre:
        result = replace(result, warnings=tuple(pre) + result.warnings)
    write_text_atomic(fit_path, fit_to_json(result, inputs=records))
    return FittedTracks(Path(fit_path), result, tuple(Path(p) for p in track_paths))


def fitted_paths_px(fit: FlightFit, rig: Rig, *, points: int = 200) -> dict[str, np.ndarray]:
    """Each fitted shot's path over its tracked span, projected back into the image through the rig.

    Returns {shot label: (M, 2) pixel points (u, v), OpenCV order}. Prediction is the fitter's
    (:func:`fitting.predict.predict_path`), projection the rig's (:meth:`calibration.rig.Rig.world_to_pixel`).
    """
    out = {}
    for i, shot in enumerate(fit.shots):
        span = float(shot.residual_t_s[-1] - shot.t0_s)
        span = max(span, 1e-6)
        path = predict_path(
            fit, shot=i, range_m=SPAN_RANGE_M, max_time_s=span, n_samples=0, sample_s=span / points
        )
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


def report_to_file(
    report_path: str | os.PathLike[str],
    fit_path: str | os.PathLike[str],
    *,
    track_paths: Sequence[str | os.PathLike[str]] = (),
    rig_path: str | os.PathLike[str] | None = None,
    range_m: float = DEFAULT_RANGE_M,
    links: Sequence[tuple[str, str]] = (),
    title: str | None = None,
    write_figures: bool = True,
) -> Path:
    """Write the HTML report of a fit (with its tracks and rig) atomically; returns its path.

    With ``write_figures`` the report's figures are also written beside it (``figure_<name>.png``).
    """
    inputs = load_report_inputs(
        fit_path,
        track_paths=[str(p) for p in track_paths],
        rig_path=rig_path,
        range_m=range_m,
        links=links,
        title=title,
    )
    return write_report(report_path, inputs, figures_dir=Path(report_path).parent if write_figures else None)


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
