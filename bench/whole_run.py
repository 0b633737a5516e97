"""Whole-process cost of ``rollrig run`` against the core's own simulation time (issue 8).

    python bench/whole_run.py [RUNS] [DURATION_S]     # default 1000 runs × 60 s

Times, in one go and under the same machine load: the stepping core alone
on the batch (in-process, best of 2), the phases of ``rollrig run``
in-process (simulate, metrics, tables, files), and the whole process
``rollrig run FILE --out DIR`` (no plots) from the shell. Prints the ratio
whole process / core; the target is at most 1.5.
"""

from __future__ import annotations

import subprocess
import sys
import tempfile
import time
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]
SCENARIO = REPO / "scenarios" / "light-single-wings-level.toml"


def main() -> None:
    runs = int(sys.argv[1]) if len(sys.argv) > 1 else 1000
    duration = float(sys.argv[2]) if len(sys.argv) > 2 else 60.0
    from rollrig.controllers.pid import PIDController  # noqa: F401  (warm imports)
    from rollrig.sim.controller_section import make_controller
    from rollrig.sim.core import simulate
    from rollrig.sim.metrics import evaluate
    from rollrig.sim.report.outdir import output_folder
    from rollrig.sim.report.run_files import write_run_files
    from rollrig.sim.report.run_tables import run_tables
    from rollrig.sim.report.table import render
    from rollrig.sim.runner import judge, metric_spec
    from rollrig.sim.scenario import build_setup, load_scenario

    with tempfile.TemporaryDirectory() as d:
        text = SCENARIO.read_text()
        text = text.replace("duration_s = 50.0", f"duration_s = {duration}")
        path = Path(d) / "whole-run.toml"
        path.write_text(text)
        sc = load_scenario(path).with_run(runs=runs)
        setup = build_setup(sc)
        core = []
        for _ in range(2):
            ctrl = make_controller(sc.controller)
            t0 = time.perf_counter()
            trace = simulate(setup, ctrl, seed=sc.run.seed, run_indices=range(runs))
            core.append(time.perf_counter() - t0)
        t_core = min(core)

        from rollrig.sim.runner import RunOutcome

        t0 = time.perf_counter()
        metrics = evaluate(trace, metric_spec(sc))
        t_metrics = time.perf_counter() - t0
        out = RunOutcome(sc, trace, metrics, judge(metrics, sc))
        t0 = time.perf_counter()
        tables = run_tables(out)
        render(tables, "csv")
        t_tables = time.perf_counter() - t0
        t0 = time.perf_counter()
        with output_folder(Path(d) / "inproc") as tmp:
            write_run_files(tmp, out, run_indices=range(runs))
            (tmp / "metrics.md").write_text(render(tables, "md"))
        t_files = time.perf_counter() - t0

        exe = Path(sys.executable).parent / "rollrig"
        t0 = time.perf_counter()
        res = subprocess.run(
            [
                str(exe),
                "run",
                str(path),
                "--runs",
                str(runs),
                "--out",
                str(Path(d) / "whole"),
                "--format",
                "csv",
            ],
            capture_output=True,
            text=True,
        )
        t_whole = time.perf_counter() - t0
        if res.returncode != 0:
            raise SystemExit(res.stderr)
        t0 = time.perf_counter()
        subprocess.run([str(exe), "--version"], capture_output=True)
        t_version = time.perf_counter() - t0

    print(f"rollrig run, {runs} runs × {duration:g} s ({sc.run.n_steps} steps), no plots")
    print(f"  core (simulate), best of 2   {t_core:7.2f} s")
    print(f"  metrics                      {t_metrics:7.2f} s")
    print(f"  tables                       {t_tables:7.2f} s")
    print(f"  files (CSV, npz, JSON)       {t_files:7.2f} s")
    print(f"  whole process                {t_whole:7.2f} s")
    print(f"  ratio whole / core           {t_whole / t_core:7.2f}   (target ≤ 1.5)")
    print(f"  rollrig --version            {t_version:7.2f} s")


if __name__ == "__main__":
    main()
