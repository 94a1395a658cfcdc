"""The app's inputs as the commands read them: clip lists, and track files as shots with unique labels.

A shot's label is ``NAME#SHOT``: NAME is the track file's name, or, when two given tracks share a name
(``a/track.csv`` and ``b/track.csv``), the shortest end of its path that tells them apart. ``fit``,
``profile`` and ``run`` label shots this way (:func:`shots_from_tracks`); the report finds a track's
shots in a fit by the same rule (:func:`match_track_to_fit`), so it needs neither the fit's working
folder nor the order of the tracks.
"""

from __future__ import annotations

import os
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from hopscope.calibration.images import VIDEO_SUFFIXES
from hopscope.fitting.observe import ShotData
from hopscope.fitting.spin import ShotSpin, SpinOptions, SpinPrior, measure_shot_spin
from hopscope.shared.files import folder_files
from hopscope.tracker.trackfile import Track, read_track

#: Two times closer than this are the same sample when a track is matched to a fit's residuals, s
#: (the fit file keeps times to full double precision; this allows for text round trips).
SAME_TIME_TOL_S = 1e-9


@dataclass(frozen=True)
class TrackShots:
    """The shots of several track files, labelled uniquely.

    Attributes
    ----------
    shots : every shot of every file, in file order.
    records : per file, ``{"path", "rig_digest", "shots": [labels]}`` (the fit file's ``inputs.tracks``).
    warnings : the tracks' own warnings (prefixed with the track's name), then one if the rigs differ.
    """

    shots: tuple[ShotData, ...]
    records: tuple[dict, ...]
    warnings: tuple[str, ...]


def track_names(paths: Sequence[str | os.PathLike[str]]) -> list[str]:
    """Names that tell the track files apart: the file name, or the shortest path end that is unique.

    Raises
    ------
    ValueError
        The same file given twice.
    """
    parts = [Path(p).resolve().parts for p in paths]
    seen: dict[tuple[str, ...], str] = {}
    for p, key in zip(paths, parts, strict=True):
        if key in seen:
            raise ValueError(f"{p}: the same track file is given twice")
        seen[key] = str(p)
    names = []
    for i, mine in enumerate(parts):
        k = 1
        while k < len(mine) and any(o[-k:] == mine[-k:] for j, o in enumerate(parts) if j != i):
            k += 1
        names.append("/".join(mine[-k:]))
    return names


def shots_from_track(
    path: str | os.PathLike[str], name: str | None = None
) -> tuple[list[ShotData], dict, list[str]]:
    """ShotData for every shot of a track file (labelled ``name#shot``; name defaults to the file name),
    its input record and its warnings (prefixed with the name)."""
    track = read_track(path)
    name = Path(path).name if name is None else name
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


def shots_from_tracks(paths: Sequence[str | os.PathLike[str]]) -> TrackShots:
    """All shots of the track files, uniquely labelled, with a warning when different rigs mapped them."""
    shots: list[ShotData] = []
    records: list[dict] = []
    warns: list[str] = []
    for path, name in zip(paths, track_names(paths), strict=True):
        s, rec, w = shots_from_track(path, name)
        shots += s
        records.append(rec)
        warns += w
    rig_warning = different_rigs_warning(records)
    if rig_warning:
        warns.append(rig_warning)
    return TrackShots(tuple(shots), tuple(records), tuple(warns))


def different_rigs_warning(records: Sequence[dict]) -> str:
    """A warning when the tracks were mapped through different rigs ("" when they share one)."""
    by_rig: dict[str, list[str]] = {}
    for rec in records:
        digest = rec.get("rig_digest")
        if digest:
            by_rig.setdefault(str(digest), []).append(Path(rec["path"]).name)
    if len(by_rig) < 2:
        return ""
    groups = "; ".join(f"rig {d[:12]}: {', '.join(names)}" for d, names in by_rig.items())
    return (
        f"the tracks come from {len(by_rig)} different rigs ({groups}): they are fitted as one BB type, "
        "each through its own calibration; check that this is what you meant"
    )


def match_track_to_fit(
    path: str | os.PathLike[str], track: Track, fit_labels: Sequence[str], fit_times: dict[str, np.ndarray]
) -> dict[str, int]:
    """Which of the fit's shots each shot of a track file is: {fit label: track shot id}.

    A shot matches the fit label ``END#SHOT`` whose END is the longest end of the track's path among
    the fit's labels, and only if its point times are the fit's residual times.

    Raises
    ------
    ValueError
        The track holds no shot of the fit, or a shot of the same label with other points (naming the
        file).
    """
    parts = Path(path).resolve().parts
    out: dict[str, int] = {}
    for sid in track.shot_ids:
        ends = ["/".join(parts[-k:]) + f"#{sid}" for k in range(len(parts), 0, -1)]
        label = next((e for e in ends if e in fit_labels), None)
        if label is None:
            continue
        t = track.select_shot(sid).t_s
        ft = fit_times[label]
        if t.shape != ft.shape or not np.allclose(t, ft, rtol=0.0, atol=SAME_TIME_TOL_S):
            raise ValueError(
                f"{path}: shot {sid} has {t.size} points at other times than the fit's shot {label} "
                f"({ft.size} points): not the track the fit was made from"
            )
        out[label] = sid
    if not out:
        shown = ", ".join(fit_labels[:4]) + (" ..." if len(fit_labels) > 4 else "")
        raise ValueError(f"{path}: none of its shots is in the fit (the fit's shots: {shown})")
    return out


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
            out += folder_files(p, VIDEO_SUFFIXES, what="video files", where=str(p))
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


def marked_shot_spins(
    records: Sequence[dict], *, prior_for: Callable[[str], SpinPrior | None] | None = None
) -> dict[str, ShotSpin]:
    """Spin from the brightness flicker of every shot of the marked-BB tracks (polarity ``marked``).

    ``records`` are the track records of :func:`shots_from_tracks` (``path``, ``shots`` labels in the
    track's shot order); ``prior_for(label)`` may give each shot's alias prior. Returns each measured shot's
    :class:`~hopscope.fitting.spin.ShotSpin` by label (a shot without a rate carries its reason); tracks of
    another polarity are skipped.
    """
    spins: dict[str, ShotSpin] = {}
    for rec in records:
        track = read_track(rec["path"])
        if track.meta.polarity != "marked":
            continue
        opts = SpinOptions(exposure_s=track.meta.exposure_s or 0.0)
        for label, sid in zip(rec["shots"], track.shot_ids, strict=True):
            pts = track.select_shot(sid)
            prior = prior_for(label) if prior_for is not None else None
            spins[label] = measure_shot_spin(
                pts.t_s, pts.brightness, first_t_s=pts.t_s[0], options=opts, prior=prior
            )
    return spins
