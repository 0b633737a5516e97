"""Smith predictor (Smith 1957) around the PID: delay compensation, sensitivity to the delay estimate."""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose
from rollrig.sim.analysis.loop_from_scenario import camera_delay
from rollrig.sim.build import make_controller
from rollrig.sim.runner import run_scenario
from rollrig.sim.scenario import parse_scenario

# PID gains that suit the loop without its 200 ms camera latency (too aggressive with it)
PID = {"kp": 1.2, "ki_per_s": 0.2, "kd_s": 0.08}


def _run(ctrl: dict):
    doc = {
        "aircraft": {"model": "roll-only"},
        "sensor": {"frame_rate_hz": 50.0, "latency_s": 0.2},
        "controller": ctrl,
        "command": {"profile": "step", "to_deg": 10.0, "at_s": 0.5},
        "run": {"duration_s": 10.0, "runs": 1},
    }
    out = run_scenario(parse_scenario(doc))
    assert not out.trace.diverged.any()
    return {k: float(out.metrics[k][0]) for k in ("itae", "overshoot_pct", "settling_time_s")}


def test_default_delay_estimate_is_the_cameras_mean_delay():
    sc = parse_scenario(
        {
            "aircraft": {"model": "roll-only"},
            "sensor": {"latency_s": 0.2},
            "controller": dict(PID, kind="smith"),
        }
    )
    ctrl = make_controller(sc.controller, scenario=sc)
    ctrl.reset(3)
    # latency plus the mean frame hold of the default camera (> latency alone)
    assert camera_delay(sc).total_s > 0.2
    assert_allclose(ctrl.delay, camera_delay(sc).total_s, rtol=0, atol=0)


def test_right_delay_estimate_removes_the_delay_and_a_wrong_one_hurts():
    right = _run(dict(PID, kind="smith"))  # estimate = the camera's 200 ms
    plain = _run(PID)
    early = _run(dict(PID, kind="smith", delay_s=0.1))  # 100 ms short
    late = _run(dict(PID, kind="smith", delay_s=0.4))  # 200 ms long
    from_age = _run(dict(PID, kind="smith", delay_from_age=True))
    # plain PID with these gains: a growing-then-limited oscillation, never settles
    assert plain["settling_time_s"] == np.inf and plain["overshoot_pct"] > 100
    # with the right estimate: the undelayed loop's crisp step
    assert right["settling_time_s"] < 1.0 and right["overshoot_pct"] < 10
    # a wrong estimate brings back overshoot and slow settling (measured: 48 %, 3.1 s)
    assert early["overshoot_pct"] > 3 * right["overshoot_pct"] and early["settling_time_s"] > 2.0
    # too long an estimate is worse still (measured: never settles, ITAE x14)
    assert late["settling_time_s"] > 4.0 and late["itae"] > 5 * right["itae"]
    # the reading's own age is the exact delay here (fixed latency, frames on the tick grid)
    assert from_age == pytest.approx(right, rel=1e-9)
