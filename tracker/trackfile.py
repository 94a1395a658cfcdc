"""The track file (``track.csv``, schema ``hopscope.track/1``): one row per BB detection.

Layout (text, UTF-8)::

    # schema: hopscope.track/1
    # video: clip.mp4
    # timing_source: container            (or: override)
    # frame_rate_hz: 240                  (frame rate used: the override, or the container's mean rate)
    # readout_s: 0.004                    (rolling-shutter top-to-bottom readout; 0 = global shutter)
    # exposure_s: 0.001                   (empty when unknown: t_s is then the frame's start time)
    # rig_digest: 3f2a...
    # image_size: 1920x1080
    # polarity: bright                    (bright or dark: how the BB differed from the background)
    # warning: <one line per warning>
    frame,t_s,u_px,v_px,x_m,y_m,sigma_px,sigma_m,shot,brightness,streak_len_px,flags,cal_dx_m_01,cal_dy_m_01,...

``u_px, v_px`` are OpenCV pixel coordinates (x right, y down, centre of the top-left pixel at (0, 0)).
``x_m, y_m`` are world coordinates on the flight plane (x downrange, y up). ``sigma_px`` is the per-axis
standard uncertainty of the image position; ``sigma_m`` the same mapped to the plane (per axis, RMS over
the two axes). ``t_s`` is seconds since the clip's first frame, plus the row's rolling-shutter offset,
plus half the exposure when the exposure is known. ``cal_dx_m_k, cal_dy_m_k`` (k = 01..K) are the point
mapped under the rig's k-th ensemble member minus the nominal mapping (K may be 0). ``flags`` is empty or
a ``;``-separated set of the tokens in :data:`FLAG_TOKENS`.

Stage I/O serialises to and from text; the app writes the file atomically.
"""

from __future__ import annotations

import dataclasses
import io
import math
import os
import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from hopscope.shared.parse import parse_finite, parse_int

SCHEMA = "hopscope.track/1"

#: Columns every track file has, in order (the calibration offsets follow).
BASE_COLUMNS: tuple[str, ...] = (
    "frame",
    "t_s",
    "u_px",
    "v_px",
    "x_m",
    "y_m",
    "sigma_px",
    "sigma_m",
    "shot",
    "brightness",
    "streak_len_px",
    "flags",
)

#: Flag tokens a row may carry.
FLAG_TOKENS: frozenset[str] = frozenset(
    {
        "saturated",  # the blob's peak reached the sensor's top code value
        "edge",  # the fit window touched the image border
        "streak",  # the blob was fitted as a motion-blur streak (length > BB image diameter)
        "weak",  # signal-to-noise below 10: position less trustworthy than sigma_px suggests
        "outside_coverage",  # the point maps outside the rig's calibrated area
        "marked",  # a marked BB (half dark) located by its outline; brightness swings as the mark turns
    }
)

TIMING_SOURCES = ("container", "override")

_FLOAT_FIELDS = ("t_s", "u_px", "v_px", "x_m", "y_m", "sigma_px", "sigma_m", "brightness", "streak_len_px")
_INT_FIELDS = ("frame", "shot")
_CAL_RE = re.compile(r"^cal_d([xy])_m_(\d+)$")


@dataclass(frozen=True)
class TrackMeta:
    """Provenance of a track.

    Attributes
    ----------
    video : str
        The source video as given by the user.
    timing_source : str
        ``"container"`` (per-frame container timestamps) or ``"override"`` (``--fps``).
    frame_rate_hz : float
        Frame rate used, Hz: the override, or the container's mean rate over the clip.
    readout_s : float
        Rolling-shutter readout time top to bottom, s (0 for a global shutter).
    exposure_s : float or None
        Exposure time, s, when known (``t_s`` is then at mid-exposure).
    rig_digest : str
        ``Rig.digest`` of the rig used to map pixels to metres.
    image_size : tuple of int
        (width, height) of the video, px.
    warnings : tuple of str
        One line each; carried as ``# warning:`` header lines.
    polarity : str
        ``"bright"`` or ``"dark"``: how the BB differed from the background (empty when not recorded).
    """

    video: str
    timing_source: str
    frame_rate_hz: float
    readout_s: float
    exposure_s: float | None
    rig_digest: str
    image_size: tuple[int, int]
    warnings: tuple[str, ...] = ()
    polarity: str = ""
    schema: str = SCHEMA

    def __post_init__(self) -> None:
        if self.timing_source not in TIMING_SOURCES:
            raise ValueError(f"timing_source: expected one of {TIMING_SOURCES}, got {self.timing_source!r}")
        if not (math.isfinite(self.frame_rate_hz) and self.frame_rate_hz > 0):
            raise ValueError(f"frame_rate_hz: expected a positive finite rate, got {self.frame_rate_hz!r}")
        if not (math.isfinite(self.readout_s) and self.readout_s >= 0):
            raise ValueError(f"readout_s: expected a finite value >= 0, got {self.readout_s!r}")
        if self.exposure_s is not None and not (math.isfinite(self.exposure_s) and self.exposure_s > 0):
            raise ValueError(f"exposure_s: expected a positive finite value or None, got {self.exposure_s!r}")
        for w in self.warnings:
            if "\n" in w or "\r" in w:
                raise ValueError("warnings: each warning must be one line")
        object.__setattr__(self, "warnings", tuple(self.warnings))
        if self.polarity not in ("", "bright", "dark", "marked"):
            raise ValueError(f"polarity: expected 'bright', 'dark', 'marked' or empty, got {self.polarity!r}")
        object.__setattr__(self, "image_size", (int(self.image_size[0]), int(self.image_size[1])))


def _frozen(a: np.ndarray) -> np.ndarray:
    a = np.array(a, copy=True)
    a.setflags(write=False)
    return a


@dataclass(frozen=True)
class Track:
    """BB detections of one clip, linked into shots.

    All per-point arrays have length N (one entry per detection), sorted by (shot, t_s).

    Attributes
    ----------
    frame : ndarray of int
        Frame index in the clip (0-based).
    t_s : ndarray of float
        Time of the point, s since the clip's first frame (rolling-shutter row offset and mid-exposure
        included, see :class:`TrackMeta`).
    u_px, v_px : ndarray of float
        Image position, px (OpenCV order: x right, y down; centre of the top-left pixel at (0, 0)).
    x_m, y_m : ndarray of float
        Position on the flight plane, m (world frame: x downrange, y up).
    sigma_px : ndarray of float
        Per-axis standard uncertainty of (u, v), px.
    sigma_m : ndarray of float
        Per-axis standard uncertainty of (x, y), m (``sigma_px`` mapped through the rig's Jacobian).
    shot : ndarray of int
        Track id: several shots in one clip become several ids (0, 1, ...).
    brightness : ndarray of float
        The BB's light per px² of its apparent image, divided by the exposure when ``meta.exposure_s`` is
        known: grey levels per second of exposure (grey levels without a known exposure). The integrated
        light is divided by π r², r the BB's image radius at the point, so a ball that comes nearer looks
        bigger, not brighter. For a marked BB (flag ``marked``) the light is the ball's own:
        Σ (frame − background) + Σ m·background over the pixels the fitted ball covers (m its coverage
        over the exposure), which adds back the wall texture it hides instead of mixing that in, and r is
        the fitted ball radius smoothed along the shot; it swings with the mark's turn (the spin signal).
        For a plain bright or dark BB it is the signal above the background, Σ (frame − background)
        (negative for a dark BB), over r² from the rig's scale at the point.
    streak_len_px : ndarray of float
        Fitted motion-blur length, px (0 for a round image).
    flags : tuple of str
        Per point: empty, or ``;``-separated tokens from :data:`FLAG_TOKENS`.
    cal_dx_m, cal_dy_m : ndarray of float, shape (K, N)
        Point mapped under ensemble rig k minus the nominal mapping, m.
    meta : TrackMeta
        Provenance.
    """

    frame: np.ndarray
    t_s: np.ndarray
    u_px: np.ndarray
    v_px: np.ndarray
    x_m: np.ndarray
    y_m: np.ndarray
    sigma_px: np.ndarray
    sigma_m: np.ndarray
    shot: np.ndarray
    brightness: np.ndarray
    streak_len_px: np.ndarray
    flags: tuple[str, ...]
    cal_dx_m: np.ndarray
    cal_dy_m: np.ndarray
    meta: TrackMeta = field(repr=False)

    def __post_init__(self) -> None:
        n = len(np.asarray(self.frame))
        for name in _INT_FIELDS:
            a = np.asarray(getattr(self, name))
            if a.shape != (n,):
                raise ValueError(f"{name}: expected shape ({n},), got {a.shape}")
            if a.size and not np.issubdtype(a.dtype, np.integer):
                if not np.all(np.isfinite(a)) or not np.all(a == np.round(a)):
                    raise ValueError(f"{name}: expected integers")
            object.__setattr__(self, name, _frozen(a.astype(np.int64)))
        for name in _FLOAT_FIELDS:
            a = np.asarray(getattr(self, name), dtype=float)
            if a.shape != (n,):
                raise ValueError(f"{name}: expected shape ({n},), got {a.shape}")
            if not np.all(np.isfinite(a)):
                raise ValueError(f"{name}: non-finite value")
            object.__setattr__(self, name, _frozen(a))
        if np.any(self.sigma_px <= 0) or np.any(self.sigma_m <= 0):
            raise ValueError("sigma_px, sigma_m: expected positive uncertainties")
        flags = tuple(str(f) for f in self.flags)
        if len(flags) != n:
            raise ValueError(f"flags: expected {n} entries, got {len(flags)}")
        for f in flags:
            bad = {tok for tok in f.split(";") if tok} - FLAG_TOKENS
            if bad:
                raise ValueError(f"flags: unknown token(s) {sorted(bad)}")
        object.__setattr__(self, "flags", flags)
        for name in ("cal_dx_m", "cal_dy_m"):
            a = np.asarray(getattr(self, name), dtype=float)
            if a.ndim != 2 or a.shape[1] != n:
                raise ValueError(f"{name}: expected shape (K, {n}), got {a.shape}")
            if not np.all(np.isfinite(a)):
                raise ValueError(f"{name}: non-finite value")
            object.__setattr__(self, name, _frozen(a))
        if self.cal_dx_m.shape != self.cal_dy_m.shape:
            raise ValueError(
                f"cal_dx_m {self.cal_dx_m.shape} and cal_dy_m {self.cal_dy_m.shape} differ in shape"
            )
        for s in np.unique(self.shot):
            t = self.t_s[self.shot == s]
            if np.any(np.diff(t) <= 0):
                raise ValueError(f"t_s: times within shot {int(s)} are not strictly increasing")

    @property
    def n_points(self) -> int:
        """Number of detections N."""
        return int(self.frame.size)

    @property
    def n_ensemble(self) -> int:
        """Number K of calibration-ensemble offsets per point."""
        return int(self.cal_dx_m.shape[0])

    @property
    def shot_ids(self) -> tuple[int, ...]:
        """The shot ids present, ascending."""
        return tuple(int(s) for s in np.unique(self.shot))

    def select_shot(self, shot: int) -> Track:
        """The points of one shot, as a Track with the same metadata."""
        m = self.shot == shot
        if not np.any(m):
            raise ValueError(f"shot: no shot {shot} in this track (have {list(self.shot_ids)})")
        kw = {name: getattr(self, name)[m] for name in _INT_FIELDS + _FLOAT_FIELDS}
        return Track(
            **kw,
            flags=tuple(f for f, keep in zip(self.flags, m, strict=True) if keep),
            cal_dx_m=self.cal_dx_m[:, m],
            cal_dy_m=self.cal_dy_m[:, m],
            meta=self.meta,
        )

    def cal_offsets_m(self) -> np.ndarray:
        """Calibration offsets as one (K, N, 2) array (dx, dy), m."""
        return np.stack([self.cal_dx_m, self.cal_dy_m], axis=-1)


def _fmt(x: float) -> str:
    return repr(float(x))


def track_to_csv(track: Track) -> str:
    """Serialise a track to ``track.csv`` text (see the module docstring for the layout)."""
    m = track.meta
    out = io.StringIO()
    out.write(f"# schema: {m.schema}\n")
    out.write(f"# video: {_one_line(m.video)}\n")
    out.write(f"# timing_source: {m.timing_source}\n")
    out.write(f"# frame_rate_hz: {_fmt(m.frame_rate_hz)}\n")
    out.write(f"# readout_s: {_fmt(m.readout_s)}\n")
    out.write(f"# exposure_s: {'' if m.exposure_s is None else _fmt(m.exposure_s)}\n")
    out.write(f"# rig_digest: {m.rig_digest}\n")
    out.write(f"# image_size: {m.image_size[0]}x{m.image_size[1]}\n")
    if m.polarity:
        out.write(f"# polarity: {m.polarity}\n")
    for w in m.warnings:
        out.write(f"# warning: {w}\n")
    k = track.n_ensemble
    cal_cols = []
    for i in range(1, k + 1):
        cal_cols += [f"cal_dx_m_{i:02d}", f"cal_dy_m_{i:02d}"]
    out.write(",".join(BASE_COLUMNS + tuple(cal_cols)) + "\n")
    for j in range(track.n_points):
        row = [str(int(track.frame[j]))]
        row += [
            _fmt(getattr(track, f)[j]) for f in ("t_s", "u_px", "v_px", "x_m", "y_m", "sigma_px", "sigma_m")
        ]
        row.append(str(int(track.shot[j])))
        row += [_fmt(track.brightness[j]), _fmt(track.streak_len_px[j]), track.flags[j]]
        for i in range(k):
            row += [_fmt(track.cal_dx_m[i, j]), _fmt(track.cal_dy_m[i, j])]
        out.write(",".join(row) + "\n")
    return out.getvalue()


def _one_line(s: str) -> str:
    return " ".join(str(s).split())


def track_from_csv(text: str, source: str = "<track>") -> Track:
    """Parse ``track.csv`` text.

    Parameters
    ----------
    text : str
        The file's contents.
    source : str
        Name used in error messages (the file path).

    Raises
    ------
    ValueError
        One line naming ``source``, the line number and the field: another schema, a missing column, a
        non-finite or unparsable value, an unknown flag, or non-increasing times within a shot.
    """
    header: dict[str, str] = {}
    warnings: list[str] = []
    lines = text.splitlines()
    columns: list[str] | None = None
    col_line = 0
    rows: list[tuple[int, list[str]]] = []
    for lineno, raw in enumerate(lines, start=1):
        line = raw.strip()
        if not line:
            continue
        if columns is None and line.startswith("#"):
            body = line[1:].strip()
            key, sep, value = body.partition(":")
            if not sep:
                continue
            key, value = key.strip(), value.strip()
            if key == "warning":
                warnings.append(value)
            else:
                header[key] = value
            continue
        if columns is None:
            columns = [c.strip() for c in line.split(",")]
            col_line = lineno
            continue
        if line.startswith("#"):
            continue
        rows.append((lineno, raw.split(",")))

    schema = header.get("schema")
    if schema is None:
        raise ValueError(f"{source}: line 1: schema: missing '# schema: {SCHEMA}' header (not a track file?)")
    if schema != SCHEMA:
        raise ValueError(f"{source}: line 1: schema: expected {SCHEMA}, got {schema!r}")
    if columns is None:
        raise ValueError(f"{source}: line {len(lines) + 1}: columns: no column header line")
    for c in BASE_COLUMNS:
        if c not in columns:
            raise ValueError(f"{source}: line {col_line}: {c}: missing column")
    if len(set(columns)) != len(columns):
        raise ValueError(f"{source}: line {col_line}: columns: duplicate column names")
    cal_x: dict[int, int] = {}
    cal_y: dict[int, int] = {}
    for idx, c in enumerate(columns):
        mm = _CAL_RE.match(c)
        if mm:
            (cal_x if mm.group(1) == "x" else cal_y)[int(mm.group(2))] = idx
    k = len(cal_x)
    expected = set(range(1, k + 1))
    if set(cal_x) != expected or set(cal_y) != expected:
        raise ValueError(
            f"{source}: line {col_line}: cal_dx_m_01..: calibration offset columns must come in "
            f"pairs numbered 01..K (found dx {sorted(cal_x)}, dy {sorted(cal_y)})"
        )

    meta = _meta_from_header(header, warnings, source)
    col = {c: i for i, c in enumerate(columns)}
    n = len(rows)
    ints = {f: np.zeros(n, dtype=np.int64) for f in _INT_FIELDS}
    floats = {f: np.zeros(n) for f in _FLOAT_FIELDS}
    flags: list[str] = []
    cdx = np.zeros((k, n))
    cdy = np.zeros((k, n))
    for j, (lineno, cells) in enumerate(rows):
        if len(cells) != len(columns):
            raise ValueError(
                f"{source}: line {lineno}: row: expected {len(columns)} fields, got {len(cells)}"
            )
        for f in _INT_FIELDS:
            ints[f][j] = parse_int(cells[col[f]], f"{source}: line {lineno}: {f}")
        for f in _FLOAT_FIELDS:
            floats[f][j] = parse_finite(cells[col[f]], f"{source}: line {lineno}: {f}")
        for f in ("sigma_px", "sigma_m"):
            if floats[f][j] <= 0:
                raise ValueError(
                    f"{source}: line {lineno}: {f}: expected a positive value, got {cells[col[f]]!r}"
                )
        fl = cells[col["flags"]].strip()
        bad = {tok for tok in fl.split(";") if tok} - FLAG_TOKENS
        if bad:
            raise ValueError(f"{source}: line {lineno}: flags: unknown token(s) {sorted(bad)}")
        flags.append(fl)
        for i in range(k):
            cdx[i, j] = parse_finite(cells[cal_x[i + 1]], f"{source}: line {lineno}: cal_dx_m_{i + 1:02d}")
            cdy[i, j] = parse_finite(cells[cal_y[i + 1]], f"{source}: line {lineno}: cal_dy_m_{i + 1:02d}")
    # Times within a shot must increase, in file order.
    last: dict[int, tuple[float, int]] = {}
    for j, (lineno, _) in enumerate(rows):
        s = int(ints["shot"][j])
        t = floats["t_s"][j]
        if s in last and t <= last[s][0]:
            raise ValueError(
                f"{source}: line {lineno}: t_s: time {t!r} s does not increase within shot {s} "
                f"(line {last[s][1]} has {last[s][0]!r} s)"
            )
        last[s] = (t, lineno)
    order = np.lexsort((floats["t_s"], ints["shot"]))
    return Track(
        **{f: ints[f][order] for f in _INT_FIELDS},
        **{f: floats[f][order] for f in _FLOAT_FIELDS},
        flags=tuple(flags[i] for i in order),
        cal_dx_m=cdx[:, order],
        cal_dy_m=cdy[:, order],
        meta=meta,
    )


def _meta_from_header(header: dict[str, str], warnings: list[str], source: str) -> TrackMeta:
    def need(key: str) -> str:
        if key not in header:
            raise ValueError(f"{source}: line 1: {key}: missing '# {key}:' header line")
        return header[key]

    def num(key: str) -> float:
        return parse_finite(need(key), f"{source}: header: {key}")

    size = need("image_size")
    m = re.fullmatch(r"(\d+)x(\d+)", size)
    if not m:
        raise ValueError(f"{source}: header: image_size: expected WIDTHxHEIGHT, got {size!r}")
    exp = header.get("exposure_s", "")
    video, timing, digest = need("video"), need("timing_source"), need("rig_digest")
    rate, readout = num("frame_rate_hz"), num("readout_s")
    exposure = None if exp == "" else num("exposure_s")
    try:  # the values are numbers now; what TrackMeta still rejects is out of range
        return TrackMeta(
            video=video,
            timing_source=timing,
            frame_rate_hz=rate,
            readout_s=readout,
            exposure_s=exposure,
            rig_digest=digest,
            image_size=(int(m.group(1)), int(m.group(2))),
            warnings=tuple(warnings),
            polarity=header.get("polarity", ""),
        )
    except ValueError as exc:
        raise ValueError(f"{source}: header: {exc}") from None


def read_track(path: str | os.PathLike[str]) -> Track:
    """Read and validate a ``track.csv`` file.

    Raises
    ------
    OSError
        The file is missing or unreadable.
    ValueError
        The contents are invalid (one line naming the file, the line and the field).
    """
    p = Path(path)
    try:
        text = p.read_text(encoding="utf-8")
    except UnicodeDecodeError:
        raise ValueError(f"{p}: not a UTF-8 text file (not a track file?)") from None
    return track_from_csv(text, str(p))


def replace_meta(track: Track, **changes: Any) -> Track:
    """A copy of ``track`` with some metadata fields changed (e.g. extra warnings)."""
    return dataclasses.replace(track, meta=dataclasses.replace(track.meta, **changes))
