"""Throughput of the tuner's evaluation against the core's own batch throughput.

One generation of the bundled tuning scenario (population × degradation cases
× seeds, through :func:`rollrig.sim.tuning.batch.simulate_grid`: build the
per-run parameters, simulate, compute metrics, judge) is timed against the
core's own driver (:func:`rollrig.sim.driver.run_batch` at the metrics level)
running exactly the same runs (same per-run gains and camera fields, same
batch size) and nothing else. The ratio (tuner ÷ core, runs per second) is
what the tuner adds per candidate and per run: 1.0 means nothing. Also shown:
:func:`rollrig.sim.core.simulate` with its full trace and no metrics, and the
core running the
scenario as written (the starting gains, scalars) for context: the gap
between the two core lines is what per-run parameters cost the core itself.
Margin screening (one analytic loop per candidate) is timed separately.
CPU-seconds are printed beside wall time because a shared machine's load
moves wall time by tens of percent.

Usage: ``python bench/tune.py [--population N] [--repeat N]``
"""

from __future__ import annotations

import argparse
import time
from pathlib import Path

import numpy as np
from rollrig.sim.core import simulate
from rollrig.sim.driver import run_batch
from rollrig.sim.runner import metric_spec
from rollrig.sim.scenario import build_setup
from rollrig.sim.tuning.batch import PER_RUN_AXES, controller_for, simulate_grid
from rollrig.sim.tuning.cases import scenario_for_case
from rollrig.sim.tuning.objective import margin_screen
from rollrig.sim.tuning.search import initial_population, prepare
from rollrig.sim.tuning.spec import load_tuning, with_overrides

SCENARIO = Path(__file__).resolve().parents[1] / "scenarios" / "tuning" / "uav-camera-shortlist.toml"


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--population", type=int, default=12)
    ap.add_argument("--repeat", type=int, default=3, help="timings per figure (best is kept)")
    args = ap.parse_args()

    sc, spec, _ = load_tuning(SCENARIO)
    spec = with_overrides(spec, population=args.population)
    problem = prepare(sc, spec)
    pop = initial_population(problem)
    cases = problem.cases
    n_runs = pop.shape[0] * cases.n_cases * cases.seed_indices.size
    chunk = min(spec.chunk_runs, n_runs)

    def tuner() -> None:
        simulate_grid(sc, problem.names, pop, cases, chunk_runs=spec.chunk_runs)

    n_p, n_c, n_s = pop.shape[0], cases.n_cases, cases.seed_indices.size
    pp, cc, ss = (
        a.ravel() for a in np.meshgrid(np.arange(n_p), np.arange(n_c), np.arange(n_s), indexing="ij")
    )
    same = []  # the grid's own batches, built once: the core alone runs them
    for lo in range(0, n_runs, chunk):
        p, c, s_ = pp[lo : lo + chunk], cc[lo : lo + chunk], ss[lo : lo + chunk]
        run_sc = scenario_for_case(sc, {n: cases.values[c, j] for j, n in enumerate(cases.names)})
        same.append((build_setup(run_sc), controller_for(sc, problem.names, pop[p]), cases.seed_indices[s_]))

    def core() -> None:
        for setup, ctrl, runs in same:
            simulate(setup, ctrl, seed=sc.run.seed, run_indices=runs)

    spec_m = metric_spec(sc)

    def core_metrics() -> None:
        for setup, ctrl, runs in same:
            run_batch(setup, ctrl, seed=sc.run.seed, run_indices=runs, record="metrics", metric_spec=spec_m)

    plain_setup = build_setup(sc)
    plain_ctrl = controller_for(sc, problem.names, problem.start)

    def core_plain() -> None:
        for lo in range(0, n_runs, chunk):
            simulate(
                plain_setup, plain_ctrl, seed=sc.run.seed, run_indices=np.arange(lo, min(lo + chunk, n_runs))
            )

    def screen() -> None:
        for g in pop:
            margin_screen(problem.margin_sc, problem.names, g)

    # interleaved repeats, best of each: a shared machine's load drifts between figures
    fns = {"tuner": tuner, "core": core, "plain": core_plain, "metrics": core_metrics, "screen": screen}
    best = {k: [float("inf"), float("inf")] for k in fns}
    for _ in range(args.repeat):
        for k, fn in fns.items():
            w0, c0 = time.perf_counter(), time.process_time()
            fn()
            best[k][0] = min(best[k][0], time.perf_counter() - w0)
            best[k][1] = min(best[k][1], time.process_time() - c0)
    (tw, tc), (cw, ccpu), (pw, pcpu), (mw_, mcpu) = (best[k] for k in ("tuner", "core", "plain", "metrics"))
    mw = best["screen"][0]
    steps = sc.run.n_steps
    shared = [a.name for a in spec.axes if a.name not in PER_RUN_AXES]
    print(f"scenario: {SCENARIO.name}; axes: {', '.join(a.name for a in spec.axes)}")
    print(f"axes shared by a batch (one batch per value): {', '.join(shared) or 'none'}")
    print(
        f"one generation: {pop.shape[0]} candidates × {cases.n_cases} cases × "
        f"{cases.seed_indices.size} seeds "
        f"= {n_runs} runs of {steps} steps (batches of ≤ {chunk})"
    )
    print(f"tuner grid                 : {n_runs / tw:8.0f} cand.-runs/s wall ({n_runs / tc:8.0f} per CPU-s)")
    print(f"core, same runs, metrics   : {n_runs / mw_:8.0f} runs/s wall ({n_runs / mcpu:8.0f} per CPU-s)")
    print(f"core, same runs, full trace: {n_runs / cw:8.0f} runs/s wall ({n_runs / ccpu:8.0f} per CPU-s)")
    print(f"core alone, scenario as is : {n_runs / pw:8.0f} runs/s wall ({n_runs / pcpu:8.0f} per CPU-s)")
    print(f"tuner / core (same runs, metrics level): {mw_ / tw:.2f} wall, {mcpu / tc:.2f} CPU (target ≥ 0.8)")
    print(f"ratio tuner / core (same runs, full trace, no metrics): {cw / tw:.2f} wall, {ccpu / tc:.2f} CPU")
    print(f"ratio tuner / core (scenario as is): {pw / tw:.2f} wall, {pcpu / tc:.2f} CPU")
    print(f"margin screen: {1000 * mw / pop.shape[0]:.1f} ms per candidate ({mw:.2f} s per generation)")


if __name__ == "__main__":
    main()
