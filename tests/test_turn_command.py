"""Coordinated-turn command: the bank follows from tan φ = V·ω/g at the scenario's airspeed."""

from __future__ import annotations

import math

import pytest
from rollrig.sim.errors import ScenarioError
from rollrig.sim.scenario import parse_scenario, turn_bank_rad

KT = 1852.0 / 3600.0  # m/s per knot (exact)


def test_worked_example_rate_of_turn_formula():
    """Pilot-training form of the identity: rate of turn (°/s) = 1,091 · tan φ / V (kt), as in the
    FAA Pilot's Handbook of Aeronautical Knowledge (FAA-H-8083-25), "Rate of turn" (recalled from
    memory; the constant is g·180/π per knot, 1092 with standard gravity, so tolerance 0.3 %).
    Worked example: a standard-rate turn (3°/s) at 150 kt needs tan φ = 3·150/1091, φ ≈ 22.4°."""
    bank = turn_bank_rad(math.radians(3.0), 150 * KT)
    assert math.tan(bank) == pytest.approx(3.0 * 150 / 1091, rel=3e-3)
    assert math.degrees(bank) == pytest.approx(22.4, abs=0.1)
    # the identity itself (textbook): tan φ = V ω / g with standard gravity 9.80665 m/s²
    assert math.tan(turn_bank_rad(0.1, 30.0)) == pytest.approx(30.0 * 0.1 / 9.80665, rel=1e-12)


def _doc(command: dict, airspeed: float = 22.0) -> dict:
    return {
        "aircraft": {"model": "small-uav", "airspeed_mps": airspeed},
        "controller": {"kp": 0.3},
        "command": command,
        "run": {"duration_s": 5.0},
    }


def test_standard_rate_and_explicit_rate_give_the_same_bank():
    a = parse_scenario(_doc({"profile": "turn", "standard_rate": True, "at_s": 1.0}))
    b = parse_scenario(_doc({"profile": "turn", "turn_rate_deg_s": 3.0, "at_s": 1.0}))
    left = parse_scenario(_doc({"profile": "turn", "standard_rate": True, "direction": "left"}))
    assert a.command == b.command
    expected = math.atan(22.0 * math.radians(3.0) / 9.80665)  # ≈ 6.7° at 22 m/s
    assert a.command.banks_rad == (0.0, pytest.approx(expected, rel=1e-12))
    assert left.command.banks_rad[1] == pytest.approx(-expected, rel=1e-12)
    assert a.command.times_s == (0.0, 1.0)


def test_turn_needing_too_much_bank_is_refused():
    with pytest.raises(ScenarioError, match=r"turn_rate_deg_s.*60°") as exc:
        parse_scenario(_doc({"profile": "turn", "turn_rate_deg_s": 30.0}, airspeed=40.0))
    assert "\n" not in str(exc.value)
    with pytest.raises(ScenarioError, match="one of them"):
        parse_scenario(_doc({"profile": "turn", "turn_rate_deg_s": 3.0, "standard_rate": True}))
