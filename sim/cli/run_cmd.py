"""``rollrig run FILE``: simulate a scenario, print its table, write its folder."""

from __future__ import annotations

import argparse
from pathlib import Path

from rollrig.sim.cli.common import (
    add_format_option,
    add_seed_option,
    apply_run_overrides,
    check_batch_resources,
    print_tables,
    progress_reporter,
    say_written,
)
from rollrig.sim.errors import UserInputError

__all__ = ["add_parser", "run"]


def add_parser(sub) -> None:
    p = sub.add_parser(
        "run",
        help="simulate a scenario and report metrics",
        description="Simulate a scenario's Monte Carlo batch, print metrics, write an output folder.",
    )
    p.add_argument("scenario", metavar="FILE", help="scenario file (TOML)")
    p.add_argument("--runs", type=int, help="number of Monte Carlo runs (overrides [run] runs)")
    add_seed_option(p)
    p.add_argument("--replay", type=int, metavar="N", help="replay run N of the Monte Carlo set alone")
    p.add_argument(
        "--out", type=Path, metavar="DIR", help="output folder (default rollrig-runs/<name>-<time>)"
    )
    p.add_argument(
        "--force",
        action="store_true",
        help="replace an existing output folder that rollrig wrote (never any other folder)",
    )
    p.add_argument("--no-files", action="store_true", help="print the table only, write no folder")
    add_format_option(p, help="how to print the metrics (default: table)")
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
    from rollrig.sim.controller_guard import CheckedController
    from rollrig.sim.controller_section import make_controller
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

    est = check_batch_resources(sc, len(runs), where=args.scenario)
    out_dir = None
    if not args.no_files:
        out_dir = args.out or default_out_dir(Path(sc.path).stem)
        check_out_dir(out_dir, args.force, protect=[args.scenario])

    ctrl = make_controller(sc.controller, allow_code=args.allow_code, scenario=sc)
    with progress_reporter(est.seconds, sc.run.duration_s, f"{len(runs)} run(s)") as tick:
        if tick is not None or sc.controller.kind != "pid":  # a user's class: check what it returns
            ctrl = CheckedController(ctrl, progress=tick)
        outcome = run_scenario(sc, controller=ctrl, run_indices=runs)

    from rollrig.sim.report.run_tables import run_tables

    tables = run_tables(outcome)
    if args.margins:
        from rollrig.sim.analysis.margins_report import run_margins_table

        tables.append(run_margins_table(sc, allow_code=args.allow_code))
    print_tables(tables, args.format)

    if out_dir is not None:
        from rollrig.sim.report.run_files import write_run_files

        with output_folder(out_dir, force=args.force, protect=[args.scenario]) as tmp:
            write_run_files(tmp, outcome, run_indices=runs, command_line=getattr(args, "command_line", None))
            (tmp / "metrics.md").write_text(render(tables, "md"))
            if args.plot:
                from rollrig.sim.report.run_plots import write_run_plots

                write_run_plots(tmp, outcome)
        say_written(out_dir, args.format)
    return 0
