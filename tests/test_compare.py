"""``rollrig compare``: common random numbers, paired differences, ranking, files and refusals."""

from __future__ import annotations

import csv
import dataclasses
import io
import json

import numpy as np
import pytest
from rollrig.sim.analysis.compare import Candidate, compare, parse_rank_by, rank
from rollrig.sim.cli.main import main
from rollrig.sim.errors import UserInputError
from rollrig.sim.scenario import load_scenario

SCENARIO = """
[aircraft]
model = "small-uav"
[sensor]
frame_rate_hz = 10.0
latency_s = 0.1
noise_deg = 0.5
dropout_prob = 0.1
{gyro}
[controller]
kind = "pid"
kp = 0.25
ki_per_s = 0.05
[command]
profile = "step"
to_deg = 15.0
[disturbance.turbulence]
intensity = "light"
altitude_ft = 500.0
[run]
duration_s = 5.0
runs = 6
seed = 4
[criteria]
max_settling_s = 3.0
"""
GYRO = "[sensor.gyro]\nrate_hz = 100.0\nnoise_deg_s = 0.2"
FILES = {
    "lqg": '[controller]\nkind = "lqg"\nlabel = "LQG"\n',
    "cascade": '[controller]\nkind = "cascade"\nlabel = "cascade"\nmax_rate_deg_s = 30.0\n',
    "smith": '[controller]\nkind = "smith"\nlabel = "Smith"\nkp = 0.25\nki_per_s = 0.05\n',
}


@pytest.fixture
def setup(tmp_path):
    sc = tmp_path / "s.toml"
    sc.write_text(SCENARIO.format(gyro=GYRO))
    nogyro = tmp_path / "nogyro.toml"
    nogyro.write_text(SCENARIO.format(gyro=""))
    paths = {}
    for name, text in FILES.items():
        paths[name] = tmp_path / f"{name}.toml"
        paths[name].write_text(text)
    return tmp_path, sc, nogyro, paths


def _metrics(results):
    return {r.candidate: r.metrics for r in results[0].results}


def test_order_and_additions_change_no_number(setup):
    _, sc_path, _, p = setup
    sc = load_scenario(sc_path)
    own, lqg, cas, smith = (
        Candidate("PID"),
        Candidate("LQG", str(p["lqg"])),
        Candidate("cascade", str(p["cascade"])),
        Candidate("Smith", str(p["smith"])),
    )
    a = _metrics(compare([sc], [own, lqg, cas, smith], margins="none"))
    b = _metrics(compare([sc], [smith, own, lqg], margins="none"))  # reordered, one fewer
    c = _metrics(compare([sc], [cas, lqg], margins="none", workers=2))  # other processes
    for name in ("PID", "LQG", "Smith"):
        for key, v in b[name].items():
            np.testing.assert_array_equal(v, a[name][key], err_msg=f"{name} {key}")
    for name in ("LQG", "cascade"):
        for key, v in c[name].items():
            np.testing.assert_array_equal(v, a[name][key], err_msg=f"{name} {key}")
    # and the controllers do differ (the check above is not vacuous)
    assert not np.allclose(a["LQG"]["itae"], a["PID"]["itae"])


def test_paired_difference_is_the_per_run_difference(setup):
    _, sc_path, _, p = setup
    sc = load_scenario(sc_path)
    (res,) = compare([sc], [Candidate("PID"), Candidate("LQG", str(p["lqg"]))], margins="none")
    d = res.diffs["LQG"]["itae"]
    per_run = res.result("LQG").metrics["itae"] - res.result("PID").metrics["itae"]
    assert d.mean == pytest.approx(per_run.mean(), rel=1e-12)
    assert d.ci95_low < d.mean < d.ci95_high
    scores = rank(res, parse_rank_by("itae", res.headline))
    deg = 180.0 / np.pi  # ITAE is shown in deg s^2
    assert scores["LQG"] == pytest.approx(res.result("LQG").summaries["itae"].mean * deg)
    weighted = rank(res, parse_rank_by("itae=1,rms_error_rad=3", res.headline))
    assert weighted["PID"] == pytest.approx(4.0)  # the baseline scores the sum of the weights
    with pytest.raises(UserInputError, match="allowed"):
        parse_rank_by("nonsense=2", res.headline)


def test_cli_files_rank_and_plots(setup, capsys):
    tmp, sc_path, _, p = setup
    out = tmp / "out"
    argv = ["compare", str(sc_path), "-c", str(p["lqg"]), "-c", str(p["cascade"]), "--margins", "analytic"]
    assert main([*argv, "--rank-by", "itae", "--format", "json", "--out", str(out)]) == 0
    data = json.loads(capsys.readouterr().out)
    ranked = [r["controller"] for r in data[0]["rows"]]
    assert ranked[0] == "LQG" and data[0]["rows"][0]["rank"] == 1
    assert {"compare.csv", "compare.json", "compare.md", "manifest.json", "loops.png"} <= {
        f.name for f in out.iterdir()
    }
    assert any(f.name.endswith("-bank.png") for f in out.iterdir())
    rows = list(csv.DictReader(io.StringIO((out / "compare.csv").read_text())))
    assert {r["controller"] for r in rows} == {"pid (scenario)", "LQG", "cascade"}
    for r in rows:  # one value per cell
        float(r["value"])
    pid_gm = [r for r in rows if r["quantity"] == "analytic_gain_margin_db"]
    assert [r["controller"] for r in pid_gm] == ["pid (scenario)", "LQG", "cascade"]  # all three are linear
    manifest = json.loads((out / "manifest.json").read_text())
    assert manifest["controllers"]["LQG"]["file"] == str(p["lqg"])


@pytest.mark.parametrize(
    "case, match",
    [
        ("unknown_key", "k_bank"),
        ("needs_gyro", "needs a rate gyro"),
        ("one", "at least two controllers"),
        ("baseline", "--baseline"),
    ],
)
def test_bad_input_one_line_exit_2(setup, capsys, case, match):
    tmp, sc_path, nogyro, p = setup
    bad = tmp / "bad.toml"
    bad.write_text('[controller]\nkind = "cascade"\nk_bank = 2.0\n')
    argv = {
        "unknown_key": ["compare", str(sc_path), "-c", str(bad)],
        "needs_gyro": ["compare", str(nogyro), "-c", str(p["cascade"])],
        "one": ["compare", str(sc_path)],
        "baseline": [
            "compare",
            str(sc_path),
            "-c",
            str(p["lqg"]),
            "--baseline",
            "nobody",
            "--margins",
            "none",
        ],
    }[case]
    out = tmp / "never"
    assert main([*argv, "--out", str(out)]) == 2
    err = capsys.readouterr().err
    assert match in err and err.count("\n") == 1
    assert not out.exists()


def test_cascade_analytic_delay_margin_matches_the_experiment(setup):
    """Second method: the cascade's frequency-response delay margin (python-control on L(jω))
    against the margin found by simulation (extra delay at the aileron command until the
    noise-free loop stops settling). The analysis takes the 10 Hz frame hold as its mean delay
    (an approximation), so the two agree to 15 %: measured 0.64 s against 0.71 ± 0.015 s here,
    and 0.843 s against 0.845 s on the bundled uav-slow-coarse-camera with a gyro added."""
    from rollrig.sim.analysis.compare import _analytic
    from rollrig.sim.analysis.empirical import EmpiricalSettings, empirical_margins
    from rollrig.sim.controller_section import load_controller_file

    _, sc_path, _, p = setup
    sc = load_scenario(sc_path)
    spec = load_controller_file(p["cascade"], base_step_s=0.01, aileron_limit_rad=sc.actuator.limit_rad)
    scc = dataclasses.replace(sc, controller=spec)
    analytic, note, resp = _analytic(scc)
    assert note == "" and resp is not None
    emp = empirical_margins(scc, EmpiricalSettings(base_step_s=None, candidates=8, rounds=2, loss=False))
    assert emp.nominal_settles
    assert analytic.delay_margin_s == pytest.approx(emp.delay.value, rel=0.15)
