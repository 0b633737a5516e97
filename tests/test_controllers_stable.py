"""Cascade, LQG and Smith predictor hold a bank step on every preset with each bundled camera."""

from __future__ import annotations

import tomllib
from pathlib import Path

import numpy as np
import pytest
from rollrig.sim.presets import PRESETS
from rollrig.sim.runner import run_scenario
from rollrig.sim.scenario import parse_scenario

SCENARIOS = sorted((Path(__file__).parent.parent / "scenarios").glob("*.toml"))
CONTROLLERS = {
    "cascade": {"kind": "cascade", "max_rate_deg_s": 20.0, "max_accel_deg_s2": 40.0},
    "lqg": {"kind": "lqg"},
    "smith": {"kind": "smith", "kp": 0.3, "ki_per_s": 0.05, "kd_s": 0.03},
}


@pytest.mark.parametrize("kind", sorted(CONTROLLERS))
@pytest.mark.parametrize("preset", sorted(PRESETS))
def test_step_settles_with_every_bundled_camera(kind, preset):
    """A 15° step at 0.5 s, 8 s, two runs with each bundled scenario's camera (noise, losses,
    latency, quantisation as bundled) and a gyro: no divergence, peak below 25°, and over the
    last 2 s the mean |error| under 2.5° and the largest under 5° (bursts of lost frames make
    the hold-then-fade rule drift a little, so the bounds are loose but far below a growing
    oscillation's). (The Smith predictor on the light single converges
    slowly, about 1.7° left at 6–8 s: the model's bank ramps while the turn needs steady
    aileron, a known weakness of the original predictor on an integrating plant.)"""
    for path in SCENARIOS:
        sensor = tomllib.loads(path.read_text())["sensor"]
        sensor = dict(sensor, gyro={"rate_hz": 100.0, "noise_deg_s": 0.2})
        doc = {
            "aircraft": {"model": preset},
            "sensor": sensor,
            "controller": CONTROLLERS[kind],
            "command": {"profile": "step", "to_deg": 15.0, "at_s": 0.5},
            "run": {"duration_s": 8.0, "runs": 2, "seed": 3},
        }
        out = run_scenario(parse_scenario(doc, file=path.name))
        tr = out.trace
        assert not tr.diverged.any(), path.name
        err = np.degrees(np.abs(tr.bank - tr.bank_cmd))
        tail = tr.t > 6.0
        assert np.all(err[:, tail].max(axis=1) < 5.0), (path.name, err[:, tail].max(axis=1))
        assert np.all(err[:, tail].mean(axis=1) < 2.5), (path.name, err[:, tail].mean(axis=1))
        assert np.degrees(out.metrics["peak_bank_rad"]).max() < 25.0, path.name
