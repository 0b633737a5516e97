"""``rollrig run FILE``: simulate a scenario, print its table, write its folder."""

from __future__ import annotations

import argparse
from pathlib import Path

import numpy as np
from rollrig.sim.cli.common import apply_run_overrides, print_tables, say_written
from rollrig.sim.errors import UserInputError

__all__ = ["add_parser", "run", "HEADLINE_METRICS"]

#: metrics drawn as histograms for Monte Carlo sets
HEADLINE_METRICS = [
    "settling_time_s",
    "overshoot_pct",
    "rms_error_rad",
    "peak_abs_bank_rad",
    "aileron_rms_rad",
    "time_outside_band_s",
]


def add_parser(sub) -> None:
    p = sub.add_parser(
        "run",
        help="simulate a scenario and report metrics",
        description="Simulate a scenario's Monte Carlo batch, print metrics, write an output folder.",
    )
    p.add_argument("scenario", metavar="FILE", help="scenario file (TOML)")
    p.add_argument("--runs", type=int, help="number of Monte Carlo runs (overrides [run] runs)")
    p.add_argument("--seed", type=int, help="run seed (overrides [run] seed)")
    p.add_argument("--replay", type=int, metavar="N", help="replay run N of the Monte Carlo set alone")
    p.add_argument(
        "--out", type=Path, metavar="DIR", help="output folder (default rollrig-runs/<name>-<time>)"
    )
    p.add_argument("--force", action="store_true", help="replace an existing output folder")
    p.add_argument("--no-files", action="store_true", help="print the table only, write no folder")
    p.add_argument(
        "--format",
        choices=("table", "csv", "json", "md"),
        default="table",
        help="how to print the metrics (default: table)",
    )
    p.add_argument("--plot", action="store_true", help="also write PNG plots")
    p.add_argument(
        "--allow-code",
        action="store_true",
        help="allow the scenario to load a user controller class (runs your code)",
    )
    p.add_argument(
        "--margins",
        action="store_true",
        help="also print stability margins (analytic and empirical, see rollrig margins)",
    )
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    from rollrig.sim.report.outdir import check_out_dir, default_out_dir, output_folder
    from rollrig.sim.report.table import render
    from rollrig.sim.runner import run_scenario
    from rollrig.sim.scenario import load_scenario

    sc = apply_run_overrides(load_scenario(args.scenario), args.runs, args.seed)
    if args.replay is not None:
        if not 0 <= args.replay < sc.run.runs:
            raise UserInputError(
                f"--replay {args.replay}: allowed: 0 ≤ N < {sc.run.runs} (the runs of this set)"
            )
        runs = [args.replay]
    else:
        runs = list(range(sc.run.runs))

    out_dir = None
    if not args.no_files:
        out_dir = args.out or default_out_dir(Path(sc.path).stem)
        check_out_dir(out_dir, args.force)

    outcome = run_scenario(sc, allow_code=args.allow_code, run_indices=runs)

    from rollrig.sim.report.run_tables import run_tables

    tables = run_tables(outcome)
    if args.margins:
        from rollrig.sim.analysis.margins_report import run_margins_table

        tables.append(run_margins_table(sc, allow_code=args.allow_code))
    print_tables(tables, args.format)

    if out_dir is not None:
        from rollrig.sim.report.run_files import write_run_files

        with output_folder(out_dir, force=args.force) as tmp:
            write_run_files(tmp, outcome, run_indices=runs, command_line=getattr(args, "command_line", None))
            (tmp / "metrics.md").write_text(render(tables, "md"))
            if args.plot:
                _plots(tmp, outcome)
        say_written(out_dir, args.format)
    return 0


def worst_run(outcome) -> int:
    """Row of the run to draw: the first diverged run, else the largest RMS error."""
    tr = outcome.trace
    if tr.diverged.any():
        return int(np.argmax(tr.diverged))
    return int(np.argmax(outcome.metrics["rms_error_rad"]))


def _plots(folder: Path, outcome) -> None:
    from rollrig.sim.metrics import METRIC_INFO
    from rollrig.sim.report.plots import plot_aileron, plot_bank, plot_envelope, plot_histograms

    sc, tr = outcome.scenario, outcome.trace
    worst = worst_run(outcome)
    which = "" if tr.batch == 1 else " (worst of the set)"
    plot_bank(
        tr,
        folder / "bank.png",
        run=worst,
        bank_limit_rad=sc.criteria.bank_limit_rad,
        title=f"{sc.title}: bank angle, run {int(tr.run_index[worst])}{which}",
    )
    plot_aileron(
        tr,
        folder / "aileron.png",
        run=worst,
        limit_rad=sc.actuator.limit_rad,
        title=f"{sc.title}: aileron, run {int(tr.run_index[worst])}{which}",
    )
    if tr.batch > 1:
        plot_envelope(
            tr,
            folder / "envelope.png",
            bank_limit_rad=sc.criteria.bank_limit_rad,
            title=f"{sc.title}: bank envelope, {tr.batch} runs",
        )
        plot_histograms(
            outcome.metrics,
            METRIC_INFO,
            folder / "histograms.png",
            diverged=tr.diverged,
            keys=HEADLINE_METRICS,
            title=f"{sc.title}: {tr.batch} runs",
        )
