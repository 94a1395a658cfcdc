"""Benchmark: the vectorised RK4 flight integrator against a loop of scipy ``solve_ivp`` calls.

Run ``python tests/bench/bench_integrator.py`` (prints figures; nothing is asserted). Target: the
vectorised integrator is at least 50× faster than a loop of ``solve_ivp`` calls at equal accuracy.

What is compared
----------------
* ``fitting.flight.fly`` on 10,000 shots at once, 1 s of flight each, default step, default laws
  (constant drag, linear lift, exponential spin decay), random speeds 30–150 m/s, elevations, spins.
* ``scipy.integrate.solve_ivp``, one call per shot, with a lean pure-Python right-hand side (floats, no
  numpy, so that solve_ivp is not slowed by our code). Only a subset of the loop (``N_TIMED_CALLS`` calls)
  is timed, and the time is extrapolated linearly to 10,000 calls; the script says so in its output.
* "Equal accuracy": both are measured against DOP853 at rtol = atol = 1e-12 on ``N_ACCURACY_SHOTS``
  shots (maximum position error over the flight, m). For solve_ivp the script picks, among RK45 and
  DOP853 on a ladder of tolerances, the fastest setting whose error is no larger than the vectorised
  integrator's (and, as a second figure, the fastest setting within the project's 1 mm requirement).
"""

from __future__ import annotations

import math
import time

import numpy as np
from scipy.integrate import solve_ivp

from hopscope.fitting.air import Air
from hopscope.fitting.bb import BB
from hopscope.fitting.flight import DEFAULT_STEP_S, FlightModel, LaunchState, Trajectory, fly
from hopscope.fitting.laws import ConstantDrag, ExponentialDecay, LinearLift

N_SHOTS = 10_000
DURATION_S = 1.0
N_TIMED_CALLS = 200
N_ACCURACY_SHOTS = 12
REQUIREMENT_M = 1e-3  # ≤ 1 mm over the flight (issue 2)
TOLERANCE_LADDER = (1e-5, 1e-6, 1e-7, 1e-8, 1e-9, 1e-10, 1e-11, 1e-12)


def make_shots(rng: np.random.Generator):
    bb = BB(2.5e-4)
    air = Air.standard()
    model = FlightModel(
        bb,
        air,
        drag=ConstantDrag(0.45),
        lift=LinearLift(1.0),
        decay=ExponentialDecay(3.0),
        wind_mps=(-2.0, 0.0, 1.0),
    )
    speed = rng.uniform(30.0, 150.0, N_SHOTS)
    elevation = np.radians(rng.uniform(-2.0, 8.0, N_SHOTS))
    spin_ratio = rng.uniform(0.0, 0.4, N_SHOTS)
    spin = spin_ratio * speed / bb.radius_m
    launch = LaunchState.from_speed(speed, elevation, spin_radps=spin)
    return model, launch


def lean_rhs(model: FlightModel, axis: np.ndarray):
    """The equations of motion (design.md) for one shot in plain Python floats: constant C_D, C_L = k S,
    dω/dt = −ω/τ."""
    bb, air = model.bb, model.air
    q = 0.5 * air.density_kgm3 * bb.area_m2 / bb.mass_kg
    cd = float(model.drag.cd)
    k = float(model.lift.k)
    tau = float(model.decay.tau_s)
    r = bb.radius_m
    g = model.gravity_mps2
    wx, wy, wz = model.wind_mps
    nx, ny, nz = (float(a) for a in axis)

    def rhs(t, y):
        vx, vy, vz, om = y[3], y[4], y[5], y[6]
        ux, uy, uz = vx - wx, vy - wy, vz - wz
        u = math.sqrt(ux * ux + uy * uy + uz * uz)
        cl = k * r * om / u
        a = q * u
        return [
            vx,
            vy,
            vz,
            a * (-cd * ux + cl * (ny * uz - nz * uy)),
            a * (-cd * uy + cl * (nz * ux - nx * uz)) - g,
            a * (-cd * uz + cl * (nx * uy - ny * ux)),
            -om / tau,
        ]

    return rhs


def y0_of(launch: LaunchState, i: int) -> list[float]:
    return [*launch.position_m[i], *launch.velocity_mps[i], float(launch.spin_radps[i])]


def max_position_error(t: np.ndarray, pos: np.ndarray, reference) -> float:
    return float(np.max(np.linalg.norm(pos - reference.sol(t)[:3].T, axis=1)))


def main() -> None:
    rng = np.random.default_rng(20261201)
    model, launch = make_shots(rng)

    # Vectorised integrator: all shots at once. CPU time (process_time, user + system) is the figure used
    # for the ratio, because the machine may be shared; wall time is printed beside it. The first run
    # includes the first touch of the output memory (page faults), later runs reuse it.
    cpu_times, wall_times = [], []
    for _ in range(3):
        c0, w0 = time.process_time(), time.perf_counter()
        traj = fly(model, launch, DURATION_S)
        cpu_times.append(time.process_time() - c0)
        wall_times.append(time.perf_counter() - w0)
        if len(cpu_times) < 3:
            del traj
    t_ours = min(cpu_times)

    # Accuracy of both against a tight DOP853 reference on a few shots (dense output).
    check = rng.choice(N_SHOTS, N_ACCURACY_SHOTS, replace=False)
    t_check = np.linspace(0.0, DURATION_S, 2001)
    refs = {}
    err_ours = 0.0
    for i in check:
        rhs = lean_rhs(model, launch.spin_axis[i])
        refs[i] = solve_ivp(
            rhs,
            (0.0, DURATION_S),
            y0_of(launch, i),
            method="DOP853",
            rtol=1e-12,
            atol=1e-12,
            dense_output=True,
        )
        one = Trajectory(traj.t_s, traj.state[i : i + 1], traj.rate[i : i + 1])  # sample this shot only
        ours = one.sample(t_check)[0, :, :3]
        err_ours = max(err_ours, max_position_error(t_check, ours, refs[i]))

    settings = []
    for method in ("RK45", "DOP853"):
        for tol in TOLERANCE_LADDER:
            err = 0.0
            for i in check:
                rhs = lean_rhs(model, launch.spin_axis[i])
                sol = solve_ivp(
                    rhs,
                    (0.0, DURATION_S),
                    y0_of(launch, i),
                    method=method,
                    rtol=tol,
                    atol=tol * 1e-3,
                    dense_output=True,
                )
                err = max(err, max_position_error(t_check, sol.sol(t_check)[:3].T, refs[i]))
            settings.append((method, tol, err))

    def time_loop(method: str, tol: float) -> float:
        """CPU seconds for N_SHOTS calls, extrapolated from the best of 3 batches of N_TIMED_CALLS // 3."""
        per_call = []
        for _ in range(3):
            idx = rng.choice(N_SHOTS, N_TIMED_CALLS // 3, replace=False)
            c0 = time.process_time()
            for i in idx:
                rhs = lean_rhs(model, launch.spin_axis[i])
                solve_ivp(rhs, (0.0, DURATION_S), y0_of(launch, i), method=method, rtol=tol, atol=tol * 1e-3,
                          dense_output=True)  # fmt: skip
            per_call.append((time.process_time() - c0) / idx.size)
        return min(per_call) * N_SHOTS

    def best(limit: float):
        ok = [(m, tol, e) for m, tol, e in settings if e <= limit]
        if not ok:
            return None
        # loosest tolerance per method that meets the limit, then the faster of the two methods
        cands = {}
        for m, tol, e in ok:
            if m not in cands or tol > cands[m][0]:
                cands[m] = (tol, e)
        timed = [(time_loop(m, tol), m, tol, e) for m, (tol, e) in cands.items()]
        return min(timed)

    print(
        f"vectorised RK4 (fitting.flight.fly): {N_SHOTS} shots x {DURATION_S:g} s, step {DEFAULT_STEP_S * 1e3:g} ms"
    )
    print(f"  CPU time: {t_ours:.3f} s, best of 3 (runs: {', '.join(f'{t:.3f}' for t in cpu_times)} s CPU; wall "
          f"{', '.join(f'{t:.3f}' for t in wall_times)} s)")  # fmt: skip
    print(f"  max position error vs DOP853 rtol=atol=1e-12 on {N_ACCURACY_SHOTS} shots: {err_ours:.3g} m")
    print("solve_ivp error by setting (atol = rtol*1e-3):")
    for m, tol, e in settings:
        print(f"  {m:6s} rtol={tol:.0e}: max position error {e:.3g} m")
    for label, limit in (("equal accuracy", err_ours), ("the 1 mm requirement", REQUIREMENT_M)):
        res = best(limit)
        if res is None:
            print(f"solve_ivp at {label} ({limit:.3g} m): no setting in the ladder is accurate enough")
            continue
        t_loop, m, tol, e = res
        print(
            f"solve_ivp loop at {label} ({m}, rtol={tol:.0e}, error {e:.3g} m): "
            f"{t_loop:.1f} s CPU for {N_SHOTS} calls, extrapolated from {N_TIMED_CALLS} timed calls "
            "(best of 3 batches)"
        )
        print(f"  speed ratio (solve_ivp loop / vectorised): {t_loop / t_ours:.0f}x (target >= 50x)")


if __name__ == "__main__":
    main()
