"""Candidates × cases × seeds as one batch: each run equals that case simulated alone.

This is what lets the tuner put a whole population with every degradation
case into one batch through per-run parameters: the core's rule is that run
*i* of a mixed batch equals run *i* alone with its own scalars, bit for bit.
"""

from __future__ import annotations

import numpy as np
from rollrig.sim.tuning.batch import PER_RUN_AXES, simulate_grid
from rollrig.sim.tuning.cases import CaseSet, search_cases
from rollrig.sim.tuning.spec import load_tuning

SCENARIO = """
[aircraft]
model = "small-uav"
airspeed_mps = 22.0

[sensor]
frame_rate_hz = 25.0
latency_s = 0.08
noise_deg = 0.3
quantization_deg = 0.5

[controller]
kind = "pid"
kp = 0.4
ki_per_s = 0.1
kd_s = 0.02

[command]
profile = "step"
to_deg = 15.0
at_s = 0.5

[disturbance.turbulence]
intensity = "light"
altitude_ft = 500.0

[run]
duration_s = 3.0
seed = 8

[tune]
seeds = 2
lhs_cases = 1
corners = "extremes"

[tune.degrade]
latency_s = [0.05, 0.2]
noise_deg = { values = [0.2, 0.9] }
loss_rate = [0.0, 0.2]
bias_deg = [-1.0, 1.0]
turbulence_scale = [0.5, 2.0]
"""


def test_mixed_batch_equals_each_case_alone(tmp_path):
    f = tmp_path / "b.toml"
    f.write_text(SCENARIO)
    sc, spec, _ = load_tuning(f)
    cases = search_cases(spec, sc)
    gains = np.array([[0.4, 0.1, 0.02], [0.25, 0.0, 0.05], [0.7, 0.2, 0.0]])
    grid = simulate_grid(sc, spec.gains, gains, cases)
    static = {a.name for a in spec.axes} - PER_RUN_AXES
    distinct = {tuple(cases.row(c)[n] for n in sorted(static)) for c in range(cases.n_cases)}
    assert grid.batches == len(distinct)  # one batch per distinct shared value, not per candidate
    for c in range(cases.n_cases):
        alone_case = CaseSet(cases.names, cases.values[c : c + 1], cases.kinds[c : c + 1], cases.seed_indices)
        for p in (2,):
            alone = simulate_grid(sc, spec.gains, gains[p : p + 1], alone_case)
            for key, values in grid.metrics.items():
                np.testing.assert_array_equal(
                    values[p, c], alone.metrics[key][0, 0], err_msg=f"{key} case {c}"
                )
            np.testing.assert_array_equal(grid.passed[p, c], alone.passed[0, 0])
