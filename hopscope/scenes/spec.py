"""Scene descriptions: small frozen dataclasses, SI units, validated on construction.

A :class:`SceneSpec` says everything the renderer needs: the camera (lens, pose, timing), the board, the
lighting, the BB and its flight, the optional drop clip, clutter and image-model switches. Nothing here
draws pixels; :mod:`hopscope.scenes.render` does that.

Notes
-----
World frame: x downrange, y up, z = x × y toward the camera, metres; the flight plane is z = 0.
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
import math
from dataclasses import dataclass, field
from typing import Any

BB_KINDS = ("white", "tracer", "marked")
LIGHTING_KINDS = ("daylight", "dusk")

#: Bump when the renderer's output for a given spec and seed changes (invalidates cached renders).
RENDERER_VERSION = 5


def _finite(name: str, value: float) -> None:
    if not (isinstance(value, int | float) and math.isfinite(value)):
        raise ValueError(f"{name} must be a finite number, got {value!r}")


def _positive(name: str, value: float) -> None:
    _finite(name, value)
    if value <= 0:
        raise ValueError(f"{name} must be positive, got {value!r}")


def _vector(name: str, value: tuple[float, ...], n: int) -> None:
    if len(value) != n:
        raise ValueError(f"{name} must have {n} components, got {len(value)}")
    for i, v in enumerate(value):
        _finite(f"{name}[{i}]", v)


@dataclass(frozen=True)
class CameraSpec:
    """Lens, pose and timing of the scene camera.

    Attributes
    ----------
    image_size : (width, height), px.
    focal_px : focal length f_x, px; f_y = f_x · ``aspect``.
    principal_offset_px : principal point minus the image centre ((w-1)/2, (h-1)/2), px.
    dist_coeffs : OpenCV distortion (k1, k2, p1, p2, k3), dimensionless.
    position_m : camera centre in the world frame, m.
    look_at_m : world point on the optical axis, m (normally in the flight plane).
    roll_deg : rotation about the optical axis after looking at the target, degrees (edge-of-spec unit).
    fps : frame rate, 1/s; frame k has container timestamp k/fps.
    readout_s : rolling-shutter readout time (top row to bottom row), s; 0 is a global shutter.
    exposure_s : exposure time of each row, s.
    psf_sigma_px : Gaussian lens blur (point-spread function) sigma, px.
    """

    image_size: tuple[int, int] = (1280, 720)
    focal_px: float = 1000.0
    aspect: float = 1.0
    principal_offset_px: tuple[float, float] = (0.0, 0.0)
    dist_coeffs: tuple[float, float, float, float, float] = (-0.15, 0.03, 1e-3, -8e-4, 0.0)
    position_m: tuple[float, float, float] = (0.5, -0.2, 2.0)
    look_at_m: tuple[float, float, float] = (0.5, -0.25, 0.0)
    roll_deg: float = 0.5
    fps: float = 2000.0
    readout_s: float = 0.0
    exposure_s: float = 5e-5
    psf_sigma_px: float = 0.6

    def __post_init__(self) -> None:
        w, h = self.image_size
        if not (isinstance(w, int) and isinstance(h, int) and 16 <= w <= 8192 and 16 <= h <= 8192):
            raise ValueError(f"camera image_size must be two integers 16..8192 px, got {self.image_size!r}")
        _positive("camera focal_px", self.focal_px)
        _positive("camera aspect", self.aspect)
        _vector("camera principal_offset_px", self.principal_offset_px, 2)
        _vector("camera dist_coeffs", self.dist_coeffs, 5)
        _vector("camera position_m", self.position_m, 3)
        _vector("camera look_at_m", self.look_at_m, 3)
        _finite("camera roll_deg", self.roll_deg)
        _positive("camera fps", self.fps)
        _finite("camera readout_s", self.readout_s)
        _positive("camera exposure_s", self.exposure_s)
        if self.readout_s < 0:
            raise ValueError(f"camera readout_s must be >= 0, got {self.readout_s!r}")
        period = 1.0 / self.fps
        if self.readout_s > period + 1e-12 or self.exposure_s > period + 1e-12:
            raise ValueError(
                f"camera readout_s ({self.readout_s:g} s) and exposure_s ({self.exposure_s:g} s) must each be "
                f"at most the frame period 1/fps ({period:g} s)"
            )
        _finite("camera psf_sigma_px", self.psf_sigma_px)
        if self.psf_sigma_px < 0:
            raise ValueError(f"camera psf_sigma_px must be >= 0, got {self.psf_sigma_px!r}")
        if math.dist(self.position_m, self.look_at_m) < 1e-3:
            raise ValueError("camera position_m and look_at_m must differ")


@dataclass(frozen=True)
class BoardSpec:
    """A printed checkerboard with ``cols`` × ``rows`` inner corners.

    ``cols + rows`` must be odd, so the pattern has no 180° symmetry and its orientation is unambiguous
    (the squares at the two ends of the first row of inner corners then differ in colour).

    Attributes
    ----------
    cols : inner corners along a row (world +x, image right).
    rows : inner corners along a column (world −y, image down).
    square_m : square side, m.
    margin_m : white border around the outer squares, m.
    black_reflectance, white_reflectance : diffuse reflectance of the print, 0..1.
    """

    cols: int = 11
    rows: int = 6
    square_m: float = 0.1
    margin_m: float = 0.05
    black_reflectance: float = 0.07
    white_reflectance: float = 0.85

    def __post_init__(self) -> None:
        for name, v in (("board cols", self.cols), ("board rows", self.rows)):
            if not (isinstance(v, int) and 3 <= v <= 40):
                raise ValueError(f"{name} must be an integer 3..40, got {v!r}")
        if (self.cols + self.rows) % 2 == 0:
            raise ValueError(
                f"board cols + rows must be odd (orientation must be unambiguous), got {self.cols}x{self.rows}"
            )
        _positive("board square_m", self.square_m)
        _finite("board margin_m", self.margin_m)
        if self.margin_m < 0:
            raise ValueError(f"board margin_m must be >= 0, got {self.margin_m!r}")
        for name, refl in (
            ("board black_reflectance", self.black_reflectance),
            ("board white_reflectance", self.white_reflectance),
        ):
            _finite(name, refl)
            if not 0 <= refl <= 1:
                raise ValueError(f"{name} must lie in 0..1, got {refl!r}")
        if self.black_reflectance >= self.white_reflectance:
            raise ValueError("board black_reflectance must be below white_reflectance")

    @property
    def width_m(self) -> float:
        """Printed width including the margin, m."""
        return (self.cols + 1) * self.square_m + 2 * self.margin_m

    @property
    def height_m(self) -> float:
        """Printed height including the margin, m."""
        return (self.rows + 1) * self.square_m + 2 * self.margin_m


@dataclass(frozen=True)
class LensViewsSpec:
    """Views of the board held at varied angles and distances, for the lens calibration.

    Attributes
    ----------
    n_views : number of images (0 for none).
    tilt_deg : range of the board's tilt out of the image plane, degrees.
    fill : range of the fraction of the image width the board spans (before tilt).
    supersample : samples per pixel side (each sample is itself box-filtered analytically, so 2 already
        gives corners as exact as 4; see tests/scenes).
    """

    n_views: int = 12
    tilt_deg: tuple[float, float] = (20.0, 45.0)
    fill: tuple[float, float] = (0.5, 0.8)
    supersample: int = 2

    def __post_init__(self) -> None:
        if not (isinstance(self.n_views, int) and 0 <= self.n_views <= 100):
            raise ValueError(f"lens n_views must be an integer 0..100, got {self.n_views!r}")
        _vector("lens tilt_deg", self.tilt_deg, 2)
        _vector("lens fill", self.fill, 2)
        if not 0 <= self.tilt_deg[0] <= self.tilt_deg[1] < 80:
            raise ValueError(f"lens tilt_deg must be an ordered range within 0..80, got {self.tilt_deg!r}")
        if not 0.1 <= self.fill[0] <= self.fill[1] <= 1.0:
            raise ValueError(f"lens fill must be an ordered range within 0.1..1, got {self.fill!r}")
        if not (isinstance(self.supersample, int) and 1 <= self.supersample <= 8):
            raise ValueError(f"lens supersample must be an integer 1..8, got {self.supersample!r}")


@dataclass(frozen=True)
class PlaneViewsSpec:
    """Frames of the board standing in the flight plane, at placements shifted downrange.

    ``offsets_m`` are the placements' downrange shifts from the first, m (the first must be 0).
    """

    offsets_m: tuple[float, ...] = (0.0,)
    supersample: int = 2

    def __post_init__(self) -> None:
        if not self.offsets_m or self.offsets_m[0] != 0.0:
            raise ValueError(f"plane offsets_m must start with 0, got {self.offsets_m!r}")
        for i, v in enumerate(self.offsets_m):
            _finite(f"plane offsets_m[{i}]", v)
        if not (isinstance(self.supersample, int) and 1 <= self.supersample <= 8):
            raise ValueError(f"plane supersample must be an integer 1..8, got {self.supersample!r}")


@dataclass(frozen=True)
class LightingSpec:
    """Background wall and illumination.

    Attributes
    ----------
    kind : "daylight" (mid-grey textured wall with a sunlit gradient) or "dusk" (dark, low texture).
    wall_distance_m : distance of the wall behind the flight plane, m.
    wall_level_dn : mean wall brightness, 8-bit digital numbers (DN).
    texture_contrast : relative amplitude of the wall texture (0 = flat).
    gradient : relative brightness change across the image width (sunlit gradient).
    board_illumination_dn : brightness of a perfect white reflector, DN (board = reflectance × this).
    flicker_amplitude : relative amplitude of mains-light flicker (0 = none).
    flicker_hz : flicker frequency, Hz (twice the mains frequency).
    """

    kind: str = "daylight"
    wall_distance_m: float = 1.0
    wall_level_dn: float = 120.0
    texture_contrast: float = 0.12
    gradient: float = 0.15
    board_illumination_dn: float = 245.0
    flicker_amplitude: float = 0.0
    flicker_hz: float = 100.0

    def __post_init__(self) -> None:
        if self.kind not in LIGHTING_KINDS:
            raise ValueError(f"lighting kind must be one of {LIGHTING_KINDS}, got {self.kind!r}")
        _positive("lighting wall_distance_m", self.wall_distance_m)
        _positive("lighting wall_level_dn", self.wall_level_dn)
        _positive("lighting board_illumination_dn", self.board_illumination_dn)
        _positive("lighting flicker_hz", self.flicker_hz)
        for name, v in (
            ("texture_contrast", self.texture_contrast),
            ("gradient", self.gradient),
            ("flicker_amplitude", self.flicker_amplitude),
        ):
            _finite(f"lighting {name}", v)
            if not 0 <= v < 1:
                raise ValueError(f"lighting {name} must lie in 0..1, got {v!r}")


@dataclass(frozen=True)
class BBSpec:
    """The BB and how it looks.

    Attributes
    ----------
    kind : "white" (opaque white BB, slight limb darkening), "tracer" (glowing core with a soft halo) or
        "marked" (half dark, lit from above, so brightness varies with the rotation angle).
    mass_kg, diameter_m : BB mass (kg) and diameter (m).
    brightness_dn : white-BB / marked-BB bright-half brightness, or tracer core brightness, DN.
    halo_dn : tracer halo peak above the background for a BB at rest, DN.
    halo_sigma_px : tracer halo Gaussian sigma, px (added to the disk radius).
    mark_phase_deg : marked BB's initial mark angle, degrees.
    """

    kind: str = "white"
    mass_kg: float = 2.5e-4
    diameter_m: float = 5.95e-3
    brightness_dn: float = 235.0
    halo_dn: float = 200.0
    halo_sigma_px: float = 1.3
    mark_phase_deg: float = 30.0

    def __post_init__(self) -> None:
        if self.kind not in BB_KINDS:
            raise ValueError(f"bb kind must be one of {BB_KINDS}, got {self.kind!r}")
        _positive("bb mass_kg", self.mass_kg)
        _positive("bb diameter_m", self.diameter_m)
        _positive("bb brightness_dn", self.brightness_dn)
        _finite("bb halo_dn", self.halo_dn)
        _positive("bb halo_sigma_px", self.halo_sigma_px)
        _finite("bb mark_phase_deg", self.mark_phase_deg)


@dataclass(frozen=True)
class FlightSpec:
    """The shot: launch state, air and aerodynamic laws (constant drag, linear lift, exponential decay).

    Attributes
    ----------
    muzzle_m : launch position, m (normally left of the field, outside the frame).
    speed_mps : launch speed, m/s.
    elevation_deg : launch angle above horizontal, degrees.
    azimuth_deg : launch angle toward +z (out of the plane), degrees.
    drag_coefficient : constant C_D.
    lift_coefficient : C_L at launch (C_L = k·S, so it sets the launch spin ω0 = (C_L/k)·u0/r).
    lift_slope : k of the linear lift law.
    spin_decay_time_s : time constant τ of the exponential spin decay, s.
    temperature_k, pressure_pa, relative_humidity : the air (density by CIPM-2007, viscosity Sutherland).
    lead_frames : frames of empty background before the BB enters the image.
    tail_frames : frames after the BB has left the image.
    """

    muzzle_m: tuple[float, float, float] = (-1.0, -0.2, 0.003)
    speed_mps: float = 95.0
    elevation_deg: float = 0.3
    azimuth_deg: float = -0.01
    drag_coefficient: float = 0.42
    lift_coefficient: float = 0.02
    lift_slope: float = 0.1
    spin_decay_time_s: float = 2.0
    temperature_k: float = 293.15
    pressure_pa: float = 101325.0
    relative_humidity: float = 0.5
    lead_frames: int = 25
    tail_frames: int = 5

    def __post_init__(self) -> None:
        _vector("flight muzzle_m", self.muzzle_m, 3)
        _positive("flight speed_mps", self.speed_mps)
        _finite("flight elevation_deg", self.elevation_deg)
        _finite("flight azimuth_deg", self.azimuth_deg)
        if abs(self.elevation_deg) > 45 or abs(self.azimuth_deg) > 10:
            raise ValueError("flight elevation_deg must lie within ±45 and azimuth_deg within ±10 degrees")
        _positive("flight drag_coefficient", self.drag_coefficient)
        _finite("flight lift_coefficient", self.lift_coefficient)
        _positive("flight lift_slope", self.lift_slope)
        _positive("flight spin_decay_time_s", self.spin_decay_time_s)
        for name, v in (("lead_frames", self.lead_frames), ("tail_frames", self.tail_frames)):
            if not (isinstance(v, int) and 0 <= v <= 10000):
                raise ValueError(f"flight {name} must be an integer 0..10000, got {v!r}")


@dataclass(frozen=True)
class DropSpec:
    """A BB released at rest in the flight plane (for the scale / frame-rate / level check).

    Flown with the same flight model as the shot (gravity and drag, no spin), by the same camera (lens,
    pose, exposure, readout), at the camera's frame rate unless ``fps`` says otherwise.

    Attributes
    ----------
    release_m : release point, m (just above the image, so the hand stays out of view).
    lead_frames : frames of background before the release.
    n_frames : frames after the release.
    fps : frame rate of the drop clip, 1/s (None: the camera's ``fps``).
    """

    release_m: tuple[float, float, float] = (0.3, 0.47, 0.0)
    lead_frames: int = 20
    n_frames: int = 160
    fps: float | None = None

    def __post_init__(self) -> None:
        if self.fps is not None:
            _positive("drop fps", self.fps)
        _vector("drop release_m", self.release_m, 3)
        for name, v in (("lead_frames", self.lead_frames), ("n_frames", self.n_frames)):
            if not (isinstance(v, int) and 0 <= v <= 100000):
                raise ValueError(f"drop {name} must be an integer 0..100000, got {v!r}")
        if self.n_frames < 2:
            raise ValueError(f"drop n_frames must be at least 2, got {self.n_frames}")


@dataclass(frozen=True)
class ClutterSpec:
    """Distractions in the flight clip: a slow dark insect-like blob on a curved path (image space).

    Attributes
    ----------
    distractor : whether the blob is present.
    start_px : blob position at t = 0, px (u, v).
    velocity_pxps : mean drift, px/s.
    wobble_px : amplitude of the sideways wobble, px; ``wobble_hz`` its frequency, Hz.
    radius_px : blob radius, px; ``darkness`` fraction of light it removes at its centre (0..1).
    glow_dn : light the blob adds, DN (a lit moth at dusk; 0 for a dark insect).
    """

    distractor: bool = False
    start_px: tuple[float, float] = (200.0, 150.0)
    velocity_pxps: tuple[float, float] = (600.0, 150.0)
    wobble_px: float = 20.0
    wobble_hz: float = 6.0
    radius_px: float = 4.0
    darkness: float = 0.6
    glow_dn: float = 0.0

    def __post_init__(self) -> None:
        _finite("clutter glow_dn", self.glow_dn)
        if self.glow_dn < 0:
            raise ValueError(f"clutter glow_dn must be >= 0, got {self.glow_dn!r}")
        _vector("clutter start_px", self.start_px, 2)
        _vector("clutter velocity_pxps", self.velocity_pxps, 2)
        _finite("clutter wobble_px", self.wobble_px)
        _positive("clutter wobble_hz", self.wobble_hz)
        _positive("clutter radius_px", self.radius_px)
        _finite("clutter darkness", self.darkness)
        if not 0 <= self.darkness <= 1:
            raise ValueError(f"clutter darkness must lie in 0..1, got {self.darkness!r}")


@dataclass(frozen=True)
class ImageModelSpec:
    """Switches and parameters of the image model (tests turn effects off to check the geometry alone).

    Attributes
    ----------
    noise : add shot noise and read noise before 8-bit quantisation.
    gain_e_per_dn : electrons per digital number (sets shot noise: σ² = DN / gain, DN²).
    read_noise_dn : read-noise sigma, DN.
    motion_blur : integrate the BB over the exposure (off: the BB is drawn at each row's mid-exposure).
    rolling_shutter : delay each row by row·readout/rows (off: every row at the frame time).
    bb_supersample : samples per pixel side when drawing the BB.
    """

    noise: bool = True
    gain_e_per_dn: float = 8.0
    read_noise_dn: float = 1.5
    motion_blur: bool = True
    rolling_shutter: bool = True
    bb_supersample: int = 4

    def __post_init__(self) -> None:
        _positive("image gain_e_per_dn", self.gain_e_per_dn)
        _finite("image read_noise_dn", self.read_noise_dn)
        if self.read_noise_dn < 0:
            raise ValueError("image read_noise_dn must be >= 0")
        if not (isinstance(self.bb_supersample, int) and 1 <= self.bb_supersample <= 16):
            raise ValueError(f"image bb_supersample must be an integer 1..16, got {self.bb_supersample!r}")


@dataclass(frozen=True)
class SceneSpec:
    """Everything a rendered scene is made from. Built-in scenes: :func:`hopscope.scenes.builtin_scene`."""

    name: str = "custom"
    description: str = "demo data, invented"
    camera: CameraSpec = field(default_factory=CameraSpec)
    board: BoardSpec = field(default_factory=BoardSpec)
    lens: LensViewsSpec = field(default_factory=LensViewsSpec)
    plane: PlaneViewsSpec = field(default_factory=PlaneViewsSpec)
    lighting: LightingSpec = field(default_factory=LightingSpec)
    bb: BBSpec = field(default_factory=BBSpec)
    flight: FlightSpec = field(default_factory=FlightSpec)
    drop: DropSpec | None = None
    clutter: ClutterSpec = field(default_factory=ClutterSpec)
    image: ImageModelSpec = field(default_factory=ImageModelSpec)

    def __post_init__(self) -> None:
        if self.drop is not None and self.drop.fps is not None:
            period = 1.0 / self.drop.fps
            if self.camera.exposure_s > period + 1e-12 or self.camera.readout_s > period + 1e-12:
                raise ValueError(
                    f"drop fps {self.drop.fps:g}: the camera's exposure_s and readout_s must each be at most "
                    f"the drop's frame period ({period:g} s)"
                )
        if not (
            isinstance(self.name, str) and self.name and all(c.isalnum() or c in "-_" for c in self.name)
        ):
            raise ValueError(
                f"scene name must be a non-empty word of letters, digits, '-' or '_', got {self.name!r}"
            )

    def to_dict(self) -> dict[str, Any]:
        """Plain nested dict (JSON-ready) of every field."""
        return _jsonable(dataclasses.asdict(self))

    def digest(self, seed: int | None) -> str:
        """SHA-256 of the spec, the seed and the renderer version (a cache key)."""
        text = json.dumps(
            {"spec": self.to_dict(), "seed": seed, "renderer": RENDERER_VERSION}, sort_keys=True
        )
        return hashlib.sha256(text.encode("utf-8")).hexdigest()


def _jsonable(obj: Any) -> Any:
    if isinstance(obj, dict):
        return {k: _jsonable(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [_jsonable(v) for v in obj]
    return obj


# ============================================================================================ from files

_PART_TYPES: dict[str, type] = {
    "camera": CameraSpec,
    "board": BoardSpec,
    "lens": LensViewsSpec,
    "plane": PlaneViewsSpec,
    "lighting": LightingSpec,
    "bb": BBSpec,
    "flight": FlightSpec,
    "drop": DropSpec,
    "clutter": ClutterSpec,
    "image": ImageModelSpec,
}


def _build(cls: type, data: Any, where: str) -> Any:
    if not isinstance(data, dict):
        raise ValueError(f"{where}: expected a table of fields, got {type(data).__name__}")
    fields = {f.name: f for f in dataclasses.fields(cls)}
    unknown = sorted(set(data) - set(fields))
    if unknown:
        raise ValueError(f"{where}: unknown field(s) {', '.join(unknown)}; known: {', '.join(fields)}")
    kwargs = {}
    for key, value in data.items():
        if isinstance(value, list):
            value = tuple(value)
        kwargs[key] = value
    try:
        return cls(**kwargs)
    except (TypeError, ValueError) as exc:
        raise ValueError(f"{where}: {exc}") from exc


def spec_from_dict(data: dict[str, Any], *, source: str = "scene") -> SceneSpec:
    """A :class:`SceneSpec` from nested dicts (as in ``SceneSpec.to_dict()`` or a TOML file).

    Missing parts and fields take their defaults; ``drop`` may be absent or empty (no drop clip). Unknown
    keys are rejected with a message that names ``source`` and the part.
    """
    if not isinstance(data, dict):
        raise ValueError(f"{source}: expected a table, got {type(data).__name__}")
    top = {f.name for f in dataclasses.fields(SceneSpec)}
    unknown = sorted(set(data) - top)
    if unknown:
        raise ValueError(f"{source}: unknown field(s) {', '.join(unknown)}; known: {', '.join(sorted(top))}")
    kwargs: dict[str, Any] = {}
    for key, value in data.items():
        if key in _PART_TYPES:
            if key == "drop" and (value is None or value == {}):
                kwargs[key] = None
                continue
            kwargs[key] = _build(_PART_TYPES[key], value, f"{source} [{key}]")
        else:
            kwargs[key] = value
    try:
        return SceneSpec(**kwargs)
    except (TypeError, ValueError) as exc:
        raise ValueError(f"{source}: {exc}") from exc


def load_scene(path) -> SceneSpec:
    """Read a scene description from a TOML file (tables named like the spec's parts)."""
    import tomllib
    from pathlib import Path

    p = Path(path)
    try:
        raw = p.read_bytes()
    except OSError as exc:
        raise OSError(f"{p}: cannot read scene file ({exc.strerror or exc})") from exc
    try:
        data = tomllib.loads(raw.decode("utf-8"))
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        raise ValueError(f"{p}: not a valid TOML scene file ({exc})") from exc
    return spec_from_dict(data, source=str(p))
