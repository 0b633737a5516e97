"""Sweeps on a process pool and on a Dask cluster give the local table; a
worker killed mid-sweep loses no point and duplicates none."""

from __future__ import annotations

import csv
import os
import signal
import time

import pytest
from helpers import MINIMAL_SCENARIO
from rollrig.sim.cli.main import main
from rollrig.sim.sweep import plan_sweep, run_sweep
from rollrig.sim.sweep.plan import load_doc

distributed = pytest.importorskip("distributed")  # the optional extra rollrig[dist]; dev installs it

SETS = ["sensor.latency_s=0:0.2:3", "controller.kp=0.3,0.5", "sensor.noise_deg=0,0.5"]


@pytest.fixture(scope="module")
def scenario(tmp_path_factory):
    p = tmp_path_factory.mktemp("sc") / "mini.toml"
    p.write_text(MINIMAL_SCENARIO)
    return p


@pytest.fixture(scope="module")
def cluster():
    from distributed import LocalCluster

    with LocalCluster(
        n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1", dashboard_address=None
    ) as c:
        yield c


@pytest.fixture(scope="module")
def reference(scenario, tmp_path_factory):
    doc, text = load_doc(scenario)
    plan = plan_sweep(str(scenario), doc, SETS, runs=3, chunk_runs=3)
    out = tmp_path_factory.mktemp("ref") / "local"
    run_sweep(plan, out, text, workers=1)
    return _table(out / "sweep.csv")


def _table(path):
    with open(path, newline="") as f:
        return list(csv.reader(f))


def test_process_pool_equals_local(scenario, reference, tmp_path):
    doc, text = load_doc(scenario)
    plan = plan_sweep(str(scenario), doc, SETS, runs=3, chunk_runs=3)
    run_sweep(plan, tmp_path / "pool", text, workers=2)
    assert _table(tmp_path / "pool" / "sweep.csv") == reference


def test_dask_equals_local(scenario, reference, cluster, tmp_path):
    doc, text = load_doc(scenario)
    plan = plan_sweep(str(scenario), doc, SETS, runs=3, chunk_runs=3)
    run_sweep(plan, tmp_path / "dask", text, dask=cluster.scheduler_address)
    assert _table(tmp_path / "dask" / "sweep.csv") == reference


def test_dask_worker_killed_mid_sweep_loses_no_point(scenario, reference, cluster, tmp_path):
    from distributed import Client

    doc, text = load_doc(scenario)
    plan = plan_sweep(str(scenario), doc, SETS, runs=3, chunk_runs=3)  # 12 chunks of one point
    with Client(cluster.scheduler_address, set_as_default=False) as client:
        pids = client.run(os.getpid)
    killed = []

    def progress(done: int, total: int) -> None:
        if done >= 2 and not killed:  # both workers are busy with further chunks now
            pid = sorted(pids.values())[0]
            os.kill(pid, signal.SIGKILL)
            killed.append(pid)

    res = run_sweep(plan, tmp_path / "killed", text, dask=cluster.scheduler_address, progress=progress)
    assert killed
    assert _table(tmp_path / "killed" / "sweep.csv") == reference
    assert sorted(r["point"] for r in res.rows) == list(range(12))
    lines = (tmp_path / "killed" / "points.jsonl").read_text().splitlines()
    assert len(lines) == 12  # no row written twice


def test_unreachable_scheduler_is_one_line_exit_2(scenario, tmp_path, capsys):
    t0 = time.monotonic()
    argv = ["sweep", str(scenario), "--set", SETS[0], "--out", str(tmp_path / "x"), "--quiet"]
    rc = main([*argv, "--dask", "tcp://127.0.0.1:9", "--dask-timeout-s", "2"])
    err = capsys.readouterr().err
    assert rc == 2 and err.count("\n") == 1, err
    assert "no Dask scheduler answered within 2 s" in err
    assert time.monotonic() - t0 < 30  # the stated timeout, plus start-up; no hang
    assert not (tmp_path / "x").exists()
