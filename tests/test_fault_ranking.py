"""Ranking the camera's faults by what each costs the loop (common random numbers)."""

from __future__ import annotations

import json

import numpy as np
import pytest
from rollrig.sim.analysis.fault_ranking import active_faults, rank_faults
from rollrig.sim.cli.main import main
from rollrig.sim.runner import run_scenario
from rollrig.sim.scenario import parse_scenario


def _doc(sensor: dict, *, gyro: dict | None = None, runs: int = 8) -> dict:
    doc = {
        "aircraft": {"model": "light-single"},
        "sensor": dict(sensor),
        "controller": {"kp": 0.9, "ki_per_s": 0.1, "kd_s": 0.06},
        "command": {"profile": "hold", "bank_deg": 0.0},
        "initial": {"bank_deg": 8.0},
        "disturbance": {"turbulence": {"intensity": "light", "altitude_ft": 500.0}},
        "run": {"duration_s": 8.0, "seed": 5, "runs": runs},
    }
    if gyro is not None:
        doc["sensor"]["gyro"] = gyro
    return doc


def test_active_faults_are_exactly_the_configured_ones():
    sc = parse_scenario(
        _doc(
            {
                "frame_rate_hz": 25.0,
                "latency_s": 0.05,
                "noise_deg": 0.3,
                "bursts": {"loss_rate": 0.1, "mean_burst_frames": 4.0},
            },
            gyro={"noise_deg_s": 0.2},
        )
    )
    names = [f.name for f in active_faults(sc)]
    assert names == ["processing latency", "frame rate", "white noise", "lost frames", "gyro errors"]
    ideal = sc
    for f in active_faults(sc):
        ideal = f.remove(ideal)
    assert active_faults(ideal) == []


def test_removing_the_only_fault_gives_the_ideal_camera_bit_for_bit():
    """Streams are per stage, so the other components' draws (turbulence here) are untouched."""
    sc = parse_scenario(_doc({"frame_rate_hz": 100.0, "noise_deg": 0.5}))
    (noise,) = active_faults(sc)
    clean = run_scenario(noise.remove(sc)).trace
    ideal = run_scenario(parse_scenario(_doc({"frame_rate_hz": 100.0}))).trace
    np.testing.assert_array_equal(clean.bank, ideal.bank)
    noisy = run_scenario(sc).trace
    assert not np.array_equal(noisy.bank, ideal.bank)


def test_large_latency_outranks_tiny_noise():
    sc = parse_scenario(_doc({"frame_rate_hz": 100.0, "latency_s": 0.2, "noise_deg": 0.01}))
    r = rank_faults(sc, "rms_error_rad")
    assert [e.fault.name for e in r.effects] == ["processing latency", "white noise"]
    lat = r.effects[0]
    assert lat.cost.ci95_low > 0  # a significant cost, paired over the same runs
    assert lat.cost.mean > 10 * abs(r.effects[1].cost.mean)
    # cost is the per-run difference: its mean is the difference of the means
    assert lat.cost.mean == pytest.approx(r.every.mean - lat.without.mean, rel=1e-9)


def test_cli_table_json_and_refusals(tmp_path, capsys):
    path = tmp_path / "s.toml"
    path.write_text("""
[aircraft]
model = "roll-only"
[sensor]
frame_rate_hz = 20.0
latency_s = 0.08
quantization_deg = 1.0
[controller]
kp = 0.3
[command]
profile = "step"
to_deg = 10.0
[run]
duration_s = 6.0
runs = 4
""")
    assert main(["rank-faults", str(path), "--format", "json"]) == 0
    data = json.loads(capsys.readouterr().out)
    assert "ITAE" in data[0]["title"]  # a step command ranks by ITAE by default
    assert {r["fault"] for r in data[0]["rows"]} == {"processing latency", "frame rate", "quantisation"}

    assert main(["rank-faults", str(path), "--metric", "nonsense"]) == 2
    assert "allowed:" in capsys.readouterr().err
    ideal = tmp_path / "ideal.toml"
    ideal.write_text(
        path.read_text()
        .replace("latency_s = 0.08\nquantization_deg = 1.0\n", "")
        .replace("frame_rate_hz = 20.0", "frame_rate_hz = 100.0")
    )
    assert main(["rank-faults", str(ideal)]) == 2
    assert "no faults" in capsys.readouterr().err
