"""The drop check's result as the rig carries it: a typed record, written as ``rig.json``'s ``drop_check``.

:mod:`calibration.drop` measures it; :class:`calibration.rig.Rig` carries it; later commands read
:attr:`DropCheck.failed` (and :attr:`calibration.rig.Rig.drop_check_warning`) to warn about a rig that
failed its own check.

``rig.json`` layout of ``drop_check`` (schema ``hopscope.rig/1``; every key below is written, the keys
marked *new* may be absent in older files and are read with the default given):

=========================  =================================================================================
``clip``                   the drop clip's path
``timing``                 ``"container timestamps"`` or ``"--fps override"``
``fps``                    frame rate implied by the timing, Hz (null when unknown)
``frames``                 frames in the clip
``g_expected_mps2``        expected local gravity, m/s²
``verdict``                ``"consistent"``, ``"inconsistent"`` or ``"failed"`` (no usable fall)
``reason``                 why the check failed or is inconsistent, "" otherwise
``levelled``               the world frame was turned so gravity points along −y
``g_measured_mps2``        ``{"value", "stderr"}``, m/s² (null when failed); the stderr holds the fall's fit
                           and the rig's own scale doubt at the drop (its ensemble)
``g_ratio``                measured / expected g (null when failed)
``tilt_deg``               ``{"value", "stderr"}``: gravity's angle from −y toward +x, degrees (null when failed)
``tilt_stderr_parts_deg``  ``{"fit", "centroid_systematic"}``: the parts of the tilt's standard error, degrees
``fall_px``                length of the fitted fall in the image, px
``drag_per_m``             ``{"value", "stderr"}`` of the quadratic-drag term, 1/m, or null when not kept
``points``                 frames used in the fit; ``duration_s``: the time they span, s
``residual_rms_m``         RMS of the fit's position residuals, m
``release_frame``          *new*: first frame of the free fall (the ball left its holder), or null
``clean_parabola``         *new*: the residuals look like noise about a parabola (no trend left), true/false
``likely_cause``           *new*: for an inconsistent check, ``"frame rate"``, ``"scale"`` or
                           ``"not free fall"``; "" otherwise
``kept_by_user``           *new*: an inconsistent rig was written anyway (``calibrate --keep-failed-drop``);
                           later commands must repeat a ``warning:`` line for it (default false)
=========================  =================================================================================
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

from hopscope.shared.parse import json_finite

VERDICTS = ("consistent", "inconsistent", "failed")
CAUSES = ("", "frame rate", "scale", "not free fall")

#: The words that open :attr:`calibration.rig.Rig.drop_check_warning`; the report looks for them in the
#: warnings it carries (from the rig, or from tracks mapped with such a rig) to mark the page.
DROP_FAILED_MARK = "this rig failed its own drop check"


@dataclass(frozen=True)
class Measured:
    """A value with its standard error (same unit)."""

    value: float
    stderr: float

    def __post_init__(self) -> None:
        if not (math.isfinite(self.value) and math.isfinite(self.stderr) and self.stderr >= 0):
            raise ValueError(f"expected a finite value and stderr >= 0, got {self.value!r} ± {self.stderr!r}")

    def to_dict(self) -> dict[str, float]:
        return {"value": float(self.value), "stderr": float(self.stderr)}


@dataclass(frozen=True)
class DropCheck:
    """Free-fall check of scale, frame rate and level (fields as in this module's table; SI except the
    degrees of ``tilt_deg``, which the file has always carried)."""

    clip: str
    timing: str
    fps: float | None
    frames: int
    g_expected_mps2: float
    verdict: str
    reason: str = ""
    levelled: bool = False
    g_measured_mps2: Measured | None = None
    g_ratio: float | None = None
    tilt_deg: Measured | None = None
    tilt_fit_stderr_deg: float | None = None
    tilt_centroid_stderr_deg: float | None = None
    fall_px: float | None = None
    drag_per_m: Measured | None = None
    points: int = 0
    duration_s: float | None = None
    residual_rms_m: float | None = None
    release_frame: int | None = None
    clean_parabola: bool = False
    likely_cause: str = ""
    kept_by_user: bool = False

    def __post_init__(self) -> None:
        if self.verdict not in VERDICTS:
            raise ValueError(
                f"drop_check.verdict: expected one of {', '.join(VERDICTS)}, got {self.verdict!r}"
            )
        if self.likely_cause not in CAUSES:
            raise ValueError(f"drop_check.likely_cause: expected one of {CAUSES}, got {self.likely_cause!r}")
        for name in ("fps", "g_ratio", "fall_px", "duration_s", "residual_rms_m", "tilt_fit_stderr_deg",
                     "tilt_centroid_stderr_deg"):  # fmt: skip
            v = getattr(self, name)
            if v is not None and not math.isfinite(v):
                raise ValueError(f"drop_check.{name}: not a finite number")
        if not (math.isfinite(self.g_expected_mps2) and self.g_expected_mps2 > 0):
            raise ValueError("drop_check.g_expected_mps2: expected a positive number")

    @property
    def failed(self) -> bool:
        """True when the rig did not pass its own drop check (inconsistent g, or no usable fall)."""
        return self.verdict != "consistent"

    def to_dict(self) -> dict[str, Any]:
        """The ``rig.json`` object (layout in the module docstring)."""

        def est(m: Measured | None) -> dict[str, float] | None:
            return None if m is None else m.to_dict()

        parts = None
        if self.tilt_fit_stderr_deg is not None:
            parts = {"fit": self.tilt_fit_stderr_deg, "centroid_systematic": self.tilt_centroid_stderr_deg}
        return {
            "clip": self.clip,
            "timing": self.timing,
            "fps": self.fps,
            "frames": self.frames,
            "g_expected_mps2": self.g_expected_mps2,
            "verdict": self.verdict,
            "reason": self.reason,
            "levelled": self.levelled,
            "g_measured_mps2": est(self.g_measured_mps2),
            "g_ratio": self.g_ratio,
            "tilt_deg": est(self.tilt_deg),
            "tilt_stderr_parts_deg": parts,
            "fall_px": self.fall_px,
            "drag_per_m": est(self.drag_per_m),
            "points": self.points,
            "duration_s": self.duration_s,
            "residual_rms_m": self.residual_rms_m,
            "release_frame": self.release_frame,
            "clean_parabola": self.clean_parabola,
            "likely_cause": self.likely_cause,
            "kept_by_user": self.kept_by_user,
        }

    @classmethod
    def from_dict(cls, data: Mapping[str, Any], where: str = "drop_check") -> DropCheck:
        """Read the ``rig.json`` object (older files without the *new* keys included); ValueError naming
        the field when a value is missing or of the wrong kind."""

        def num(key: str, default: Any = ...) -> float | None:
            if key not in data:
                if default is ...:
                    raise ValueError(f"{where}.{key}: missing")
                return default  # type: ignore[no-any-return]
            v = data[key]
            return None if v is None else json_finite(v, f"{where}.{key}")

        def est(key: str) -> Measured | None:
            v = data.get(key)
            if v is None:
                return None
            if not isinstance(v, Mapping):
                raise ValueError(f"{where}.{key}: expected an object with value and stderr")
            try:
                return Measured(
                    json_finite(v.get("value"), f"{where}.{key}.value"),
                    json_finite(v.get("stderr"), f"{where}.{key}.stderr"),
                )
            except ValueError as exc:
                raise ValueError(f"{where}.{key}: {exc}") from None

        def text(key: str, default: str | None = None) -> str:
            v = data.get(key, default)
            if not isinstance(v, str):
                raise ValueError(f"{where}.{key}: expected a string")
            return v

        def flag(key: str) -> bool:
            v = data.get(key, False)
            if not isinstance(v, bool):
                raise ValueError(f"{where}.{key}: expected true or false")
            return v

        parts = data.get("tilt_stderr_parts_deg")
        if parts is not None and not isinstance(parts, Mapping):
            raise ValueError(f"{where}.tilt_stderr_parts_deg: expected an object")
        release = data.get("release_frame")
        if release is not None and (isinstance(release, bool) or not isinstance(release, int)):
            raise ValueError(f"{where}.release_frame: expected a frame index or null")
        frames = data.get("frames", 0)
        points = data.get("points", 0)
        for key, v in (("frames", frames), ("points", points)):
            if isinstance(v, bool) or not isinstance(v, int) or v < 0:
                raise ValueError(f"{where}.{key}: expected a count")
        g_expected = num("g_expected_mps2")
        return cls(
            clip=text("clip", ""),
            timing=text("timing", ""),
            fps=num("fps", None),
            frames=frames,
            g_expected_mps2=g_expected,  # type: ignore[arg-type]
            verdict=text("verdict"),
            reason=text("reason", ""),
            levelled=flag("levelled"),
            g_measured_mps2=est("g_measured_mps2"),
            g_ratio=num("g_ratio", None),
            tilt_deg=est("tilt_deg"),
            tilt_fit_stderr_deg=None
            if parts is None
            else json_finite(parts.get("fit"), f"{where}.tilt_stderr_parts_deg.fit"),
            tilt_centroid_stderr_deg=None
            if parts is None
            else json_finite(
                parts.get("centroid_systematic"), f"{where}.tilt_stderr_parts_deg.centroid_systematic"
            ),
            fall_px=num("fall_px", None),
            drag_per_m=est("drag_per_m"),
            points=points,
            duration_s=num("duration_s", None),
            residual_rms_m=num("residual_rms_m", None),
            release_frame=release,
            clean_parabola=flag("clean_parabola"),
            likely_cause=text("likely_cause", ""),
            kept_by_user=flag("kept_by_user"),
        )
