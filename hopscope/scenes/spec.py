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
from typing import Any, ClassVar

from .rules import (
    SpecPart,
    at_least_zero,
    check_finite,
    check_positive,
    finite,
    fraction,
    integer,
    one_of,
    positive,
    vector,
)

BB_KINDS = ("white", "tracer", "marked")
LIGHTING_KINDS = ("daylight", "dusk")

#: Bump when the renderer's output for a given spec and seed changes (invalidates cached renders).
RENDERER_VERSION = 5


@dataclass(frozen=True)
class CameraSpec(SpecPart):
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

    _part: ClassVar[str] = "camera"
    image_size: tuple[int, int] = (1280, 720)
    focal_px: float = positive(1000.0)
    aspect: float = positive(1.0)
    principal_offset_px: tuple[float, float] = vector((0.0, 0.0), 2)
    dist_coeffs: tuple[float, float, float, float, float] = vector((-0.15, 0.03, 1e-3, -8e-4, 0.0), 5)
    position_m: tuple[float, float, float] = vector((0.5, -0.2, 2.0), 3)
    look_at_m: tuple[float, float, float] = vector((0.5, -0.25, 0.0), 3)
    roll_deg: float = finite(0.5)
    fps: float = positive(2000.0)
    readout_s: float = at_least_zero(0.0)
    exposure_s: float = positive(5e-5)
    psf_sigma_px: float = at_least_zero(0.6)

    def __post_init__(self) -> None:
        super().__post_init__()
        w, h = self.image_size
        if not (isinstance(w, int) and isinstance(h, int) and 16 <= w <= 8192 and 16 <= h <= 8192):
            raise ValueError(f"camera image_size must be two integers 16..8192 px, got {self.image_size!r}")
        period = 1.0 / self.fps
        if self.readout_s > period + 1e-12 or self.exposure_s > period + 1e-12:
            raise ValueError(
                f"camera readout_s ({self.readout_s:g} s) and exposure_s ({self.exposure_s:g} s) must each be "
                f"at most the frame period 1/fps ({period:g} s)"
            )
        if math.dist(self.position_m, self.look_at_m) < 1e-3:
            raise ValueError("camera position_m and look_at_m must differ")


@dataclass(frozen=True)
class BoardSpec(SpecPart):
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

    _part: ClassVar[str] = "board"
    cols: int = integer(11, 3, 40)
    rows: int = integer(6, 3, 40)
    square_m: float = positive(0.1)
    margin_m: float = at_least_zero(0.05)
    black_reflectance: float = fraction(0.07)
    white_reflectance: float = fraction(0.85)

    def __post_init__(self) -> None:
        super().__post_init__()
        if (self.cols + self.rows) % 2 == 0:
            raise ValueError(
                f"board cols + rows must be odd (orientation must be unambiguous), got {self.cols}x{self.rows}"
            )
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
class LensViewsSpec(SpecPart):
    """Views of the board held at varied angles and distances, for the lens calibration.

    Attributes
    ----------
    n_views : number of images (0 for none).
    tilt_deg : range of the board's tilt out of the image plane, degrees.
    fill : range of the fraction of the image width the board spans (before tilt).
    supersample : samples per pixel side (each sample is itself box-filtered analytically, so 2 already
        gives corners as exact as 4; see tests/scenes).
    """

    _part: ClassVar[str] = "lens"
    n_views: int = integer(12, 0, 100)
    tilt_deg: tuple[float, float] = vector((20.0, 45.0), 2)
    fill: tuple[float, float] = vector((0.5, 0.8), 2)
    supersample: int = integer(2, 1, 8)

    def __post_init__(self) -> None:
        super().__post_init__()
        if not 0 <= self.tilt_deg[0] <= self.tilt_deg[1] < 80:
            raise ValueError(f"lens tilt_deg must be an ordered range within 0..80, got {self.tilt_deg!r}")
        if not 0.1 <= self.fill[0] <= self.fill[1] <= 1.0:
            raise ValueError(f"lens fill must be an ordered range within 0.1..1, got {self.fill!r}")


@dataclass(frozen=True)
class PlaneViewsSpec(SpecPart):
    """Frames of the board standing in the flight plane, at placements shifted downrange.

    ``offsets_m`` are the placements' downrange shifts from the first, m (the first must be 0).
    """

    _part: ClassVar[str] = "plane"
    offsets_m: tuple[float, ...] = (0.0,)
    supersample: int = integer(2, 1, 8)

    def __post_init__(self) -> None:
        super().__post_init__()
        if not self.offsets_m or self.offsets_m[0] != 0.0:
            raise ValueError(f"plane offsets_m must start with 0, got {self.offsets_m!r}")
        for i, v in enumerate(self.offsets_m):
            check_finite(f"plane offsets_m[{i}]", v)


@dataclass(frozen=True)
class LightingSpec(SpecPart):
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

    _part: ClassVar[str] = "lighting"
    kind: str = one_of("daylight", LIGHTING_KINDS)
    wall_distance_m: float = positive(1.0)
    wall_level_dn: float = positive(120.0)
    texture_contrast: float = fraction(0.12, closed=False)
    gradient: float = fraction(0.15, closed=False)
    board_illumination_dn: float = positive(245.0)
    flicker_amplitude: float = fraction(0.0, closed=False)
    flicker_hz: float = positive(100.0)


@dataclass(frozen=True)
class BBSpec(SpecPart):
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

    _part: ClassVar[str] = "bb"
    kind: str = one_of("white", BB_KINDS)
    mass_kg: float = positive(2.5e-4)
    diameter_m: float = positive(5.95e-3)
    brightness_dn: float = positive(235.0)
    halo_dn: float = finite(200.0)
    halo_sigma_px: float = positive(1.3)
    mark_phase_deg: float = finite(30.0)


@dataclass(frozen=True)
class FlightSpec(SpecPart):
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

    _part: ClassVar[str] = "flight"
    muzzle_m: tuple[float, float, float] = vector((-1.0, -0.2, 0.003), 3)
    speed_mps: float = positive(95.0)
    elevation_deg: float = finite(0.3)
    azimuth_deg: float = finite(-0.01)
    drag_coefficient: float = positive(0.42)
    lift_coefficient: float = finite(0.02)
    lift_slope: float = positive(0.1)
    spin_decay_time_s: float = positive(2.0)
    temperature_k: float = 293.15
    pressure_pa: float = 101325.0
    relative_humidity: float = 0.5
    lead_frames: int = integer(25, 0, 10000)
    tail_frames: int = integer(5, 0, 10000)

    def __post_init__(self) -> None:
        super().__post_init__()
        if abs(self.elevation_deg) > 45 or abs(self.azimuth_deg) > 10:
            raise ValueError("flight elevation_deg must lie within ±45 and azimuth_deg within ±10 degrees")


@dataclass(frozen=True)
class DropSpec(SpecPart):
    """A BB released at rest in the flight plane (for the scale / frame-rate / level check).

    Flown with the same flight model as the shot (gravity and drag, no spin), by the same camera (lens,
    pose, exposure, readout), at the camera's frame rate unless ``fps`` says otherwise.

    Attributes
    ----------
    release_m : release point, m (just above the image, so the hand stays out of view; or in view, resting
        in a holder).
    lead_frames : frames before the release.
    n_frames : frames after the release.
    fps : frame rate of the drop clip, 1/s (None: the camera's ``fps``).
    holder_frames : the last ``holder_frames`` of the ``lead_frames`` show the BB at rest at ``release_m``,
        touching the holder, as in a real drop from a clamp (0: no holder, the BB falls into view).
    holder_width_m, holder_height_m : the holder, a dark bar in the flight plane whose right edge touches
        the BB's left side and which reaches from the BB's centre height up by ``holder_height_m``, m. It
        stays in view after the release.
    holder_level_dn : the holder's brightness, DN.
    """

    _part: ClassVar[str] = "drop"
    release_m: tuple[float, float, float] = vector((0.3, 0.47, 0.0), 3)
    lead_frames: int = integer(20, 0, 100000)
    n_frames: int = integer(160, 2, 100000)
    fps: float | None = None
    holder_frames: int = integer(0, 0, 100000)
    holder_width_m: float = positive(0.012)
    holder_height_m: float = positive(0.03)
    holder_level_dn: float = at_least_zero(30.0)

    def __post_init__(self) -> None:
        super().__post_init__()
        if self.fps is not None:
            check_positive("drop fps", self.fps)
        if self.holder_frames > self.lead_frames:
            raise ValueError(
                f"drop holder_frames ({self.holder_frames}) must be at most lead_frames ({self.lead_frames})"
            )


@dataclass(frozen=True)
class ClutterSpec(SpecPart):
    """Distractions in the flight clip: a slow insect-like blob on a curved path (image space).

    Dark (``darkness`` > 0, ``glow_dn`` = 0: an insect against a lit wall) or bright (``darkness`` = 0,
    ``glow_dn`` > 0: a lit moth at dusk); :func:`hopscope.scenes.variants.with_crossing_distractor` puts one
    across the BB's path.

    Attributes
    ----------
    distractor : whether the blob is present.
    start_px : blob position at t = 0, px (u, v).
    velocity_pxps : mean drift, px/s.
    wobble_px : amplitude of the sideways wobble, px; ``wobble_hz`` its frequency, Hz.
    radius_px : blob radius, px; ``darkness`` fraction of light it removes at its centre (0..1).
    glow_dn : light the blob adds, DN (a lit moth at dusk; 0 for a dark insect).
    """

    _part: ClassVar[str] = "clutter"
    distractor: bool = False
    start_px: tuple[float, float] = vector((200.0, 150.0), 2)
    velocity_pxps: tuple[float, float] = vector((600.0, 150.0), 2)
    wobble_px: float = finite(20.0)
    wobble_hz: float = positive(6.0)
    radius_px: float = positive(4.0)
    darkness: float = fraction(0.6)
    glow_dn: float = at_least_zero(0.0)


@dataclass(frozen=True)
class ImageModelSpec(SpecPart):
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

    _part: ClassVar[str] = "image"
    noise: bool = True
    gain_e_per_dn: float = positive(8.0)
    read_noise_dn: float = at_least_zero(1.5)
    motion_blur: bool = True
    rolling_shutter: bool = True
    bb_supersample: int = integer(4, 1, 16)


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
