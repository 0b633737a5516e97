"""``rollrig rank-faults FILE``: which camera fault hurts the loop most."""

from __future__ import annotations

import argparse
from pathlib import Path

from rollrig.sim.cli.common import (
    add_force_option,
    add_format_option,
    apply_run_overrides,
    print_tables,
    say_written,
)
from rollrig.sim.errors import UserInputError

__all__ = ["add_parser", "run"]


def add_parser(sub) -> None:
    p = sub.add_parser(
        "rank-faults",
        help="rank the camera's faults by what each costs the loop",
        description="Run the scenario's Monte Carlo set with every sensor fault, with each fault removed "
        "and with each fault alone (same seed: common random numbers), and rank the faults by what "
        "they cost in one metric.",
    )
    p.add_argument("scenario", metavar="FILE", help="scenario file (TOML)")
    p.add_argument(
        "--metric",
        help="metric to rank by, a key of metrics.json "
        "(default: itae when the command has a step, else rms_error_rad)",
    )
    p.add_argument("--runs", type=int, help="Monte Carlo runs per variant (overrides [run] runs)")
    p.add_argument("--seed", type=int, help="run seed, 0 … 2^63 − 1 (overrides [run] seed)")
    add_format_option(p)
    p.add_argument("--out", type=Path, metavar="DIR", help="also write the table and a manifest here")
    add_force_option(p)
    p.add_argument("--allow-code", action="store_true", help="allow a user controller class (runs your code)")
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    from rollrig.sim.analysis.fault_ranking import active_faults, rank_faults
    from rollrig.sim.metrics import METRIC_INFO
    from rollrig.sim.report.fault_table import ranking_table
    from rollrig.sim.report.table import render
    from rollrig.sim.scenario import load_scenario

    values = sorted(k for k, v in METRIC_INFO.items() if v.kind == "value")
    if args.metric is not None and args.metric not in values:
        raise UserInputError(f"--metric {args.metric}: allowed: {', '.join(values)}")
    sc = load_scenario(args.scenario)
    if args.metric is None:
        from rollrig.sim.runner import metric_spec

        has_step = any(abs(seg.size_rad) > 1e-12 for seg in metric_spec(sc).steps)
        args.metric = "itae" if has_step else "rms_error_rad"
    sc = apply_run_overrides(sc, args.runs, args.seed, min_runs=2, why=" (a paired interval needs 2)")
    if not active_faults(sc):
        raise UserInputError(f"{args.scenario}: [sensor] has no faults to rank (an ideal camera)")
    if args.out is not None:
        from rollrig.sim.report.outdir import check_out_dir

        check_out_dir(args.out, args.force, protect=[args.scenario])
    try:
        ranking = rank_faults(sc, args.metric, allow_code=args.allow_code)
    except KeyError:
        raise UserInputError(
            f"--metric {args.metric}: not computed for this scenario's command profile "
            "(step metrics need a step; try rms_error_rad)"
        ) from None
    table = ranking_table(ranking)
    print_tables([table], args.format)
    if args.out is not None:
        from rollrig.sim.report.outdir import manifest, output_folder, write_json

        with output_folder(args.out, force=args.force, protect=[args.scenario]) as tmp:
            (tmp / "faults.md").write_text(render([table], "md"))
            write_json(tmp / "faults.json", table.records)
            write_json(
                tmp / "manifest.json",
                manifest(
                    scenario_path=sc.path,
                    scenario=sc,
                    scenario_sha256=sc.sha256,
                    seed=sc.run.seed,
                    runs=range(sc.run.runs),
                    command_line=["rollrig", "rank-faults", args.scenario],
                ),
            )
        say_written(args.out, args.format)
    return 0
