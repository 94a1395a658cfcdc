"""The scene's truth: what ``truth.json`` says, as small frozen dataclasses, read and checked by :func:`load_truth`.

The file's layout (schema ``hopscope.truth/1``) is described in the package docstring
(:mod:`hopscope.scenes`). :class:`SceneTruth` gives every part typed: numbers as floats, per-frame records as
column arrays (:class:`FramesTruth`), poses as arrays. ``truth[key]`` still reads the file's own nested
layout (``truth["flight"]["frames"]``) for code written against the JSON.

Notes
-----
All values SI (m, s, kg, K, Pa, rad, rad/s). World frame: x downrange, y up, z toward the camera, metres;
flight plane z = 0. Poses map X_cam = R · X + t. Pixel points are (u, v) with the centre of the top-left
pixel at (0, 0).
"""

from __future__ import annotations

import dataclasses
import json
import math
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from hopscope.fitting.air import Air
from hopscope.shared.parse import json_finite

from .spec import BoardSpec, SceneSpec
from .specfile import spec_from_dict

TRUTH_SCHEMA = "hopscope.truth/1"

_CLIP_KEYS = ("file", "fps", "n_frames", "path", "frames")
_TRUTH_KEYS = ("schema", "scene", "camera", "board", "lens_views", "plane_views", "drop", "flight")
_PATH_COLUMNS = ("t_s", "x_m", "y_m", "z_m", "speed_mps")
_FRAME_COLUMNS = (
    "frame",
    "t_s",
    "t_mid_s",
    "u_px",
    "v_px",
    "x_m",
    "y_m",
    "z_m",
    "visible",
    "radius_px",
    "streak_len_px",
    "spin_radps",
    "spin_angle_rad",
)


def _num(data: dict, key: str, where: str) -> float:
    return json_finite(data.get(key), f"{where}.{key}")


def _array(value: Any, where: str, shape: tuple[int, ...] | None = None) -> np.ndarray:
    try:
        arr = np.asarray(value, dtype=float)
    except (TypeError, ValueError):
        raise ValueError(f"{where}: expected numbers, got {value!r:.60}") from None
    if not np.all(np.isfinite(arr)):
        raise ValueError(f"{where}: non-finite value")
    if shape is not None and arr.shape != shape:
        raise ValueError(f"{where}: expected shape {shape}, got {arr.shape}")
    return arr


@dataclass(frozen=True, eq=False)
class CameraTruth:
    """The scene camera: lens (K px, OpenCV distortion k1 k2 p1 p2 k3), pose (world → camera), timing (s)."""

    image_size: tuple[int, int]
    camera_matrix: np.ndarray
    dist_coeffs: np.ndarray
    rotation: np.ndarray
    translation: np.ndarray
    centre_m: np.ndarray
    fps: float
    readout_s: float
    exposure_s: float
    psf_sigma_px: float

    @classmethod
    def from_json(cls, d: dict, where: str) -> CameraTruth:
        w, h = (int(v) for v in d["image_size"])
        return cls(
            (w, h),
            _array(d["camera_matrix"], f"{where}.camera_matrix", (3, 3)),
            _array(d["dist_coeffs"], f"{where}.dist_coeffs", (5,)),
            _array(d["rotation"], f"{where}.rotation", (3, 3)),
            _array(d["translation"], f"{where}.translation", (3,)),
            _array(d["centre_m"], f"{where}.centre_m", (3,)),
            *(_num(d, k, where) for k in ("fps", "readout_s", "exposure_s", "psf_sigma_px")),
        )


@dataclass(frozen=True)
class BoardTruth:
    """The printed board: inner corners (cols × rows), square and margin (m), sheet size (m), corner order."""

    cols: int
    rows: int
    square_m: float
    margin_m: float
    width_m: float
    height_m: float
    corner_order: str

    @classmethod
    def from_json(cls, d: dict, where: str) -> BoardTruth:
        return cls(
            cols=int(d["cols"]),
            rows=int(d["rows"]),
            square_m=_num(d, "square_m", where),
            margin_m=_num(d, "margin_m", where),
            width_m=_num(d, "width_m", where),
            height_m=_num(d, "height_m", where),
            corner_order=str(d["corner_order"]),
        )

    def spec(self) -> BoardSpec:
        """The board as a :class:`BoardSpec` (reflectances at their defaults)."""
        return BoardSpec(cols=self.cols, rows=self.rows, square_m=self.square_m, margin_m=self.margin_m)


@dataclass(frozen=True, eq=False)
class ViewTruth:
    """One board image: file (relative to truth.json), board → camera pose, placement offset (m) or None."""

    file: str
    rotation: np.ndarray
    translation: np.ndarray
    offset_m: float | None = None

    @classmethod
    def from_json(cls, d: dict, where: str) -> ViewTruth:
        off = d.get("offset_m")
        return cls(
            str(d["file"]),
            _array(d["rotation"], f"{where}.rotation", (3, 3)),
            _array(d["translation"], f"{where}.translation", (3,)),
            None if off is None else json_finite(off, f"{where}.offset_m"),
        )


@dataclass(frozen=True, eq=False)
class PathTruth:
    """The finely sampled true path: time (s, video clock), position (m), speed (m/s), arrays (n,)."""

    t_s: np.ndarray
    x_m: np.ndarray
    y_m: np.ndarray
    z_m: np.ndarray
    speed_mps: np.ndarray

    @classmethod
    def from_json(cls, d: dict, where: str) -> PathTruth:
        return cls(*(_array(d[k], f"{where}.{k}") for k in _PATH_COLUMNS))


@dataclass(frozen=True, eq=False)
class FramesTruth:
    """Per-frame truth of a clip as columns (n_frames,): see the package docstring for each field.

    ``t_s`` is the container time, ``t_mid_s`` the mid-exposure time at the BB's row; ``u_px, v_px`` the true
    projected centre (distorted pixels) at ``t_mid_s``; ``visible`` whether it lies inside the image.
    """

    frame: np.ndarray
    t_s: np.ndarray
    t_mid_s: np.ndarray
    u_px: np.ndarray
    v_px: np.ndarray
    x_m: np.ndarray
    y_m: np.ndarray
    z_m: np.ndarray
    visible: np.ndarray
    radius_px: np.ndarray
    streak_len_px: np.ndarray
    spin_radps: np.ndarray
    spin_angle_rad: np.ndarray

    @classmethod
    def from_json(cls, records: list, where: str) -> FramesTruth:
        if not isinstance(records, list):
            raise ValueError(f"{where}: expected a list of frame records")
        cols: dict[str, Any] = {}
        for k in _FRAME_COLUMNS:
            try:
                values = [r[k] for r in records]
            except (KeyError, TypeError):
                raise ValueError(f"{where}: a frame record lacks {k!r}") from None
            if k == "frame":
                cols[k] = np.asarray(values, dtype=int)
            elif k == "visible":
                cols[k] = np.asarray(values, dtype=bool)
            else:
                cols[k] = _array(values, f"{where}.{k}")
        return cls(**cols)

    def __len__(self) -> int:
        return int(self.frame.size)


@dataclass(frozen=True, eq=False)
class StateTruth:
    """The BB's state at one moment: time (s, video clock), position (m), velocity (m/s), spin (rad/s)."""

    t_s: float
    position_m: np.ndarray
    velocity_mps: np.ndarray
    speed_mps: float
    spin_radps: float
    spin_axis: np.ndarray | None = None

    @classmethod
    def from_json(cls, d: dict, where: str) -> StateTruth:
        axis = d.get("spin_axis")
        return cls(
            _num(d, "t_s", where),
            _array(d["position_m"], f"{where}.position_m", (3,)),
            _array(d["velocity_mps"], f"{where}.velocity_mps", (3,)),
            _num(d, "speed_mps", where),
            _num(d, "spin_radps", where),
            None if axis is None else _array(axis, f"{where}.spin_axis", (3,)),
        )

    @property
    def elevation_deg(self) -> float:
        """Angle of the velocity above horizontal, degrees (edge-of-API unit, as in truth.json)."""
        v = self.velocity_mps
        return math.degrees(math.atan2(v[1], math.hypot(v[0], v[2])))


@dataclass(frozen=True)
class LawsTruth:
    """The flight's laws: constant C_D, linear lift C_L = k·S (C_L at launch and at the first visible point),
    exponential spin decay with time constant τ (s)."""

    drag_coefficient: float
    lift_slope: float
    lift_coefficient_launch: float
    lift_coefficient_first_in_view: float
    spin_decay_time_s: float
    drag: str = "constant"
    lift: str = "linear"
    decay: str = "exponential"

    @classmethod
    def from_json(cls, d: dict, where: str) -> LawsTruth:
        cl = d["lift_coefficient"]
        return cls(
            _num(d, "drag_coefficient", where),
            _num(d, "lift_slope", where),
            _num(cl, "launch", f"{where}.lift_coefficient"),
            _num(cl, "first_in_view", f"{where}.lift_coefficient"),
            _num(d, "spin_decay_time_s", where),
            str(d["drag"]),
            str(d["lift"]),
            str(d["decay"]),
        )


@dataclass(frozen=True, eq=False)
class ClipTruth:
    """A rendered clip: file (relative to truth.json), frame rate (1/s), frame count, true path and frames."""

    file: str
    fps: float
    n_frames: int
    path: PathTruth
    frames: FramesTruth

    @staticmethod
    def _clip_fields(d: dict, where: str) -> tuple:
        return (
            str(d["file"]),
            _num(d, "fps", where),
            int(d["n_frames"]),
            PathTruth.from_json(d["path"], f"{where}.path"),
            FramesTruth.from_json(d["frames"], f"{where}.frames"),
        )


@dataclass(frozen=True, eq=False)
class HolderTruth:
    """The drop's holder: frames the BB rests in it, and the bar's extent in the flight plane (m)."""

    frames: int
    x_m: tuple[float, float]
    y_m: tuple[float, float]


@dataclass(frozen=True, eq=False, kw_only=True)
class DropTruth(ClipTruth):
    """The drop clip: g (m/s²), release time (s, drop clip's clock) and point (m), the holder or None."""

    g_mps2: float
    release_t_s: float
    release_position_m: np.ndarray
    holder: HolderTruth | None = None

    @classmethod
    def from_json(cls, d: dict, where: str) -> DropTruth:
        rel = d["release"]
        h = d.get("holder")
        holder = None
        if h is not None:
            x0, x1 = _array(h["x_m"], f"{where}.holder.x_m", (2,)).tolist()
            y0, y1 = _array(h["y_m"], f"{where}.holder.y_m", (2,)).tolist()
            holder = HolderTruth(int(h["frames"]), (x0, x1), (y0, y1))
        return cls(
            *cls._clip_fields(d, where),
            g_mps2=_num(d, "g_mps2", where),
            release_t_s=_num(rel, "t_s", f"{where}.release"),
            release_position_m=_array(rel["position_m"], f"{where}.release.position_m", (3,)),
            holder=holder,
        )


@dataclass(frozen=True, eq=False, kw_only=True)
class FlightTruth(ClipTruth):
    """The flight clip and the shot: BB (kind, kg, m, mark angle rad), air (the flight model's :class:`Air`),
    g (m/s²), wind (m/s), laws, states."""

    bb_kind: str
    mass_kg: float
    diameter_m: float
    mark_phase_rad: float
    air: Air
    gravity_mps2: float
    wind_mps: np.ndarray
    laws: LawsTruth
    launch: StateTruth
    first_in_view: StateTruth

    @classmethod
    def from_json(cls, d: dict, where: str) -> FlightTruth:
        bb = d["bb"]
        return cls(
            *cls._clip_fields(d, where),
            bb_kind=str(bb["kind"]),
            mass_kg=_num(bb, "mass_kg", f"{where}.bb"),
            diameter_m=_num(bb, "diameter_m", f"{where}.bb"),
            mark_phase_rad=_num(bb, "mark_phase_rad", f"{where}.bb"),
            air=Air(*(_num(d["air"], f.name, f"{where}.air") for f in dataclasses.fields(Air))),
            gravity_mps2=_num(d, "gravity_mps2", where),
            wind_mps=_array(d["wind_mps"], f"{where}.wind_mps", (3,)),
            laws=LawsTruth.from_json(d["laws"], f"{where}.laws"),
            launch=StateTruth.from_json(d["launch"], f"{where}.launch"),
            first_in_view=StateTruth.from_json(d["first_in_view"], f"{where}.first_in_view"),
        )


@dataclass(frozen=True, eq=False)
class SceneTruth:
    """Everything ``truth.json`` says about a rendered scene, typed.

    Attributes
    ----------
    scene, description : the scene's name and its "demo data, invented" label.
    spec_digest, seed : the render's cache key and its int seed (None for a Generator).
    parts : the rendered parts, a subset of ("lens", "plane", "drop", "flight").
    spec : the scene as a :class:`SceneSpec`.
    camera, board : the true camera and board.
    lens_views, plane_views : the board images with their true poses (plane views with offsets, m).
    drop, flight : the clips' truth, or None when not rendered.
    data : the file's own nested content (what ``truth[key]`` reads).
    """

    scene: str
    description: str
    spec_digest: str
    seed: int | None
    parts: tuple[str, ...]
    spec: SceneSpec
    camera: CameraTruth
    board: BoardTruth
    lens_views: tuple[ViewTruth, ...]
    plane_views: tuple[ViewTruth, ...]
    drop: DropTruth | None
    flight: FlightTruth | None
    data: dict[str, Any]

    def __getitem__(self, key: str) -> Any:
        return self.data[key]

    def get(self, key: str, default: Any = None) -> Any:
        return self.data.get(key, default)

    def __eq__(self, other: object) -> bool:
        return isinstance(other, SceneTruth) and self.data == other.data

    __hash__ = None  # type: ignore[assignment]

    def to_json(self) -> str:
        """The truth.json text (indent 1, as the renderer writes it)."""
        return json.dumps(self.data, indent=1)


def truth_from_dict(data: Any, source: str = "truth.json") -> SceneTruth:
    """A :class:`SceneTruth` from decoded ``truth.json`` content; ``ValueError`` naming ``source`` and the field."""
    if not isinstance(data, dict) or data.get("schema") != TRUTH_SCHEMA:
        got = data.get("schema") if isinstance(data, dict) else type(data).__name__
        raise ValueError(f"{source}: expected schema {TRUTH_SCHEMA!r}, got {got!r}")
    missing = [k for k in _TRUTH_KEYS if k not in data]
    if missing:
        raise ValueError(f"{source}: missing field(s) {', '.join(missing)}")
    for part, keys in (("flight", (*_CLIP_KEYS, "launch", "laws", "air", "bb")), ("drop", _CLIP_KEYS)):
        if data[part] is None:
            continue
        gone = [k for k in keys if k not in data[part]]
        if gone:
            raise ValueError(f"{source}: {part} lacks field(s) {', '.join(gone)}")
        bad = [k for k in _PATH_COLUMNS if k not in data[part]["path"]]
        if bad:
            raise ValueError(f"{source}: {part}.path lacks column(s) {', '.join(bad)}")
    try:
        seed = data.get("seed")
        return SceneTruth(
            scene=str(data["scene"]),
            description=str(data.get("description", "")),
            spec_digest=str(data.get("spec_digest", "")),
            seed=None if seed is None else int(seed),
            parts=tuple(str(p) for p in data.get("parts", ())),
            spec=spec_from_dict(data.get("spec", {}), source=f"{source}: spec"),
            camera=CameraTruth.from_json(data["camera"], "camera"),
            board=BoardTruth.from_json(data["board"], "board"),
            lens_views=tuple(
                ViewTruth.from_json(v, f"lens_views[{i}]") for i, v in enumerate(data["lens_views"])
            ),
            plane_views=tuple(
                ViewTruth.from_json(v, f"plane_views[{i}]") for i, v in enumerate(data["plane_views"])
            ),
            drop=None if data["drop"] is None else DropTruth.from_json(data["drop"], "drop"),
            flight=None if data["flight"] is None else FlightTruth.from_json(data["flight"], "flight"),
            data=data,
        )
    except KeyError as exc:
        raise ValueError(f"{source}: missing field {exc.args[0]!r}") from None
    except (TypeError, ValueError) as exc:
        if str(exc).startswith(source):
            raise
        raise ValueError(f"{source}: {exc}") from None


def load_truth(path: str | Path) -> SceneTruth:
    """Read and check a ``truth.json`` (schema ``hopscope.truth/1``)."""
    p = Path(path)
    try:
        text = p.read_text(encoding="utf-8")
    except OSError as exc:
        raise OSError(f"{p}: cannot read truth file ({exc.strerror or exc})") from exc
    try:
        data = json.loads(text)
    except json.JSONDecodeError as exc:
        raise ValueError(f"{p}: not valid JSON (line {exc.lineno}: {exc.msg})") from exc
    return truth_from_dict(data, str(p))
