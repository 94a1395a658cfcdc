"""The rig: camera model, flight-plane pose and world frame, with the calibration's own uncertainty.

A :class:`Rig` maps pixels to metres on the flight plane and back. It is the single place where pixels
become metres (``rig.json``, schema ``hopscope.rig/1``).

Conventions
-----------
Pixel points are (u, v) = (x, y) in OpenCV order, the centre of the top-left pixel at (0, 0).
World frame: x downrange (along the board's rows toward image right), y up, z = x × y (toward the camera),
metres; origin at the first plane placement's first inner corner. Camera pose is world → camera:
``X_cam = R @ X_world + t``. The flight plane is ``z = plane_z_m`` (0 = the board plane; a board standing a
known distance *behind* the flight plane gives ``plane_z_m > 0``).

The camera model (:class:`CameraState`, in :mod:`calibration.camera`, importable from here) is OpenCV's
pinhole model with Brown–Conrady distortion (coefficients in OpenCV order k1, k2, p1, p2[, k3[, ...]]).

References
----------
Zhang, Z. (2000). A flexible new technique for camera calibration. IEEE TPAMI 22(11):1330–1334.
Brown, D. C. (1966). Decentering distortion of lenses. Photogrammetric Engineering 32(3):444–462.
"""

from __future__ import annotations

import dataclasses
import functools
import hashlib
import json
import math
import os
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from hopscope.shared.parse import json_finite

from .camera import JACOBIAN_STEP_PX, UNDISTORT_CRITERIA, CameraState, _points
from .dropcheck import DROP_FAILED_MARK, DropCheck

__all__ = [
    "JACOBIAN_STEP_PX",
    "SCHEMA",
    "UNDISTORT_CRITERIA",
    "CameraState",
    "Rig",
    "read_rig",
    "rig_from_json",
    "rig_to_dict",
    "rig_to_json",
]

SCHEMA = "hopscope.rig/1"


@dataclass(frozen=True, eq=False)
class Rig:
    """A calibrated camera looking at the flight plane.

    Attributes
    ----------
    image_size : (w, h) image width and height, px.
    camera_matrix : (3, 3) intrinsics K, px.
    dist_coeffs : (k,) distortion coefficients, OpenCV order.
    rotation, translation : world → camera pose, ``X_cam = R X_world + t`` (t in m).
    plane_z_m : world z of the flight plane, m (0 = the board plane; > 0 when the board stood behind it).
    reprojection_rms_px : RMS reprojection error of the lens calibration, px.
    ensemble : perturbed camera states (resampled views, corner noise, taped-offset error) that carry the
        calibration's uncertainty; map a point through each to get its calibration spread.
    coverage_m : (x_min, x_max, y_min, y_max) region of the flight plane covered by plane references, m.
    drop_check : free-fall scale and level check (:class:`calibration.dropcheck.DropCheck`, measured by
        :mod:`calibration.drop`), or None. A mapping in the ``rig.json`` layout is accepted and read.
        ``drop_check.failed`` marks a rig that did not pass its own check; :attr:`drop_check_warning` is
        the line later commands print for it.
    provenance : how the rig was made (inputs, views used/rejected, per-view errors, σ of intrinsics ...).
    warnings : warnings raised while making the rig (also printed by the CLI).

    Notes
    -----
    World frame: x downrange, y up, z toward the camera, metres; pixels (u, v) in OpenCV order.
    """

    image_size: tuple[int, int]
    camera_matrix: np.ndarray
    dist_coeffs: np.ndarray
    rotation: np.ndarray
    translation: np.ndarray
    plane_z_m: float
    reprojection_rms_px: float
    ensemble: tuple[CameraState, ...] = ()
    coverage_m: tuple[float, float, float, float] = (0.0, 0.0, 0.0, 0.0)
    drop_check: DropCheck | None = None
    provenance: Mapping[str, Any] = field(default_factory=dict)
    warnings: tuple[str, ...] = ()

    def __post_init__(self) -> None:
        size = tuple(self.image_size)
        if len(size) != 2 or not all(float(s).is_integer() and s > 0 for s in size):
            raise ValueError(
                f"rig field image_size: expected (w, h) positive integers, got {self.image_size!r}"
            )
        object.__setattr__(self, "image_size", (int(size[0]), int(size[1])))
        nominal = CameraState(
            self.camera_matrix, self.dist_coeffs, self.rotation, self.translation, self.plane_z_m
        )
        for name in ("camera_matrix", "dist_coeffs", "rotation", "translation", "plane_z_m"):
            object.__setattr__(self, name, getattr(nominal, name))
        rms = float(self.reprojection_rms_px)
        if not (math.isfinite(rms) and rms >= 0):
            raise ValueError(f"rig field reprojection_rms_px: expected a finite number >= 0, got {rms!r}")
        object.__setattr__(self, "reprojection_rms_px", rms)
        ens = tuple(m if isinstance(m, CameraState) else CameraState(**m) for m in self.ensemble)
        object.__setattr__(self, "ensemble", ens)
        cov = tuple(float(c) for c in self.coverage_m)
        if len(cov) != 4 or not all(math.isfinite(c) for c in cov) or cov[0] > cov[1] or cov[2] > cov[3]:
            raise ValueError(
                f"rig field coverage_m: expected finite (x_min, x_max, y_min, y_max), got {cov!r}"
            )
        object.__setattr__(self, "coverage_m", cov)
        if isinstance(self.drop_check, Mapping):
            object.__setattr__(
                self, "drop_check", DropCheck.from_dict(self.drop_check, "rig field drop_check")
            )
        elif self.drop_check is not None and not isinstance(self.drop_check, DropCheck):
            raise ValueError("rig field drop_check: expected a DropCheck, a mapping or None")
        object.__setattr__(self, "provenance", dict(self.provenance))
        object.__setattr__(self, "warnings", tuple(str(w) for w in self.warnings))

    # --- mapping ---------------------------------------------------------------------------------------
    @functools.cached_property
    def nominal(self) -> CameraState:
        """The nominal camera state (intrinsics, distortion, pose, plane), made once per rig."""
        return CameraState(
            self.camera_matrix, self.dist_coeffs, self.rotation, self.translation, self.plane_z_m
        )

    @property
    def drop_check_warning(self) -> str | None:
        """The ``warning:`` text for a rig that failed its own drop check (None when it passed or has none).

        Later commands that use the rig print it and carry it into their outputs."""
        d = self.drop_check
        if d is None or not d.failed:
            return None
        g = (
            ""
            if d.g_measured_mps2 is None
            else f" (g = {d.g_measured_mps2.value:.4g} m/s², expected {d.g_expected_mps2:.4g})"
        )
        cause = f"; likely cause: {d.likely_cause}" if d.likely_cause else ""
        return f"{DROP_FAILED_MARK}{g}{cause}: its scale or timing may be wrong ({d.reason})"

    @property
    def camera_center_m(self) -> np.ndarray:
        """Camera centre in world coordinates, m."""
        return self.nominal.camera_center_m

    @property
    def plane_distance_m(self) -> float:
        """Perpendicular distance from the camera centre to the flight plane, m."""
        return self.nominal.plane_distance_m

    def pixel_to_world(self, uv: Any) -> np.ndarray:
        """(N, 2) pixels (u, v) → (N, 2) world (x, y) on the flight plane, m. See :meth:`CameraState.pixel_to_world`."""
        return self.nominal.pixel_to_world(uv)

    def world_to_pixel(self, xy: Any) -> np.ndarray:
        """(N, 2) plane (x, y) or (N, 3) world (x, y, z), m → (N, 2) pixels (u, v)."""
        return self.nominal.world_to_pixel(xy)

    def pixel_to_world_jacobian(self, uv: Any, *, step_px: float = JACOBIAN_STEP_PX) -> np.ndarray:
        """(N, 2, 2) d(x, y)/d(u, v), m/px, by central differences (``J[i, world axis, pixel axis]``)."""
        return self.nominal.pixel_to_world_jacobian(uv, step_px=step_px)

    def ensemble_pixel_to_world(self, uv: Any) -> np.ndarray:
        """(K, N, 2) world (x, y) of the pixels under each of the K ensemble members, m (K may be 0)."""
        pts = _points(uv, 2, "uv")
        if not self.ensemble:
            return np.zeros((0, pts.shape[0], 2))
        return np.stack([m.pixel_to_world(pts) for m in self.ensemble])

    def metres_per_pixel(self, uv: Any) -> np.ndarray:
        """(N,) local scale sqrt|det J| at the pixels, m/px (geometric mean of the two axes)."""
        return np.sqrt(np.abs(np.linalg.det(self.pixel_to_world_jacobian(uv))))

    def in_coverage(self, xy: Any, *, margin_m: float = 0.0) -> np.ndarray:
        """(N,) bool: world points inside the region covered by plane references (grown by ``margin_m``)."""
        p = _points(xy, 2, "xy")
        x0, x1, y0, y1 = self.coverage_m
        return (
            (p[:, 0] >= x0 - margin_m)
            & (p[:, 0] <= x1 + margin_m)
            & (p[:, 1] >= y0 - margin_m)
            & (p[:, 1] <= y1 + margin_m)
        )

    # --- derived rigs ----------------------------------------------------------------------------------
    def with_drop_check(self, drop_check: DropCheck | None, *, warnings: Sequence[str] = ()) -> Rig:
        """A copy carrying ``drop_check`` (and extra warnings)."""
        return dataclasses.replace(self, drop_check=drop_check, warnings=self.warnings + tuple(warnings))

    def rotated_about_z(self, angle_rad: float) -> Rig:
        """A copy whose world frame is turned by ``angle_rad`` about z (counter-clockwise seen from +z).

        A world point with old coordinates X has new coordinates Rz X. Used to make y point up when a drop
        shows the board was not level: the origin and the plane stay, the ensemble and coverage follow.
        """
        c, s = math.cos(angle_rad), math.sin(angle_rad)
        rz = np.array([[c, -s, 0.0], [s, c, 0.0], [0.0, 0.0, 1.0]])

        def turn(state: CameraState) -> CameraState:
            return dataclasses.replace(state, rotation=state.rotation @ rz.T)

        x0, x1, y0, y1 = self.coverage_m
        box = rz[:2, :2] @ np.array([[x0, x1, x1, x0], [y0, y0, y1, y1]])
        return dataclasses.replace(
            self,
            rotation=self.rotation @ rz.T,
            ensemble=tuple(turn(m) for m in self.ensemble),
            coverage_m=(box[0].min(), box[0].max(), box[1].min(), box[1].max()),
        )

    # --- identity ---------------------------------------------------------------------------------------
    @property
    def digest(self) -> str:
        """sha256 hex digest of the canonical JSON of the rig (sorted keys, no whitespace)."""
        return hashlib.sha256(_canonical(rig_to_dict(self)).encode("utf-8")).hexdigest()


def _plain(value: Any) -> Any:
    """Turn numpy scalars/arrays inside nested containers into JSON-ready Python values."""
    if isinstance(value, Mapping):
        return {str(k): _plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_plain(v) for v in value]
    if isinstance(value, np.ndarray):
        return _plain(value.tolist())
    if isinstance(value, np.bool_):
        return bool(value)
    if isinstance(value, np.integer):
        return int(value)
    if isinstance(value, np.floating):
        return float(value)
    return value


def _canonical(obj: Any) -> str:
    return json.dumps(obj, sort_keys=True, separators=(",", ":"), allow_nan=False)


# --- I/O ---------------------------------------------------------------------------------------------------
_FIELDS = (
    "image_size",
    "camera_matrix",
    "dist_coeffs",
    "rotation",
    "translation",
    "plane_z_m",
    "reprojection_rms_px",
    "ensemble",
    "coverage_m",
    "drop_check",
    "provenance",
    "warnings",
)


def rig_to_dict(rig: Rig) -> dict[str, Any]:
    """The JSON-ready dict of ``rig`` (schema ``hopscope.rig/1``)."""
    x0, x1, y0, y1 = rig.coverage_m
    return {
        "schema": SCHEMA,
        "image_size": list(rig.image_size),
        **rig.nominal.to_dict(),
        "reprojection_rms_px": rig.reprojection_rms_px,
        "ensemble": [m.to_dict() for m in rig.ensemble],
        "coverage_m": {"x_min": x0, "x_max": x1, "y_min": y0, "y_max": y1},
        "drop_check": rig.drop_check.to_dict() if rig.drop_check is not None else None,
        "provenance": _plain(rig.provenance),
        "warnings": list(rig.warnings),
    }


def rig_to_json(rig: Rig) -> str:
    """Serialise ``rig`` to JSON text (schema ``hopscope.rig/1``, indented, keys in a fixed order)."""
    return json.dumps(rig_to_dict(rig), indent=1, allow_nan=False) + "\n"


def _reject_constant(token: str) -> float:
    raise ValueError(f"non-finite number {token}")


def rig_from_json(text: str, source: str = "rig.json") -> Rig:
    """Read a rig from JSON text; ``source`` names the file in error messages.

    Raises
    ------
    ValueError
        One line naming ``source`` and the field: not JSON, another schema, a missing field, a wrong
        shape or a non-finite value.
    """
    try:
        data = json.loads(text, parse_constant=_reject_constant)
    except ValueError as exc:
        raise ValueError(f"{source}: not a valid rig file ({' '.join(str(exc).split())})") from None
    if not isinstance(data, dict):
        raise ValueError(f"{source}: not a valid rig file (expected a JSON object)")
    schema = data.get("schema")
    if schema != SCHEMA:
        raise ValueError(f"{source}: schema {schema!r} is not supported (expected {SCHEMA!r})")
    for name in _FIELDS:
        if name not in data:
            raise ValueError(f"{source}: missing field {name!r}")
    try:
        cov = data["coverage_m"]
        if not isinstance(cov, dict):
            raise ValueError("rig field coverage_m: expected an object with x_min, x_max, y_min, y_max")
        for key in ("x_min", "x_max", "y_min", "y_max"):
            json_finite(cov.get(key), f"rig field coverage_m.{key}")
        for name in ("plane_z_m", "reprojection_rms_px"):
            json_finite(data[name], f"rig field {name}")
        if not isinstance(data["ensemble"], list):
            raise ValueError("rig field ensemble: expected a list")
        members = []
        for i, m in enumerate(data["ensemble"]):
            if not isinstance(m, dict):
                raise ValueError(f"rig field ensemble[{i}]: expected an object")
            missing = [
                k
                for k in ("camera_matrix", "dist_coeffs", "rotation", "translation", "plane_z_m")
                if k not in m
            ]
            if missing:
                raise ValueError(f"rig field ensemble[{i}]: missing {missing[0]!r}")
            slope = json_finite(m.get("plane_slope", 0.0), f"rig field ensemble[{i}].plane_slope")
            try:
                members.append(
                    CameraState(
                        **{
                            k: m[k]
                            for k in ("camera_matrix", "dist_coeffs", "rotation", "translation", "plane_z_m")
                        },
                        plane_slope=slope,
                    )
                )
            except (ValueError, TypeError) as exc:
                raise ValueError(str(exc).replace("rig field ", f"rig field ensemble[{i}].")) from None
        drop = data["drop_check"]
        if drop is not None and not isinstance(drop, dict):
            raise ValueError("rig field drop_check: expected an object or null")
        prov = data["provenance"]
        if not isinstance(prov, dict):
            raise ValueError("rig field provenance: expected an object")
        warns = data["warnings"]
        if not isinstance(warns, list) or not all(isinstance(w, str) for w in warns):
            raise ValueError("rig field warnings: expected a list of strings")
        return Rig(
            image_size=tuple(data["image_size"]),  # type: ignore[arg-type]
            camera_matrix=data["camera_matrix"],
            dist_coeffs=data["dist_coeffs"],
            rotation=data["rotation"],
            translation=data["translation"],
            plane_z_m=data["plane_z_m"],
            reprojection_rms_px=data["reprojection_rms_px"],
            ensemble=tuple(members),
            coverage_m=(cov["x_min"], cov["x_max"], cov["y_min"], cov["y_max"]),
            drop_check=None if drop is None else DropCheck.from_dict(drop, "rig field drop_check"),
            provenance=prov,
            warnings=tuple(warns),
        )
    except (ValueError, TypeError) as exc:
        raise ValueError(f"{source}: {' '.join(str(exc).split())}") from None


def read_rig(path: str | os.PathLike[str]) -> Rig:
    """Read ``rig.json`` from ``path`` (``OSError`` if unreadable, ``ValueError`` naming the file if invalid)."""
    p = Path(path)
    text = p.read_text(encoding="utf-8")
    return rig_from_json(text, str(p))
