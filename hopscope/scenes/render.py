"""The renderer: board images, the flight clip, the drop clip and ``truth.json`` for a :class:`SceneSpec`.

Image model (every effect can be switched off for tests through :class:`~hopscope.scenes.spec.ImageModelSpec`),
one module per concept:

- geometry (:mod:`~hopscope.scenes.camera`): OpenCV pinhole camera with radial and tangential distortion;
  textures are rendered by inverse mapping (pixel → ray → plane → analytic texture), supersampled;
- board (:mod:`~hopscope.scenes.board`): analytic checker squares, box-filtered per sample (exact integral
  of the square wave over the sample's footprint), white margin, lit by ``board_illumination_dn`` ×
  reflectance × a gentle gradient; where it stands (:mod:`~hopscope.scenes.poses`);
- lighting (:mod:`~hopscope.scenes.lighting`): a wall ``wall_distance_m`` behind the flight plane with a
  band-limited sum-of-sinusoids texture (no aliasing at one sample per pixel), a sunlit gradient, mains
  flicker (per row time);
- motion (:mod:`~hopscope.scenes.motion`): the BB flown by the project's flight model
  (:func:`hopscope.fitting.flight.fly`), never by physics of its own;
- BB image (:mod:`~hopscope.scenes.bbimage`): a disk of radius f·r/Z px around the projected centre (white:
  limb-darkened; tracer: bright core and Gaussian halo, self-luminous; marked: half dark, lit from above, so
  brightness follows the spin angle), drawn with ``bb_supersample``² samples per pixel, integrated over the
  exposure with enough sub-samples for a smooth streak, each row at its own rolling-shutter time;
- clutter (:mod:`~hopscope.scenes.clutter`): a dark or bright distractor, the drop's holder;
- sensor (:mod:`~hopscope.scenes.sensor`): lens blur (Gaussian PSF), shot + read noise, 8-bit quantisation;
  clips written by ``cv2.VideoWriter`` (fourcc ``mp4v``, lossy) as 3-channel BGR;
- truth (:mod:`~hopscope.scenes.truth`): ``truth.json``, typed.

Known simplifications (honest limits of the model):

- the BB's image is a disk of radius f·r/Z centred on the projected centre; the lens distortion's local
  change of scale (a few per cent at the frame's edges) and the perspective offset of a sphere's outline
  (far below 0.01 px here) are not drawn;
- shot noise is Gaussian with the Poisson variance; there is no fixed-pattern noise, vignetting, defocus
  or sensor saturation bloom (the tracer's glow is a Gaussian halo);
- the distractor moves in image space (it is not a 3-D object), and the wall is a flat plane;
- lighting is the same for every board pose (no shadows or glare on the board).

Notes
-----
Pixel points are (u, v) with the centre of the top-left pixel at (0, 0); images are indexed (row, col).
World frame: x downrange, y up, z toward the camera, metres; the flight plane is z = 0.
Time: frame k has container timestamp k/fps; row r of frame k is exposed over
[k/fps + r·readout/rows, k/fps + r·readout/rows + exposure].
"""

from __future__ import annotations

import dataclasses
import json
import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from hopscope.shared.fileio import write_text_atomic

from .board import CORNER_ORDER, render_board_image
from .camera import SceneCamera
from .clip import clip_frame, path_samples, true_frames
from .clutter import holder_background, holder_truth
from .context import ClipContext
from .lighting import WallTexture, render_wall, wall_texture_for
from .motion import FlightPlan, Motion, drop_fps, motion_from_trajectory, plan_drop, plan_flight
from .poses import lens_view_poses, plane_view_pose
from .sensor import write_clip, write_png
from .spec import SceneSpec
from .truth import TRUTH_SCHEMA, SceneTruth, load_truth, truth_from_dict

ALL_PARTS = ("lens", "plane", "drop", "flight")


Progress = Callable[[str, int, int], None]


@dataclass(frozen=True)
class RenderedScene:
    """Files of a rendered scene and its truth.

    Attributes
    ----------
    out_dir : the scene's folder.
    lens_view_paths : board images for the lens calibration.
    plane_views : (path, downrange offset m) of each board placement in the flight plane.
    drop_clip_path : the drop clip, or None.
    flight_clip_path : the flight clip (mp4), or None when the part was not rendered.
    truth_path : ``truth.json``.
    truth : its content, typed (``truth[key]`` reads the file's own layout).
    """

    out_dir: Path
    lens_view_paths: tuple[Path, ...]
    plane_views: tuple[tuple[Path, float], ...]
    drop_clip_path: Path | None
    flight_clip_path: Path | None
    truth_path: Path
    truth: SceneTruth


@dataclass(frozen=True, eq=False)
class PreparedScene:
    """Everything about a scene except the files: camera, background, flight plan, drop plan, streams."""

    spec: SceneSpec
    camera: SceneCamera
    texture: WallTexture
    background: np.ndarray
    plan: FlightPlan
    flight_motion: Motion
    readout_s: float
    streams: dict[str, np.random.Generator]

    @property
    def context(self) -> ClipContext:
        return ClipContext(self.camera, self.spec, self.background, self.readout_s, self.spec.camera.fps)

    @property
    def drop_context(self) -> ClipContext:
        background = self.__dict__.get("_drop_background")
        if background is None:
            background = holder_background(self.camera, self.spec, self.background)
            object.__setattr__(self, "_drop_background", background)
        return ClipContext(self.camera, self.spec, background, self.readout_s, drop_fps(self.spec))

    def flight_frame(
        self,
        k: int,
        *,
        rng: np.random.Generator | None = None,
        bb: bool = True,
        quantise: bool = True,
        with_clutter: bool = True,
    ) -> np.ndarray:
        """Frame ``k`` of the flight clip (8-bit, or float DN before noise when ``quantise=False``)."""
        return clip_frame(
            self.context,
            k,
            self.flight_motion if bb else None,
            rng=rng,
            quantise=quantise,
            with_clutter=with_clutter,
        )

    def true_flight_frames(self) -> list[dict[str, Any]]:
        """truth.json's per-frame records of the flight clip."""
        return true_frames(self.context, self.flight_motion, self.plan.n_frames)

    def drop_plan(self) -> tuple[Motion, int, float]:
        """(motion, n_frames, release time s) of the drop clip; ``ValueError`` when the scene has none."""
        if self.spec.drop is None:
            raise ValueError(f"scene {self.spec.name!r} has no drop clip")
        cached = self.__dict__.get("_drop")
        if cached is None:
            cached = plan_drop(self.spec, self.plan.model, self.readout_s)
            object.__setattr__(self, "_drop", cached)
        return cached

    def drop_frame(
        self, k: int, *, rng: np.random.Generator | None = None, bb: bool = True, quantise: bool = True
    ) -> np.ndarray:
        """Frame ``k`` of the drop clip (8-bit, or float DN before noise when ``quantise=False``)."""
        motion = self.drop_plan()[0]
        return clip_frame(self.drop_context, k, motion if bb else None, rng=rng, quantise=quantise)

    def true_drop_frames(self) -> list[dict[str, Any]]:
        """truth.json's per-frame records of the drop clip."""
        motion, n, _ = self.drop_plan()
        return true_frames(self.drop_context, motion, n)


def prepare_scene(spec: SceneSpec, *, rng: int | np.random.Generator = 0) -> PreparedScene:
    """Build the camera, the wall, fly the BB and lay out the clip (no files written)."""
    gen = np.random.default_rng(rng)
    names = ("texture", "lens", "plane", "drop", "flight", "spare")
    streams = dict(zip(names, gen.spawn(len(names)), strict=True))
    camera = SceneCamera.from_spec(spec.camera)
    texture = wall_texture_for(camera, spec.lighting, streams["texture"])
    background = render_wall(camera, spec.lighting, texture)
    readout = spec.camera.readout_s if spec.image.rolling_shutter else 0.0
    plan = plan_flight(spec, camera, readout)
    motion = motion_from_trajectory(plan.trajectory, plan.launch_time_s)
    return PreparedScene(spec, camera, texture, background, plan, motion, readout, streams)


def _rt(rot: np.ndarray, tr: np.ndarray) -> dict[str, Any]:
    return {"rotation": np.asarray(rot).tolist(), "translation": np.asarray(tr).reshape(3).tolist()}


def _cached(out_dir: Path, digest: str, parts: Sequence[str]) -> RenderedScene | None:
    path = out_dir / "truth.json"
    if not path.is_file():
        return None
    try:
        truth = load_truth(path)
    except (ValueError, OSError):
        return None
    if truth.spec_digest != digest or not set(parts) <= set(truth.parts):
        return None
    scene = _rendered_from_truth(out_dir, truth)
    files = [*scene.lens_view_paths, *(p for p, _ in scene.plane_views)]
    files += [p for p in (scene.drop_clip_path, scene.flight_clip_path) if p is not None]
    if not all(p.is_file() for p in files):
        return None
    return scene


def _rendered_from_truth(out_dir: Path, truth: SceneTruth) -> RenderedScene:
    lens = tuple(out_dir / v.file for v in truth.lens_views)
    plane = tuple((out_dir / v.file, float(v.offset_m or 0.0)) for v in truth.plane_views)
    drop = out_dir / truth.drop.file if truth.drop is not None else None
    flight = out_dir / truth.flight.file if truth.flight is not None else None
    return RenderedScene(out_dir, lens, plane, drop, flight, out_dir / "truth.json", truth)


def render_scene(
    spec: SceneSpec,
    out_dir: str | Path,
    *,
    rng: int | np.random.Generator = 0,
    progress: Progress | None = None,
    parts: Sequence[str] = ALL_PARTS,
) -> RenderedScene:
    """Render a scene's images, clips and ``truth.json`` into ``out_dir`` (reused if already complete).

    Parameters
    ----------
    spec : the scene.
    out_dir : output folder (created if missing).
    rng : int seed (renders are cached by spec digest and seed) or a Generator (never cached).
    progress : optional callback ``progress(stage, done, total)``.
    parts : which of "lens", "plane", "drop", "flight" to render.

    Returns
    -------
    RenderedScene with the files' paths and the parsed truth.
    """
    bad = [p for p in parts if p not in ALL_PARTS]
    if bad:
        raise ValueError(f"parts: unknown part(s) {bad}; choose from {ALL_PARTS}")
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    seed = int(rng) if isinstance(rng, int | np.integer) else None
    digest = spec.digest(seed)
    if seed is not None:
        hit = _cached(out, digest, parts)
        if hit is not None:
            return hit

    def tick(stage: str, done: int, total: int) -> None:
        if progress is not None:
            progress(stage, done, total)

    # a stale truth.json must not describe the files about to be rewritten, nor stale views linger
    # (users and the demo pass whole folders of views to the calibration)
    (out / "truth.json").unlink(missing_ok=True)
    for pattern in ("lens/lens_*.png", "plane/plane_*.png"):
        for old in out.glob(pattern):
            old.unlink()
    scene = prepare_scene(spec, rng=rng if seed is None else seed)
    cam = scene.camera
    truth: dict[str, Any] = {
        "schema": TRUTH_SCHEMA,
        "scene": spec.name,
        "description": spec.description,
        "spec_digest": digest,
        "seed": seed,
        "parts": list(parts),
        "spec": spec.to_dict(),
        "camera": {
            **cam.to_json(),
            "fps": spec.camera.fps,
            "readout_s": scene.readout_s,
            "exposure_s": spec.camera.exposure_s,
            "psf_sigma_px": spec.camera.psf_sigma_px,
            "centre_m": cam.centre_m.tolist(),
        },
        "board": {
            "cols": spec.board.cols,
            "rows": spec.board.rows,
            "square_m": spec.board.square_m,
            "margin_m": spec.board.margin_m,
            "width_m": spec.board.width_m,
            "height_m": spec.board.height_m,
            "corner_order": CORNER_ORDER,
        },
        "world_frame": "x downrange (board rows, image right), y up, z toward the camera, metres; origin at "
        "the first plane placement's first inner corner; flight plane z = 0",
        "lens_views": [],
        "plane_views": [],
        "drop": None,
        "flight": None,
    }
    if "lens" in parts:
        (out / "lens").mkdir(exist_ok=True)
        poses = lens_view_poses(
            cam, spec.board, spec.lens.n_views, spec.lens.tilt_deg, spec.lens.fill, scene.streams["lens"]
        )
        noise_rng = scene.streams["lens"].spawn(1)[0]
        for i, (rot, tr) in enumerate(poses):
            img = _board_image_on(scene, rot, tr, spec.lens.supersample, noise_rng)
            name = f"lens/lens_{i:02d}.png"
            write_png(out / name, img)
            truth["lens_views"].append({"file": name, **_rt(rot, tr)})
            tick("lens views", i + 1, len(poses))
    if "plane" in parts:
        (out / "plane").mkdir(exist_ok=True)
        noise_rng = scene.streams["plane"]
        for i, off in enumerate(spec.plane.offsets_m):
            rot, tr = plane_view_pose(cam, spec.board, off, scene=spec.name)
            img = _board_image_on(scene, rot, tr, spec.plane.supersample, noise_rng)
            name = f"plane/plane_{i:02d}.png"
            write_png(out / name, img)
            truth["plane_views"].append({"file": name, "offset_m": off, **_rt(rot, tr)})
            tick("plane views", i + 1, len(spec.plane.offsets_m))
    if "drop" in parts and spec.drop is not None:
        motion, n_drop, t0 = scene.drop_plan()
        rng_d = scene.streams["drop"]
        frames = (scene.drop_frame(k, rng=rng_d) for k in range(n_drop))
        write_clip(
            out / "drop.mp4", _counting(frames, n_drop, "drop clip", tick), cam.image_size, drop_fps(spec)
        )
        tf = scene.true_drop_frames()
        vis_t = [f["t_mid_s"] for f in tf if f["visible"]]
        truth["drop"] = {
            "file": "drop.mp4",
            "fps": drop_fps(spec),
            "n_frames": n_drop,
            "g_mps2": scene.plan.model.gravity_mps2,
            "gravity_direction": [0.0, -1.0, 0.0],
            "release": {"t_s": t0, "position_m": list(spec.drop.release_m)},
            "model": "same flight model as the shot: gravity and constant drag, no spin",
            "path": path_samples(motion, max(t0, min(vis_t, default=t0)), max(vis_t, default=t0 + 0.01)),
            "frames": tf,
        }
        if spec.drop.holder_frames > 0:
            truth["drop"]["holder"] = holder_truth(spec)
    if "flight" in parts:
        ctx = scene.context
        rng_f = scene.streams["flight"]
        n = scene.plan.n_frames
        frames = (clip_frame(ctx, k, scene.flight_motion, rng=rng_f) for k in range(n))
        write_clip(
            out / "flight.mp4", _counting(frames, n, "flight clip", tick), cam.image_size, spec.camera.fps
        )
        truth["flight"] = _flight_truth(scene)
    write_text_atomic(out / "truth.json", json.dumps(truth, indent=1))
    return _rendered_from_truth(out, truth_from_dict(json.loads(json.dumps(truth)), str(out / "truth.json")))


def _counting(frames, total: int, stage: str, tick):
    for i, f in enumerate(frames):
        yield f
        tick(stage, i + 1, total)


def _board_image_on(scene: PreparedScene, rot, tr, supersample: int, rng: np.random.Generator) -> np.ndarray:
    spec = scene.spec
    return render_board_image(
        scene.camera,
        spec.board,
        rot,
        tr,
        lighting=spec.lighting,
        background=scene.background,
        supersample=supersample,
        psf_sigma_px=spec.camera.psf_sigma_px,
        image=spec.image,
        rng=rng,
    )


def _flight_truth(scene: PreparedScene) -> dict[str, Any]:
    spec = scene.spec
    plan = scene.plan
    model = plan.model
    bb = model.bb
    air = model.air
    frames = scene.true_flight_frames()
    t_first = plan.launch_time_s + plan.t_enter_s
    t_last = plan.launch_time_s + plan.t_exit_s
    st0 = plan.trajectory.sample(np.array([plan.t_enter_s]))[0, 0]
    u_first = float(np.linalg.norm(st0[3:6]))
    cl_first = float(model.lift.coefficient(np.array([bb.radius_m * st0[6] / u_first]))[0])
    la = plan.launch
    v0 = la.velocity_mps[0]
    return {
        "file": "flight.mp4",
        "n_frames": plan.n_frames,
        "fps": spec.camera.fps,
        "bb": {
            "kind": spec.bb.kind,
            "mass_kg": bb.mass_kg,
            "diameter_m": bb.diameter_m,
            "mark_phase_rad": math.radians(spec.bb.mark_phase_deg),
        },
        "air": dataclasses.asdict(air),
        "gravity_mps2": model.gravity_mps2,
        "wind_mps": list(model.wind_mps),
        "laws": {
            "drag": "constant",
            "drag_coefficient": spec.flight.drag_coefficient,
            "lift": "linear",
            "lift_slope": spec.flight.lift_slope,
            "lift_coefficient": {"launch": spec.flight.lift_coefficient, "first_in_view": cl_first},
            "decay": "exponential",
            "spin_decay_time_s": spec.flight.spin_decay_time_s,
        },
        "launch": {
            "t_s": plan.launch_time_s,
            "position_m": la.position_m[0].tolist(),
            "velocity_mps": v0.tolist(),
            "speed_mps": float(np.linalg.norm(v0)),
            "elevation_deg": math.degrees(math.atan2(v0[1], math.hypot(v0[0], v0[2]))),
            "spin_radps": float(la.spin_radps[0]),
            "spin_axis": la.spin_axis[0].tolist(),
        },
        "first_in_view": {
            "t_s": t_first,
            "position_m": st0[0:3].tolist(),
            "velocity_mps": st0[3:6].tolist(),
            "speed_mps": u_first,
            "spin_radps": float(st0[6]),
        },
        "path": path_samples(scene.flight_motion, t_first, t_last),
        "frames": frames,
    }
