"""Throughput of the stepping core, and a python-control reference loop.

Prints simulated seconds per wall-clock second for 1,000 Monte Carlo runs of
60 s of the full loop (light-single lateral model, servo with limits, camera
reader, PID; 100 Hz base step, 30 Hz camera, 50 Hz controller), and the
per-run speed ratio against the same loop built from python-control
systems and integrated with ``control.input_output_response`` (camera latency
as a Padé approximant, frame hold and noise left out, which flatters the
reference).

Usage: ``python bench/core_throughput.py [--runs N] [--variant NAME ...]``
"""

from __future__ import annotations

import argparse
import math
import time

import numpy as np
from rollrig.controllers.pid import PIDConfig, PIDController
from rollrig.sensors.camera import CameraConfig
from rollrig.sim import presets
from rollrig.sim.actuator import ActuatorSpec
from rollrig.sim.core import LoopSetup, simulate

DT, DURATION, CAMERA_HZ, CTRL_EVERY = 0.01, 60.0, 30.0, 2
PID = PIDConfig(kp=0.6, ki_per_s=0.15, kd_s=0.08, derivative_filter_hz=4.0)
ACT = ActuatorSpec(0.08, math.radians(20), math.radians(60))
CAMERA = CameraConfig(
    frame_rate_hz=CAMERA_HZ,
    latency_s=0.05,
    noise_rad=math.radians(0.3),
    quantization_rad=math.radians(0.5),
    dropout_prob=0.02,
)


def base_setup(camera: CameraConfig = CAMERA, disturbances=()) -> LoopSetup:
    n = int(round(DURATION / DT))
    t = np.arange(n + 1) * DT
    return LoopSetup(
        plant=presets.light_single(),
        dt=DT,
        n_steps=n,
        ctrl_every=CTRL_EVERY,
        actuator=ACT,
        camera=camera,
        bank_cmd=np.where(t >= 1.0, math.radians(20), 0.0),
        x0=np.zeros(4),
        disturbances=disturbances,
    )


def variants() -> dict[str, LoopSetup]:
    """Named loop set-ups to time against the baseline."""
    from rollrig.sim.turbulence import INTENSITY_W20_MPS, DrydenTurbulence, dryden_params

    plant = presets.light_single()
    dryden = dryden_params(800 * 0.3048, INTENSITY_W20_MPS["moderate"], plant.airspeed_mps, plant.span_m)
    return {
        "baseline": base_setup(),
        "moderate turbulence": base_setup(disturbances=(DrydenTurbulence(dryden),)),
    }


def time_batch(setup: LoopSetup, runs: int, repeats: int = 3) -> float:
    """Best-of-``repeats`` wall time (s) for a batch of ``runs``."""
    best = math.inf
    for _ in range(repeats):
        t0 = time.perf_counter()
        simulate(setup, PIDController(PID), seed=1, run_indices=range(runs))
        best = min(best, time.perf_counter() - t0)
    return best


def time_python_control() -> float:
    """Wall time (s) of one 60 s run of the loop built from python-control systems."""
    import control as ct

    plant = presets.light_single()
    c = np.zeros((1, 4))
    c[0, plant.phi_index] = 1.0
    p = ct.ss(plant.a, plant.b_control[:, :1], c, 0, inputs="ail", outputs="phi", name="plant")
    num, den = ct.pade(CAMERA.latency_s, 3)
    cam = ct.tf2ss(ct.tf(num, den), inputs="phi", outputs="phi_m", name="camera")
    wf = 2 * math.pi * PID.derivative_filter_hz
    pid = ct.tf2ss(
        ct.tf([PID.kd_s * wf + PID.kp, PID.kp * wf + PID.ki_per_s, PID.ki_per_s * wf], [1, wf, 0]),
        inputs="e",
        outputs="u",
        name="pid",
    )
    tau, lim = ACT.time_constant_s, ACT.limit_rad

    def servo_rhs(t, x, u, params):
        return np.array([(np.clip(u[0], -lim, lim) - x[0]) / tau])

    servo = ct.nlsys(servo_rhs, lambda t, x, u, params: x, inputs="u", outputs="ail", states=1, name="servo")
    err = ct.summing_junction(inputs=["cmd", "-phi_m"], output="e", name="err")
    loop = ct.interconnect([p, cam, pid, servo, err], inputs="cmd", outputs="phi")
    t = np.arange(0, DURATION + DT / 2, DT)
    cmd = np.where(t >= 1.0, math.radians(20), 0.0)
    t0 = time.perf_counter()
    ct.input_output_response(loop, t, cmd)
    return time.perf_counter() - t0


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--runs", type=int, default=1000)
    ap.add_argument("--skip-reference", action="store_true", help="do not time python-control")
    args = ap.parse_args()
    sim_seconds = args.runs * DURATION
    print(
        f"stepping core: {args.runs} runs x {DURATION:g} s, base {1 / DT:g} Hz, camera {CAMERA_HZ:g} Hz, "
        f"controller {1 / (DT * CTRL_EVERY):g} Hz"
    )
    results = {}
    for name, setup in variants().items():
        wall = time_batch(setup, args.runs)
        results[name] = wall
        rel = "" if name == "baseline" else f"  ({wall / results['baseline']:.2f}x baseline time)"
        print(f"  {name:<22s} {wall:7.3f} s wall   {sim_seconds / wall:10.0f} simulated s per wall s{rel}")
    print(f"  target: {args.runs} runs in under 2 s -> {'met' if results['baseline'] < 2 else 'NOT met'}")
    if not args.skip_reference:
        ref = time_python_control()
        ours = results["baseline"] / args.runs
        print(f"python-control input_output_response, one run: {ref:.3f} s")
        print(f"  per-run ratio (python-control / rollrig batch): {ref / ours:.0f}x (target >= 100x)")


if __name__ == "__main__":
    main()
