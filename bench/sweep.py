"""Sweep throughput: 200 points × 50 Monte Carlo runs × 60 s simulated.

The bundled light-single scenario with its duration set to 60 s, swept over
camera latency (20 values) × independent frame-loss probability (10 values):
both are per-run keys, so the 10,000 runs form shared batches (chunks of
``--chunk-runs`` members) spread over a local process pool. Prints the wall
time, the simulated seconds per wall second and whether the target (under
60 s on a 2-core machine) was met, with the machine's load average so that a
busy machine is visible in the figure.

Usage: ``python bench/sweep.py [--workers N] [--chunk-runs N] [--runs N]``
"""

from __future__ import annotations

import argparse
import os
import resource
import tempfile
import time
from pathlib import Path

from rollrig.sim.sweep import load_doc, plan_sweep, run_sweep
from rollrig.sim.sweep.execute import default_workers

SCENARIO = Path(__file__).resolve().parents[1] / "scenarios" / "light-single-wings-level.toml"
TARGET_S = 60.0


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--workers", type=int, default=None, help="processes (default: one per core)")
    ap.add_argument("--chunk-runs", type=int, default=1000, help="batch members per chunk (10 chunks)")
    ap.add_argument("--runs", type=int, default=50)
    args = ap.parse_args()

    doc, text = load_doc(SCENARIO)
    sets = [
        "run.duration_s=60",
        "sensor.latency_s=0:0.38:20",
        "sensor.dropout_prob=0:0.45:10",
    ]
    plan = plan_sweep(str(SCENARIO), doc, sets, runs=args.runs, chunk_runs=args.chunk_runs)
    workers = args.workers or default_workers()
    n_runs = plan.n_points * args.runs
    print(
        f"sweep: {plan.n_points} points x {args.runs} runs x 60 s = {n_runs} runs, "
        f"{len(plan.chunks)} chunks, {workers} worker process(es), {os.cpu_count()} cores"
    )

    def cpu() -> float:
        me, kids = resource.getrusage(resource.RUSAGE_SELF), resource.getrusage(resource.RUSAGE_CHILDREN)
        return me.ru_utime + me.ru_stime + kids.ru_utime + kids.ru_stime

    with tempfile.TemporaryDirectory() as tmp:
        c0, t0 = cpu(), time.perf_counter()
        res = run_sweep(plan, Path(tmp) / "bench", text, workers=workers)
        wall = time.perf_counter() - t0
        used = cpu() - c0  # this process and its (finished) pool workers
    load = os.getloadavg()[0]
    print(f"  wall time            {wall:8.1f} s   ({len(res.rows)} points written)")
    print(f"  simulated s per wall {n_runs * 60.0 / wall:8.0f}")
    print(f"  CPU time, all procs  {used:8.1f} s   (= {used / 2:.1f} s spread over 2 idle cores)")
    print(f"  load average (1 min) {load:8.1f}   (above 2: other work shared these cores)")
    verdict = "met" if wall < TARGET_S else "NOT met"
    print(f"  target: under {TARGET_S:.0f} s wall on 2 cores -> {verdict}")


if __name__ == "__main__":
    main()
