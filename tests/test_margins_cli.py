"""``rollrig margins`` and ``rollrig run --margins`` end to end (in-process)."""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from numpy.testing import assert_allclose
from rollrig.sim.analysis.linear_loop import margins
from rollrig.sim.analysis.loop_from_scenario import loop_parts_from_scenario
from rollrig.sim.cli.main import main
from rollrig.sim.scenario import load_scenario

SCENARIO = """
[scenario]
title = "margins test loop"

[aircraft]
model = "small-uav"
airspeed_mps = 22.0

[actuator]
time_constant_s = 0.05
limit_deg = 25.0
rate_limit_deg_s = 200.0

[sensor]
frame_rate_hz = 10.0
latency_s = 0.12
noise_deg = 0.5
dropout_prob = 0.02

[controller]
kind = "pid"
rate_hz = 50.0
kp = 0.25
ki_per_s = 0.05
stale_after_s = 0.4

[command]
profile = "step"
to_deg = 10.0
at_s = 1.0

[run]
duration_s = 6.0
base_step_s = 0.01
"""


@pytest.fixture()
def scenario_file(tmp_path: Path) -> Path:
    p = tmp_path / "loop.toml"
    p.write_text(SCENARIO)
    return p


def test_margins_json_matches_the_analysis(scenario_file: Path, capsys) -> None:
    assert main(["margins", str(scenario_file), "--format", "json"]) == 0
    out = json.loads(capsys.readouterr().out)
    titles = [t["title"] for t in out]
    assert "stability margins" in titles[0] and "handling qualities" in titles[-1]
    rows = {r["figure"]: r for r in out[0]["rows"]}
    m = margins(loop_parts_from_scenario(load_scenario(scenario_file)))
    assert_allclose(rows["gain_margin_db"]["analytic"], m.upper_gain_margin_db, rtol=1e-12)
    assert_allclose(rows["delay_margin_s"]["analytic"], m.delay_margin_s, rtol=1e-12)
    # the empirical column is filled and agrees within the 10 % of the issue
    assert_allclose(rows["delay_margin_s"]["empirical"], m.delay_margin_s, rtol=0.10)
    assert 0.0 < rows["loss_margin"]["empirical"] < 1.0
    hq = {r["figure"]: r for r in out[-1]["rows"]}
    assert hq["roll_tau_s"]["level"] == 1 and hq["time_to_bank_s"]["value"] > 0


def test_margins_table_printed(scenario_file: Path, capsys) -> None:
    assert main(["margins", str(scenario_file), "--no-empirical", "--category", "c"]) == 0
    text = capsys.readouterr().out
    assert "gain margin" in text and "phase margin" in text and "Category C" in text
    assert "30°" in text and "60°" not in text  # MIL-F-8785C Table IXa times 30° in Cat C


def test_margins_plot_writes_png_and_manifest(scenario_file: Path, tmp_path: Path, capsys) -> None:
    out = tmp_path / "m"
    assert (
        main(
            ["margins", str(scenario_file), "--no-empirical", "--plot", "--out", str(out), "--format", "csv"]
        )
        == 0
    )
    png = (out / "margins.png").read_bytes()
    assert png[:8] == b"\x89PNG\r\n\x1a\n"
    man = json.loads((out / "manifest.json").read_text())
    assert man["command"] == "margins" and man["scenario_sha256"]
    assert "wrote" not in capsys.readouterr().out  # CSV on stdout, "wrote" on stderr


@pytest.mark.parametrize(
    "argv, fragment",
    [
        (["margins", "no-such-file.toml"], "no such scenario file"),
        (["margins", "{file}", "--class", "II", "--category", "C"], "II-C"),
    ],
)
def test_user_mistakes_exit_2_with_one_line(argv, fragment, scenario_file: Path, capsys) -> None:
    argv = [a.replace("{file}", str(scenario_file)) for a in argv]
    assert main(argv) == 2
    err = capsys.readouterr().err
    assert fragment in err and err.count("\n") == 1


def test_run_table_gains_margins(scenario_file: Path, capsys) -> None:
    assert main(["run", str(scenario_file), "--no-files", "--margins", "--format", "json"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert "stability margins" in out[-1]["title"]
    rows = {r["figure"]: r for r in out[-1]["rows"]}
    assert rows["gain_margin_db"]["analytic"] > 6.0 and rows["gain_margin_db"]["empirical"] > 6.0


def test_aileron_without_effect_says_the_loop_has_no_gain(tmp_path: Path, capsys) -> None:
    # issue 9 item 7: one line naming what the user can change, no internal parameter
    text = SCENARIO.replace('model = "small-uav"\nairspeed_mps = 22.0', "")
    text = text.replace("[aircraft]\n", "[aircraft]\n" + AILERONLESS)
    p = tmp_path / "noail.toml"
    p.write_text(text)
    assert main(["margins", str(p), "--no-empirical"]) == 2
    err = capsys.readouterr().err
    assert "no gain" in err and "l_da_per_s2" in err and err.count("\n") == 1
    assert "omega" not in err


AILERONLESS = """model = "derivatives"
airspeed_mps = 53.6
y_beta_mps2 = -13.9
l_beta_per_s2 = -16.0
l_p_per_s = -8.4
l_r_per_s = 2.19
n_beta_per_s2 = 4.49
n_p_per_s = -0.35
n_r_per_s = -0.76
l_da_per_s2 = 0.0
"""
