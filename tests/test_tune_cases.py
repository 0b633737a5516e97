"""Degradation cases, score aggregation and constraint violations (no simulation)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from rollrig.sim.tuning.batch import GridResult
from rollrig.sim.tuning.cases import (
    HELD_BACK_SEED_OFFSET,
    held_back_cases,
    scenario_for_case,
    search_cases,
)
from rollrig.sim.tuning.objective import CAP, Margins, Scoring, aggregate, run_scores, violations
from rollrig.sim.tuning.spec import Constraints, load_tuning

SCENARIO = """
[aircraft]
model = "roll-only"

[sensor]
frame_rate_hz = 25.0
latency_s = 0.1
noise_deg = 0.5

[sensor.bursts]
loss_rate = 0.1
mean_burst_frames = 3.0

[controller]
kind = "pid"
kp = 0.5

[command]
profile = "step"
to_deg = 10.0

[tune]
lhs_cases = 7
seeds = 4
held_back_cases = 5
held_back_seeds = 2

[tune.degrade]
latency_s = [0.05, 0.3]
noise_deg = { values = [0.2, 0.6, 1.0] }
loss_rate = [0.0, 0.2]
"""


@pytest.fixture()
def loaded(tmp_path):
    f = tmp_path / "c.toml"
    f.write_text(SCENARIO)
    sc, spec, _ = load_tuning(f)
    return sc, spec


def test_search_set_is_nominal_corners_and_hypercube(loaded):
    sc, spec = loaded
    cs = search_cases(spec, sc)
    assert cs.kinds.count("nominal") == 1 and cs.kinds.count("corner") == 8 and cs.kinds.count("lhs") == 7
    np.testing.assert_allclose(cs.values[0], [0.1, 0.5, 0.1])  # the scenario's own camera
    corners = cs.values[1:9]
    assert {tuple(r) for r in corners} == {
        (a, b, c) for a in (0.05, 0.3) for b in (0.2, 1.0) for c in (0.0, 0.2)
    }
    lhs = cs.values[9:]
    assert np.all((lhs[:, 0] >= 0.05) & (lhs[:, 0] <= 0.3))
    assert set(lhs[:, 1]) <= {0.2, 0.6, 1.0}  # a listed axis takes listed values
    # Latin hypercube: one point in each of the 7 strata of a continuous axis
    strata = np.floor((lhs[:, 0] - 0.05) / 0.25 * 7).astype(int)
    assert sorted(strata) == list(range(7))
    np.testing.assert_array_equal(cs.seed_indices, np.arange(4))


def test_held_back_set_is_off_grid_with_other_seeds(loaded):
    sc, spec = loaded
    cs, hb = search_cases(spec, sc), held_back_cases(spec, sc)
    assert hb.n_cases == 5
    assert np.all(hb.seed_indices >= HELD_BACK_SEED_OFFSET)
    assert not set(hb.seed_indices) & set(cs.seed_indices)
    assert not {tuple(r) for r in hb.values} & {tuple(r) for r in cs.values}
    assert not set(hb.values[:, 1]) & {0.2, 0.6, 1.0}  # between the listed noise values
    assert np.all((hb.values[:, 1] >= 0.2) & (hb.values[:, 1] <= 1.0))


def test_case_reaches_the_camera_per_run(loaded):
    sc, _ = loaded
    lat = np.array([0.05, 0.2, 0.3])
    out = scenario_for_case(sc, {"latency_s": lat, "noise_deg": 0.6, "loss_rate": np.array([0.0, 0.1, 0.2])})
    np.testing.assert_array_equal(out.camera.latency_s, lat)
    assert out.camera.noise_rad == pytest.approx(math.radians(0.6))
    np.testing.assert_array_equal(out.camera.bursts.loss_rate, [0.0, 0.1, 0.2])  # bursty scenario
    assert out.camera.bursts.mean_burst_frames == 3.0
    assert sc.camera.latency_s == 0.1  # the scenario itself is unchanged


def test_aggregates():
    cases = np.array([[1.0, 2.0, 3.0, 10.0], [2.0, 2.0, 2.0, 2.0]])
    np.testing.assert_allclose(aggregate(cases, "mean"), [4.0, 2.0])
    np.testing.assert_allclose(aggregate(cases, "worst"), [10.0, 2.0])
    np.testing.assert_allclose(aggregate(cases, "cvar", 0.5), [6.5, 2.0])  # mean of the worst half
    np.testing.assert_allclose(aggregate(cases, "cvar", 0.1), [10.0, 2.0])  # at least one case


def test_score_normalises_and_caps():
    scoring = Scoring(weights={"itae": 1.0, "overshoot": 1.0}, refs={"itae": 2.0, "overshoot": 10.0})
    m = {"itae": np.array([2.0, 4.0, np.inf]), "overshoot_pct": np.array([10.0, 0.0, 5.0])}
    np.testing.assert_allclose(run_scores(scoring, m), [1.0, 1.0, (CAP + 0.5) / 2])


def _grid(bank_ok, passed):
    shape = (len(bank_ok), 1, 1)
    return GridResult({}, np.reshape(passed, shape), np.reshape(bank_ok, shape), 0.0, 1)


def test_violations_rank_by_how_far_they_miss():
    cons = Constraints(
        gain_margin_db=6.0, phase_margin_deg=45.0, delay_margin_multiple=1.0, min_pass_rate=0.5
    )
    ok = Margins(10.0, -math.inf, 60.0, 1.0, True)
    near = Margins(5.0, -math.inf, 44.0, 1.0, True)
    far = Margins(1.0, -math.inf, 10.0, 0.05, True)
    unstable = Margins(1.0, -math.inf, 10.0, 0.0, False)
    total, parts = violations(cons, [ok, near, far, unstable], 0.1, _grid([True] * 4, [True] * 4))
    assert total[0] == 0.0
    assert 0 < total[1] < total[2] < total[3]
    assert parts["gain_margin"][1] == pytest.approx(1 / 6)
    assert parts["phase_margin"][1] == pytest.approx(1 / 45)
    assert parts["delay_margin"][2] == pytest.approx(0.5)
    total, parts = violations(cons, [ok, ok], 0.1, _grid([True, False], [False, False]))
    assert parts["bank_limit"].tolist() == [0.0, 1.0]
    assert parts["pass_rate"].tolist() == [0.5, 0.5]
