"""Cascade bank hold: limits, the stale-signal rule, per-run parameters, the gyro requirement."""

from __future__ import annotations

import math

import numpy as np
import pytest
from rollrig.controllers.base import Observation
from rollrig.controllers.cascade import CascadeConfig, CascadeController
from rollrig.sim.cli.main import main
from rollrig.sim.errors import ScenarioError
from rollrig.sim.runner import run_scenario
from rollrig.sim.scenario import parse_scenario


def _obs(t, bank, age, rate, cmd=0.0, dt=0.02):
    b = np.asarray(bank, float)
    return Observation(
        t=t,
        dt=dt,
        bank=b,
        valid=np.ones(b.shape, bool),
        age=np.broadcast_to(np.asarray(age, float), b.shape).copy(),
        bank_cmd=np.full(b.shape, cmd),
        rate=np.asarray(rate, float),
    )


def test_rate_command_respects_rate_and_acceleration_limits():
    cfg = CascadeConfig(k_bank_per_s=5.0, ki_bank_per_s2=0.0, k_rate_s=1.0)
    c = CascadeController(cfg)
    c.reset(1)
    cmds = []
    for k in range(200):
        c.step(_obs(0.02 * k, [0.0], 0.0, [0.0], cmd=math.radians(30)))
        cmds.append(c.p_cmd[0])
    cmds = np.array(cmds)
    assert np.max(np.abs(np.diff(cmds))) <= cfg.max_accel_rad_s2 * 0.02 * (1 + 1e-12)
    assert np.max(cmds) == pytest.approx(cfg.max_rate_rad_s, rel=1e-12)


def test_lost_camera_holds_then_fades_the_rate_command_while_the_gyro_loop_runs():
    cfg = CascadeConfig(ki_bank_per_s2=0.0, max_accel_rad_s2=100.0, stale_after_s=0.2, hold_s=0.5, fade_s=1.0)
    c = CascadeController(cfg)
    c.reset(1)
    dt = 0.02
    for k in range(10):  # fresh readings, 5° short of the command
        c.step(_obs(k * dt, [math.radians(10)], 0.0, [0.0], cmd=math.radians(15)))
    held = c.p_cmd[0]
    assert held > 0
    out = {}
    for age in (0.3, 0.69, 1.2, 1.71, 2.5):  # camera lost: age grows
        u = c.step(_obs(1.0 + age, [math.radians(10)], age, [0.0], cmd=math.radians(15)))
        out[age] = (c.p_cmd[0], u[0])
    assert out[0.3][0] == pytest.approx(held)  # held
    assert out[0.69][0] == pytest.approx(held)  # still held (lost 0.49 s < 0.5 s)
    assert out[1.2][0] == pytest.approx(held * (1 - 0.5 / 1.0), rel=1e-9)  # half-way through the fade
    assert out[2.5][0] == 0.0  # faded
    # the inner loop still acts on the gyro: a roll rate is opposed even with the camera gone
    u = c.step(_obs(4.0, [math.radians(10)], 3.0, [math.radians(5)]))
    assert u[0] == pytest.approx(-cfg.k_rate_s * math.radians(5), rel=1e-9)


def test_per_run_parameters_equal_runs_alone():
    gains = np.array([1.0, 3.0])
    both = CascadeController(CascadeConfig(k_bank_per_s=gains))
    both.reset(2)
    singles = [CascadeController(CascadeConfig(k_bank_per_s=float(g))) for g in gains]
    for s in singles:
        s.reset(1)
    rng = np.random.default_rng(0)
    for k in range(50):
        bank, rate = rng.normal(0, 0.2, 2), rng.normal(0, 0.1, 2)
        u = both.step(_obs(k * 0.02, bank, 0.0, rate, cmd=0.3))
        for i, s in enumerate(singles):
            assert u[i] == s.step(_obs(k * 0.02, bank[i : i + 1], 0.0, rate[i : i + 1], cmd=0.3))[0]


def test_cascade_without_gyro_is_refused_in_one_line(tmp_path, capsys):
    doc = {"aircraft": {"model": "roll-only"}, "controller": {"kind": "cascade"}}
    with pytest.raises(ScenarioError, match="needs a rate gyro"):
        run_scenario(parse_scenario(doc))
    path = tmp_path / "s.toml"
    path.write_text(
        '[aircraft]\nmodel = "roll-only"\n[controller]\nkind = "cascade"\n[run]\nduration_s = 1.0\n'
    )
    assert main(["run", str(path), "--out", str(tmp_path / "out")]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "needs a rate gyro" in err
    assert not (tmp_path / "out").exists()
