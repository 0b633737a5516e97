"""``rollrig sweep``: axes, designs, shared batches, resumable folder, bad input."""

from __future__ import annotations

import csv
import json

import numpy as np
import pytest
from helpers import MINIMAL_SCENARIO
from rollrig.sim.cli.main import main
from rollrig.sim.errors import UserInputError
from rollrig.sim.sweep import parse_set, plan_sweep, run_chunk, run_sweep
from rollrig.sim.sweep.axes import design_points
from rollrig.sim.sweep.plan import load_doc
from rollrig.sim.sweep.store import POINTS, SweepStore

SCENARIO = MINIMAL_SCENARIO.replace("bank_limit_deg = 40.0", "bank_limit_deg = 40.0\nmax_settling_s = 1.2")


@pytest.fixture
def scenario(tmp_path):
    p = tmp_path / "mini.toml"
    p.write_text(SCENARIO)
    return p


def _table(path):
    with open(path, newline="") as f:
        return list(csv.reader(f))


# ------------------------------------------------------------------ axes and designs
def test_axis_specs():
    a = parse_set("sensor.latency_s=0:0.3:4")
    assert a.values == pytest.approx((0.0, 0.1, 0.2, 0.3), abs=1e-15)
    b = parse_set("sensor.noise_deg=log:0.01:1:3")
    assert b.values == pytest.approx((0.01, 0.1, 1.0), rel=1e-12)
    c = parse_set("controller.kp=0.2,0.4, 0.8")
    assert c.values == (0.2, 0.4, 0.8) and c.kind == "list"
    assert parse_set("sensor.latency_s=0.05").values == (0.05,)
    d = parse_set("sensor.latency_s=0:0.3", need_count=False)
    assert (d.low, d.high, d.values) == (0.0, 0.3, ())


@pytest.mark.parametrize(
    "text, fragment",
    [
        ("sensor.latency_s=0:0.3:0", "empty range"),
        ("sensor.latency_s=", "empty range"),
        ("sensor.latency_s=0.1:0.1:5", "empty range"),
        ("sensor.latency_s=,", "empty list"),
        ("sensor.latency_s=0:0.3", "needs a count"),
        ("sensor.latency_s=log:0:1:3", "positive ends"),
        ("sensor.latency_s=a:b:3", "not a number"),
        ("sensor.latency_s", "missing '='"),
    ],
)
def test_axis_spec_errors_are_one_line(text, fragment):
    with pytest.raises(UserInputError) as exc:
        parse_set(text)
    assert fragment in str(exc.value) and "\n" not in str(exc.value)


def test_latin_hypercube_uses_every_slice_once():
    """A Latin hypercube of n points puts exactly one point in each of the n
    equal slices of every axis (McKay, Beckman & Conover 1979, Technometrics 21:239)."""
    axes = [
        parse_set("sensor.latency_s=0:0.3", need_count=False),
        parse_set("controller.kp=log:0.1:10", need_count=False),
    ]
    pts = design_points(axes, "lhs", 20, seed=3)
    lat = np.floor(pts[:, 0] / 0.3 * 20).astype(int)
    kp = np.floor((np.log(pts[:, 1]) - np.log(0.1)) / (np.log(10) - np.log(0.1)) * 20).astype(int)
    assert sorted(lat) == list(range(20)) and sorted(kp) == list(range(20))
    again = design_points(axes, "lhs", 20, seed=3)
    assert np.array_equal(pts, again)
    grid = design_points([parse_set("a.b=0:1:3"), parse_set("c.d=5,6")], "grid", None, 0)
    assert grid.tolist() == [[0, 5], [0, 6], [0.5, 5], [0.5, 6], [1, 5], [1, 6]]


# ------------------------------------------------------------------ shared batches
def test_points_in_one_batch_equal_points_alone(scenario):
    """Points differing only in per-run keys share a batch; each point's row is
    bit-identical to the same point simulated alone (common random numbers)."""
    doc, _ = load_doc(scenario)
    plan = plan_sweep(
        str(scenario), doc, ["sensor.latency_s=0.02,0.12", "controller.kp=0.3,0.5"], runs=3, chunk_runs=1000
    )
    assert len(plan.chunks) == 1 and len(plan.chunks[0]["points"]) == 4  # one shared batch
    together = {r["point"]: r for r in run_chunk(plan.chunks[0])}
    for pt in plan.chunks[0]["points"]:
        alone = run_chunk(dict(plan.chunks[0], points=[pt]))[0]
        assert alone == together[pt[0]]
    # the parameter matters: more latency, later settling (same draws)
    assert together[2]["settling_time_s_mean"] != together[0]["settling_time_s_mean"]


def test_structural_keys_split_into_groups(scenario):
    """Every numeric parameter the core takes per run shares a batch (the engine's
    PER_RUN list); a shared one such as the camera frame rate splits the points."""
    doc, _ = load_doc(scenario)
    sets = ["sensor.frame_rate_hz=10,20,25", "sensor.noise_deg=0,0.5", "actuator.time_constant_s=0.05,0.1"]
    plan = plan_sweep(str(scenario), doc, sets, runs=2)
    assert len(plan.chunks) == 3  # one batch per frame rate
    assert sorted(len(c["points"]) for c in plan.chunks) == [4, 4, 4]
    chunk = plan.chunks[0]
    together = run_chunk(chunk)
    assert [run_chunk(dict(chunk, points=[p]))[0] for p in chunk["points"]] == together
    limits = plan_sweep(str(scenario), doc, ["actuator.limit_deg=15,20"], runs=2)
    assert len(limits.chunks) == 2  # servo limits are read by the metrics as one value: a batch each


# ------------------------------------------------------------------ folder and resume
def test_resume_continues_and_never_duplicates(scenario, tmp_path):
    doc, text = load_doc(scenario)
    sets = ["sensor.latency_s=0:0.2:3", "sensor.dropout_prob=0,0.3"]
    plan = plan_sweep(str(scenario), doc, sets, runs=2, chunk_runs=2)  # one point per chunk
    full = run_sweep(plan, tmp_path / "full", text)
    assert [r["point"] for r in full.rows] == list(range(6))

    part = tmp_path / "part"
    store = SweepStore(part)
    store.open(plan.definition, text, restart=False)
    store.append(run_chunk(plan.chunks[0]) + run_chunk(plan.chunks[1]))
    store.append(run_chunk(plan.chunks[1]))  # a chunk delivered twice (e.g. recomputed)
    with open(part / POINTS, "ab") as f:  # and a line cut off by a kill
        f.write(b'{"point": 4, "runs": 2, "n_div')
    store.close()
    res = run_sweep(plan, part, text)
    assert (res.resumed, res.computed) == (2, 4)
    assert _table(part / "sweep.csv") == _table(tmp_path / "full" / "sweep.csv")
    lines = (part / POINTS).read_text().splitlines()
    assert all(json.loads(line) for line in lines)  # the cut line is gone
    ids = [json.loads(line)["point"] for line in lines]
    assert sorted(set(ids)) == list(range(6))


def test_changed_sweep_or_scenario_is_refused_unless_restarted(scenario, tmp_path):
    doc, text = load_doc(scenario)
    out = tmp_path / "s"
    run_sweep(plan_sweep(str(scenario), doc, ["sensor.latency_s=0,0.1"], runs=1), out, text)
    other = plan_sweep(str(scenario), doc, ["sensor.latency_s=0,0.2"], runs=1)
    with pytest.raises(UserInputError, match="holds a different sweep .axes changed"):
        run_sweep(other, out, text)
    doc2 = dict(doc, sensor=dict(doc["sensor"], noise_deg=0.5))
    with pytest.raises(UserInputError, match="the scenario changed"):
        run_sweep(plan_sweep(str(scenario), doc2, ["sensor.latency_s=0,0.1"], runs=1), out, text)
    res = run_sweep(other, out, text, restart=True)
    assert [r["sensor.latency_s"] for r in res.rows] == [0.0, 0.2]


def test_cli_writes_table_plot_and_manifest(scenario, tmp_path, capsys):
    out = tmp_path / "cli"
    rc = main(
        [
            "sweep", str(scenario), "--set", "sensor.latency_s=0:0.2:3", "--set", "controller.kp=0.3,0.6",
            "--runs", "2", "--out", str(out), "--workers", "1", "--quiet",
        ]
    )  # fmt: skip
    assert rc == 0
    rows = _table(out / "sweep.csv")
    assert rows[0][:3] == ["point", "sensor.latency_s", "controller.kp"] and len(rows) == 7
    assert (out / "heatmap_pass_all.png").stat().st_size > 5000
    man = json.loads((out / "manifest.json").read_text())
    assert man["kind"] == "sweep" and man["points"] == 6
    rc = main(
        [
            "sweep",
            str(scenario),
            "--set",
            "sensor.latency_s=0:0.2:3",
            "--runs",
            "2",
            "--out",
            str(tmp_path / "l"),
            "--quiet",
        ]
    )
    assert rc == 0 and (tmp_path / "l" / "line_pass_all.png").exists()


@pytest.mark.parametrize(
    "sets, fragment",
    [
        (["sensor.latncy_s=0:0.3:4"], "unknown key; closest valid key: sensor.latency_s"),
        (["sensr.latency_s=0:0.3:4"], "unknown key; closest valid key: sensor.latency_s"),
        (["sensor.latency_s=0:0.3:0"], "empty range"),
        (["run.seed=1,2"], "not sweepable"),
        (["aircraft.model=1,2"], "not sweepable"),
        (["sensor.latency_s=0:9:3"], "out of range"),
    ],
)
def test_bad_input_is_one_line_exit_2(scenario, tmp_path, capsys, sets, fragment):
    argv = ["sweep", str(scenario), "--out", str(tmp_path / "x"), "--quiet"]
    for s in sets:
        argv += ["--set", s]
    assert main(argv) == 2
    err = capsys.readouterr().err
    assert fragment in err and err.count("\n") == 1, err
    assert not (tmp_path / "x").exists()


def test_sigkill_then_resume_gives_the_uninterrupted_table(scenario, tmp_path):
    """A sweep killed with SIGKILL part-way and started again with the same
    command ends with the same table as one never interrupted (no point lost or
    counted twice)."""
    import os
    import signal
    import subprocess
    import sys
    import time

    sets = ["--set", "sensor.latency_s=0:0.3:8", "--set", "controller.kp=0.3,0.5"]
    base = [sys.executable, "-m", "rollrig.sim.cli.main", "sweep", str(scenario), *sets, "--runs", "3"]
    opts = ["--workers", "1", "--chunk-runs", "3", "--quiet"]  # one point per chunk: many appends
    ref = tmp_path / "ref"
    assert main(["sweep", str(scenario), *sets, "--runs", "3", "--out", str(ref), *opts]) == 0

    out = tmp_path / "killed"
    proc = subprocess.Popen(
        [*base, "--out", str(out), *opts], stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL
    )
    points = out / POINTS
    deadline = time.monotonic() + 120
    while time.monotonic() < deadline:
        if points.exists() and points.read_bytes().count(b"\n") >= 3:
            break
        time.sleep(0.01)
    os.kill(proc.pid, signal.SIGKILL)
    proc.wait()
    done_before = points.read_bytes().count(b"\n")
    assert 3 <= done_before < 16, "the kill came too late to test a resume"
    assert not (out / "sweep.csv").exists()
    res = subprocess.run([*base, "--out", str(out), *opts], capture_output=True, text=True, timeout=300)
    assert res.returncode == 0, res.stderr
    assert f"{done_before} resumed" in res.stdout
    assert _table(out / "sweep.csv") == _table(ref / "sweep.csv")
    ids = [json.loads(line)["point"] for line in points.read_text().splitlines()]
    assert sorted(ids) == list(range(16))
