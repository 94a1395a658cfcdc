"""The BB's motion in the video clock, flown by the project's flight model (never by physics of its own).

Notes
-----
World frame: x downrange, y up, z toward the camera, metres; the flight plane is z = 0. Times are seconds
on the video clock (frame k has container timestamp k/fps).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.integrate import cumulative_trapezoid

from hopscope.fitting.air import Air
from hopscope.fitting.bb import BB
from hopscope.fitting.flight import FlightModel, LaunchState, Trajectory, fly
from hopscope.fitting.laws import ConstantDrag, ExponentialDecay, LinearLift

from .camera import SceneCamera, project_camera_points
from .spec import SceneSpec

#: Step of the RK4 integration used for the truth, s (Hermite interpolation in between).
FLIGHT_STEP_S = 2e-4
#: Spacing of the grid the spin angle is integrated on, s.
SPIN_GRID_STEP_S = 1e-5
#: Slack on the start of a hold, s (frame times k/fps carry rounding).
HOLD_EPS_S = 1e-9


@dataclass(frozen=True, eq=False)
class Motion:
    """A BB's path in the video clock: trajectory since release plus release time (video clock, s).

    Before the release the BB is absent, or, for ``hold_s`` seconds, at rest at its release point (in a
    holder).
    """

    trajectory: Trajectory
    t0_s: float
    spin_grid_t: np.ndarray  # times since release, s
    spin_angle: np.ndarray  # spin angle since release, rad
    hold_s: float = 0.0

    def states(self, t_video: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """(positions (..., 3) m, spin angle (...,) rad, present (...,) bool) at video times (s)."""
        t = np.asarray(t_video, dtype=float) - self.t0_s
        span = self.trajectory.t_s
        present = (t >= -self.hold_s - HOLD_EPS_S) & (t <= span[-1])
        tc = np.clip(t, span[0], span[-1])
        flat = tc.reshape(-1)
        st = self.trajectory.sample(flat)[0]
        pos = st[:, 0:3].reshape(*t.shape, 3)
        ang = np.interp(flat, self.spin_grid_t, self.spin_angle).reshape(t.shape)
        return pos, ang, present


def motion_from_trajectory(traj: Trajectory, t0_s: float, *, hold_s: float = 0.0) -> Motion:
    """The motion of a BB released at video time ``t0_s`` (s), at rest ``hold_s`` (s) before it."""
    tg = np.arange(0.0, traj.t_s[-1], SPIN_GRID_STEP_S)
    tg = np.append(tg, traj.t_s[-1])
    om = traj.sample(tg)[0, :, 6]
    return Motion(traj, t0_s, tg, cumulative_trapezoid(om, tg, initial=0.0), hold_s)


def flight_model(spec: SceneSpec) -> FlightModel:
    """The project's flight model for the scene (constant drag, linear lift, exponential spin decay)."""
    f = spec.flight
    air = Air.from_conditions(f.temperature_k, f.pressure_pa, f.relative_humidity)
    return FlightModel(
        bb=BB(spec.bb.mass_kg, spec.bb.diameter_m),
        air=air,
        drag=ConstantDrag(f.drag_coefficient),
        lift=LinearLift(f.lift_slope),
        decay=ExponentialDecay(f.spin_decay_time_s),
    )


def launch_state(spec: SceneSpec) -> LaunchState:
    """Launch state: speed, elevation, azimuth, muzzle; spin ω0 = (C_L0 / k) · u0 / r about +z (backspin)."""
    f = spec.flight
    omega0 = f.lift_coefficient / f.lift_slope * f.speed_mps / (0.5 * spec.bb.diameter_m)
    return LaunchState.from_speed(
        f.speed_mps,
        math.radians(f.elevation_deg),
        azimuth_rad=math.radians(f.azimuth_deg),
        spin_radps=omega0,
        spin_axis=(0.0, 0.0, 1.0),
        position_m=f.muzzle_m,
    )


def visible_mask(camera: SceneCamera, pos: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    cam = camera.to_camera(pos)
    uv = project_camera_points(camera, cam)
    w, h = camera.image_size
    vis = (
        (cam[:, 2] > 0)
        & (uv[:, 0] >= -0.5)
        & (uv[:, 0] <= w - 0.5)
        & (uv[:, 1] >= -0.5)
        & (uv[:, 1] <= h - 0.5)
    )
    return vis, uv


def field_x_span(camera: SceneCamera) -> tuple[float, float]:
    """Downrange extent (m) of the image's horizontal centre line on the plane z = 0."""
    w, h = camera.image_size
    xn = camera.undistort_pixels(np.array([[0.0, (h - 1) / 2], [w - 1.0, (h - 1) / 2]]))
    c = camera.centre_m
    xs = []
    for x, y in xn:
        d = camera.rotation.T @ np.array([x, y, 1.0])
        lam = -c[2] / d[2]
        xs.append(c[0] + lam * d[0])
    return min(xs), max(xs)


@dataclass(frozen=True, eq=False)
class FlightPlan:
    """The shot in the video clock: trajectory, launch time, frame count and the visible window."""

    model: FlightModel
    launch: LaunchState
    trajectory: Trajectory
    launch_time_s: float
    n_frames: int
    t_enter_s: float  # since launch
    t_exit_s: float  # since launch


def plan_flight(spec: SceneSpec, camera: SceneCamera, readout_s: float) -> FlightPlan:
    """Fly the shot and place it in the clip so that it enters after ``lead_frames`` empty frames."""
    model = flight_model(spec)
    launch = launch_state(spec)
    fps = spec.camera.fps
    x0, x1 = field_x_span(camera)
    dist = max(x1 - spec.flight.muzzle_m[0], 0.1) + 0.2 * (x1 - x0)
    duration = dist / (0.5 * spec.flight.speed_mps) + 0.05
    traj = fly(model, launch, duration, step_s=FLIGHT_STEP_S)
    tg = np.arange(0.0, traj.t_s[-1], 2e-5)
    vis, _ = visible_mask(camera, traj.sample(tg)[0, :, 0:3])
    if not np.any(vis):
        raise ValueError(
            f"scene {spec.name!r}: the BB never crosses the image (check muzzle_m and the camera)"
        )
    idx = np.nonzero(vis)[0]
    t_enter, t_exit = float(tg[idx[0]]), float(tg[idx[-1]])
    if idx[-1] == tg.size - 1:
        raise ValueError(f"scene {spec.name!r}: the BB is still in view after {duration:.3f} s of flight")
    launch_time = spec.flight.lead_frames / fps - t_enter
    n_frames = int(math.ceil((launch_time + t_exit) * fps)) + 1 + spec.flight.tail_frames
    needed = (n_frames + 1) / fps + readout_s + spec.camera.exposure_s - launch_time + 1e-3
    if needed > traj.t_s[-1]:
        traj = fly(model, launch, needed, step_s=FLIGHT_STEP_S)
    return FlightPlan(model, launch, traj, launch_time, n_frames, t_enter, t_exit)


def drop_fps(spec: SceneSpec) -> float:
    """Frame rate of the drop clip, 1/s (the camera's unless the drop says otherwise)."""
    if spec.drop is None or spec.drop.fps is None:
        return spec.camera.fps
    return spec.drop.fps


def plan_drop(spec: SceneSpec, model: FlightModel, readout_s: float) -> tuple[Motion, int, float]:
    """The drop: released at rest at ``release_m`` after ``lead_frames``; returns (motion, n_frames, t0).

    With ``holder_frames`` the BB rests at ``release_m`` for that many frames before the release.
    """
    d = spec.drop
    if d is None:
        raise ValueError(f"scene {spec.name!r} has no drop clip")
    fps = drop_fps(spec)
    t0 = d.lead_frames / fps
    n_frames = d.lead_frames + d.n_frames
    duration = (n_frames + 1) / fps + readout_s + spec.camera.exposure_s - t0 + 1e-3
    launch = LaunchState.from_speed(0.0, 0.0, spin_radps=0.0, position_m=d.release_m)
    traj = fly(model, launch, duration, step_s=FLIGHT_STEP_S)
    return motion_from_trajectory(traj, t0, hold_s=d.holder_frames / fps), n_frames, t0
