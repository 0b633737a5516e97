"""Throughput of the stepping core with the camera reader's stages off and all on.

Prints the best of several repeats of 1 run and 1000 runs of 60 s (base step
10 ms, controller 50 Hz), baseline camera vs every stage switched on.
Run: ``PYTHONPATH=. python bench/camera_stages.py``.
"""

from __future__ import annotations

import math
import sys
import time
from pathlib import Path

import numpy as np
from rollrig.controllers.pid import PIDConfig, PIDController
from rollrig.sensors.camera import CameraConfig
from rollrig.sensors.gyro import GyroConfig
from rollrig.sim import presets
from rollrig.sim.actuator import ActuatorSpec
from rollrig.sim.core import LoopSetup, simulate

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))
from helpers import ALL_STAGES_CAMERA, DRIFTING_GYRO  # noqa: E402

D = math.radians
BASE = CameraConfig(
    frame_rate_hz=30, latency_s=0.05, noise_rad=D(0.3), quantization_rad=D(0.5), dropout_prob=0.02
)
# The all-stages camera and drifting gyro are the ones the replay tests use.
ALL = ALL_STAGES_CAMERA
GYRO = DRIFTING_GYRO


def setup(camera: CameraConfig, gyro: GyroConfig | None) -> LoopSetup:
    dt, n = 0.01, 6000
    t = np.arange(n + 1) * dt
    return LoopSetup(
        plant=presets.light_single(),
        dt=dt,
        n_steps=n,
        ctrl_every=2,
        actuator=ActuatorSpec(),
        camera=camera,
        gyro=gyro,
        bank_cmd=np.where(t >= 1, D(20), 0.0),
        x0=np.zeros(4),
    )


def best_time(s: LoopSetup, runs: int, repeats: int) -> float:
    ctrl = PIDController(PIDConfig(kp=0.6, ki_per_s=0.1, kd_s=0.08))
    best = math.inf
    for _ in range(repeats):
        t0 = time.perf_counter()
        simulate(s, ctrl, seed=1, run_indices=range(runs))
        best = min(best, time.perf_counter() - t0)
    return best


def main() -> None:
    cases = {
        "baseline camera": setup(BASE, None),
        "all camera stages": setup(ALL, None),
        "all stages + gyro": setup(ALL, GYRO),
    }
    res = {name: {} for name in cases}
    for runs, reps in ((1, 5), (1000, 5)):
        for _ in range(reps):  # interleave, so machine load hits both alike
            for name, s in cases.items():
                res[name][runs] = min(res[name].get(runs, math.inf), best_time(s, runs, 1))
    for runs in (1, 1000):
        b = res["baseline camera"][runs]
        parts = [
            f"{name} {res[name][runs]:.3f} s ({100 * (res[name][runs] / b - 1):+.0f} %)"
            for name in cases
            if name != "baseline camera"
        ]
        print(f"{runs:5d} runs x 60 s: baseline {b:.3f} s; " + "; ".join(parts))


if __name__ == "__main__":
    main()
