"""``rollrig tune``: bad input gives one line and exit status 2; nothing is written."""

from __future__ import annotations

import textwrap

import pytest
from rollrig.sim.cli.main import main

BASE = """
[aircraft]
model = "roll-only"
roll_damping_per_s = 2.0
aileron_power_per_s2 = 30.0

[actuator]
time_constant_s = 0.05
limit_deg = 20.0
rate_limit_deg_s = 200.0

[sensor]
frame_rate_hz = 25.0
latency_s = 0.05
noise_deg = 0.2

[controller]
kind = "pid"
rate_hz = 50.0
kp = 0.5
ki_per_s = 0.1
kd_s = 0.05

[command]
profile = "step"
to_deg = 10.0
at_s = 0.2

[run]
duration_s = 2.0
base_step_s = 0.01
seed = 3
"""


def _run(tmp_path, tune: str, *args: str, capsys) -> tuple[int, str, str]:
    f = tmp_path / "s.toml"
    f.write_text(BASE + textwrap.dedent(tune))
    out = tmp_path / "out"
    code = main(["tune", str(f), "--quiet", "--no-sensitivity", "--out", str(out), *args])
    cap = capsys.readouterr()
    assert not out.exists(), "nothing may be written on a user mistake"
    return code, cap.out, cap.err


@pytest.mark.parametrize(
    ("tune", "args", "needle"),
    [
        ("[tune.degrade]\nlatency_s = [0.1, 0.1]\n", (), "latency_s"),  # empty range
        ("[tune.degrade]\nnoise_deg = [1.0, 0.5]\n", (), "inverted"),  # inverted range
        ("[tune.bounds]\nkp = [2.0, 1.0]\n", (), "inverted"),  # inverted gain box
        ('[tune]\ngains = ["kp", "kq"]\n', (), "'kq'"),  # a gain the PID does not have
        ("[tune.degrade]\nwobble_deg = [0, 1]\n", (), "wobble_deg"),  # unknown axis
        ("[tune.degrade]\nloss_rate = { values = [] }\n", (), "values"),  # empty list
        ("", ("--generations", "0"), "budget of zero"),
        ("", ("--population", "0"), "budget of zero"),
        ("[tune]\ngenerations = 0\n", (), "generations"),
    ],
)
def test_bad_tune_input_is_one_line_exit_2(tmp_path, capsys, tune, args, needle):
    code, out, err = _run(tmp_path, tune, *args, capsys=capsys)
    assert code == 2
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("rollrig: error:"), err
    assert needle in lines[0]
    assert "allowed" in lines[0] or "known keys" in lines[0]


def test_constraints_no_candidate_can_meet_exit_2_with_closest(tmp_path, capsys):
    """A 89° phase margin is out of reach of any PID on this loop: the closest is named."""
    tune = """
    [tune]
    population = 5
    generations = 1
    seeds = 1
    lhs_cases = 0
    corners = "none"
    [tune.constraints]
    phase_margin_deg = 89.0
    """
    code, out, err = _run(tmp_path, tune, capsys=capsys)
    assert code == 2
    lines = err.strip().splitlines()
    assert len(lines) == 1, err
    assert "no candidate met the constraints" in lines[0]
    assert "closest: kp = " in lines[0] and "phase_margin by" in lines[0]
