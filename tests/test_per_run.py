"""One per-run rule: every numeric parameter may be a scalar or one value per run.

For every per-run field, run i of a mixed batch equals run i simulated alone
with its own scalar value, bit for bit.
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
import pytest
from numpy.testing import assert_array_equal
from rollrig.controllers.pid import PIDConfig, PIDController
from rollrig.sensors.camera import CameraConfig
from rollrig.sim import params as P
from rollrig.sim.core import LoopSetup, simulate
from rollrig.sim.disturbance import SteadyRollMoment
from rollrig.sim.gusts import OneMinusCosineGust
from rollrig.sim.turbulence import DrydenTurbulence
from test_engine import everything_setup

D = math.radians
PID = PIDConfig(kp=0.6, ki_per_s=0.15, kd_s=0.08, stale_after_s=0.1, hold_s=0.1, fade_s=0.2)

# (object, field, three per-run values); zeros switch a stage off in one run only
CASES = [
    ("actuator", "time_constant_s", [0.08, 0.0, 0.05]),
    ("actuator", "limit_rad", [D(20), D(3), D(10)]),
    ("actuator", "rate_limit_rad_s", [D(60), D(10), math.inf]),
    ("camera", "latency_s", [0.05, 0.0, 0.13]),
    ("camera", "noise_rad", [D(0.3), 0.0, D(1.0)]),
    ("camera", "bias_rad", [0.0, D(1.0), D(-2.0)]),
    ("camera", "scale", [1.0, 1.05, 0.9]),
    ("camera", "quantization_rad", [D(0.25), 0.0, D(1.0)]),
    ("camera", "range_rad", [D(90), D(10), D(20)]),
    ("camera", "dropout_prob", [0.05, 0.0, 0.3]),
    ("camera", "jitter_s", [0.003, 0.0, 0.01]),
    ("camera", "exposure_s", [0.02, 0.0, 0.05]),
    ("camera", "latency_jitter_s", [0.01, 0.0, 0.04]),
    ("camera", "wander_rad", [D(0.3), 0.0, D(1.0)]),
    ("camera", "wander_time_s", [2.0, 0.5, 10.0]),
    ("camera", "outlier_prob", [0.02, 0.0, 0.2]),
    ("camera", "outlier_rad", [D(10), 0.0, D(3)]),
    ("bursts", "loss_rate", [0.1, 0.0, 0.3]),
    ("bursts", "mean_burst_frames", [3.0, 1.0, 8.0]),
    ("gyro", "noise_rad_s", [D(0.05), 0.0, D(0.2)]),
    ("gyro", "bias_rad_s", [D(0.1), 0.0, D(-0.3)]),
    ("gyro", "bias_drift_rad_s", [D(0.02), 0.0, D(0.1)]),
    ("gyro", "bias_drift_time_s", [100.0, 5.0, 20.0]),
    ("pid", "kp", [0.6, 0.2, 1.2]),
    ("pid", "ki_per_s", [0.15, 0.0, 0.5]),
    ("pid", "kd_s", [0.08, 0.0, 0.2]),
    ("pid", "derivative_filter_hz", [4.0, 1.0, 20.0]),
    ("pid", "output_limit_rad", [D(20), D(2), D(8)]),
    ("pid", "integrator_limit_rad", [D(10), D(0.1), D(3)]),
    ("pid", "stale_after_s", [0.1, 0.05, 0.3]),
    ("pid", "hold_s", [0.1, 0.0, 0.4]),
    ("pid", "fade_s", [0.2, 0.0, 1.0]),
    ("moment", "accel_rad_s2", [0.1, 0.0, -0.4]),
    ("moment", "step_accel_rad_s2", [0.2, 0.0, -0.5]),
    ("moment", "step_time_s", [1.0, 0.0, 0.37]),
    ("gust", "amplitude", [2.0, 0.0, -5.0]),
    ("gust", "onset_s", [0.5, 0.0, 1.13]),
    ("dryden", "sigma_v_mps", [1.5, 0.0, 4.0]),
    ("dryden", "sigma_w_mps", [1.5, 0.0, 4.0]),
]


def _with(setup: LoopSetup, pid: PIDConfig, obj: str, name: str, value):
    cam = setup.camera
    dist = list(setup.disturbances)
    if obj == "actuator":
        setup = replace(setup, actuator=replace(setup.actuator, **{name: value}))
    elif obj == "camera":
        setup = replace(setup, camera=P._replace(cam, {name: value}))
    elif obj == "bursts":
        setup = replace(setup, camera=P._replace(cam, {"bursts": P._replace(cam.bursts, {name: value})}))
    elif obj == "gyro":
        setup = replace(setup, gyro=replace(setup.gyro, **{name: value}))
    elif obj == "pid":
        pid = replace(pid, **{name: value})
    else:
        kind = {"moment": SteadyRollMoment, "gust": OneMinusCosineGust, "dryden": DrydenTurbulence}[obj]
        i = next(i for i, d in enumerate(dist) if isinstance(d, kind))
        if obj == "dryden":
            dist[i] = replace(dist[i], params=replace(dist[i].params, **{name: value}))
        else:
            dist[i] = replace(dist[i], **{name: value})
        setup = replace(setup, disturbances=tuple(dist))
    return setup, pid


def _run(setup, pid, runs):
    ctrl = PIDController(replace(pid, derivative_source="gyro"))
    return simulate(setup, ctrl, seed=21, run_indices=runs)


@pytest.mark.parametrize("obj, name, values", CASES, ids=[f"{o}.{n}" for o, n, _ in CASES])
def test_mixed_batch_equals_runs_alone(obj, name, values):
    base = everything_setup(150)
    setup, pid = _with(base, PID, obj, name, np.array(values))
    mixed = _run(setup, pid, [0, 1, 2])
    assert np.all(np.isfinite(mixed.bank))
    for i, v in enumerate(values):
        s1, p1 = _with(base, PID, obj, name, v)
        alone = _run(s1, p1, [i])
        assert_array_equal(alone.bank[0], mixed.bank[i], err_msg=f"{obj}.{name} run {i}")
        assert_array_equal(alone.bank_meas[0], mixed.bank_meas[i], err_msg=f"{obj}.{name} run {i}")
        assert_array_equal(alone.aileron[0], mixed.aileron[i], err_msg=f"{obj}.{name} run {i}")
    # the parameter matters: the runs differ from one another
    assert not np.array_equal(mixed.bank[0], mixed.bank[1]) or not np.array_equal(
        mixed.bank[1], mixed.bank[2]
    )


def test_per_run_command_and_initial_state():
    base = everything_setup(150)
    n, nx = base.n_steps, base.plant.n_states
    cmds = np.stack([np.full(n + 1, D(a)) for a in (0.0, 10.0, -20.0)])
    x0 = np.zeros((3, nx))
    x0[:, base.plant.phi_index] = [D(5), 0.0, D(-8)]
    mixed = simulate(replace(base, bank_cmd=cmds, x0=x0), PIDController(PID), seed=2, run_indices=[4, 5, 6])
    for i in range(3):
        alone = simulate(
            replace(base, bank_cmd=cmds[i], x0=x0[i]), PIDController(PID), seed=2, run_indices=[4 + i]
        )
        assert_array_equal(alone.bank[0], mixed.bank[i])
        assert_array_equal(alone.bank_cmd[0], mixed.bank_cmd[i])


def test_one_helper_one_message():
    with pytest.raises(
        ValueError, match=r"camera.CameraConfig.noise_rad: allowed: a number or one value per run"
    ):
        setup = replace(everything_setup(20), camera=CameraConfig(noise_rad=np.array([0.1, 0.2])))
        simulate(setup, PIDController(PID), seed=0, run_indices=range(3))
    with pytest.raises(ValueError, match="x0: allowed"):
        simulate(
            replace(everything_setup(20), x0=np.zeros((2, 4))),
            PIDController(PID),
            seed=0,
            run_indices=range(3),
        )
    assert_array_equal(P.per_run(2.0, 3, "k"), [2.0, 2.0, 2.0])
    with pytest.raises(
        ValueError, match="k: allowed: a number or one value per run, shape \\(3,\\); got shape"
    ):
        P.per_run([1.0, 2.0], 3, "k")
