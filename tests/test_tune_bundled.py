"""Tuning the bundled camera-shortlist scenario: better on held-back boards, margins kept.

Also: the fast margin screen the search uses agrees with the full margins
analysis (second method, same loop), and the command writes a tuned
scenario that loads back with the tuned gains.
"""

from __future__ import annotations

import dataclasses
import json
from pathlib import Path

import numpy as np
import pytest
from rollrig.sim.analysis.linear_loop import margins
from rollrig.sim.analysis.loop_from_scenario import camera_delay, loop_parts_from_scenario
from rollrig.sim.tuning.objective import margin_screen
from rollrig.sim.tuning.search import prepare, tune, validate, with_gains
from rollrig.sim.tuning.spec import load_tuning, with_overrides

BUNDLED = Path(__file__).resolve().parents[1] / "scenarios" / "tuning" / "uav-camera-shortlist.toml"


@pytest.fixture(scope="module")
def small_search():
    sc, spec, _ = load_tuning(BUNDLED)
    spec = with_overrides(spec, population=6, generations=2, seeds=2, lhs_cases=2)
    spec = dataclasses.replace(spec, held_back_cases=4, held_back_seeds=2)
    result = tune(prepare(sc, spec))
    return result, validate(result)


def test_tuned_beats_defaults_on_held_back_worst_case(small_search):
    result, val = small_search
    assert result.feasible
    held_worst = val.held.case_scores.max(axis=1)  # rows: start (bundled defaults), tuned
    assert held_worst[1] < held_worst[0]
    # ... and on the search set's worst case too
    assert val.search.case_scores[1].max() < val.search.case_scores[0].max()


def test_tuned_keeps_every_constraint(small_search):
    result, val = small_search
    p = result.problem
    cons = p.spec.constraints
    assert val.search.violation[1] == 0.0
    # the full analysis (not the screen) on the set's slowest camera
    m = margins(loop_parts_from_scenario(with_gains(p.margin_sc, p.names, result.best)))
    assert m.closed_loop_stable
    assert m.upper_gain_margin_db >= cons.gain_margin_db  # MIL-F-9490D §3.1.3.6: 6 dB
    assert m.lower_gain_margin_db <= -cons.gain_margin_db
    assert m.phase_margin_deg >= cons.phase_margin_deg  # MIL-F-9490D §3.1.3.6: 45°
    assert m.delay_margin_s >= cons.delay_margin_multiple * camera_delay(p.margin_sc).total_s
    assert val.search.grid.bank_ok[1].all()
    assert val.search.grid.passed[1].mean() >= cons.min_pass_rate


@pytest.mark.parametrize("gains", [(0.45, 0.15, 0.0), (0.3, 0.1, 0.05), (1.0, 0.3, 0.02), (0.6, 0.1, 0.08)])
def test_margin_screen_agrees_with_full_margins(gains):
    """Grid interpolation (250 points/decade) against root-refined margins: same loop,
    so agreement within 0.01 dB, 0.01° and 0.1 % of the delay margin."""
    sc, _, _ = load_tuning(BUNDLED)
    names = ("kp", "ki_per_s", "kd_s")
    screen = margin_screen(sc, names, np.array(gains))
    full = margins(loop_parts_from_scenario(with_gains(sc, names, np.array(gains))))
    assert screen.stable == full.closed_loop_stable
    if full.closed_loop_stable:
        assert screen.upper_gm_db == pytest.approx(full.upper_gain_margin_db, abs=0.01)
        assert screen.pm_deg == pytest.approx(full.phase_margin_deg, abs=0.01)
        assert screen.dm_s == pytest.approx(full.delay_margin_s, rel=1e-3)


def test_cli_writes_tuned_scenario(tmp_path, capsys):
    """End to end with a tiny budget: the folder holds a tuned scenario that loads
    back with the tuned gains, the report and both plots."""
    from rollrig.sim.cli.main import main
    from rollrig.sim.scenario import load_scenario

    short = tmp_path / "shortlist.toml"  # the bundled file, 6 s instead of 12 s: a quicker test
    short.write_text(BUNDLED.read_text().replace("duration_s = 12.0", "duration_s = 6.0"))
    out = tmp_path / "out"
    args = ["tune", str(short), "--quiet", "--format", "json", "--out", str(out)]
    code = main([*args, "--population", "6", "--generations", "2", "--seeds", "2", "--lhs-cases", "2"])
    assert code == 0
    capsys.readouterr()
    files = {p.name for p in out.iterdir()}
    assert {"tuned.toml", "report.md", "report.json", "history.json", "manifest.json"} <= files
    assert {"convergence.png", "worst_cases.png"} <= files
    info = json.loads((out / "manifest.json").read_text())
    tuned = load_scenario(out / "tuned.toml")
    for name, value in info["tuned_gains"].items():
        assert getattr(tuned.controller.pid, name) == pytest.approx(value, rel=1e-9)
    text = (out / "tuned.toml").read_text()
    assert "[tune" not in text
    assert "set on the bench" in text or "shortlist" in text  # the user's comments survive
