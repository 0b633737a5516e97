"""``rollrig compare SCENARIO... -c FILE...``: controllers side by side with common random numbers."""

from __future__ import annotations

import argparse
from pathlib import Path

from rollrig.sim.cli.common import (
    add_force_option,
    add_format_option,
    apply_run_overrides,
    print_tables,
    say_written,
    status_stream,
)
from rollrig.sim.errors import UserInputError

__all__ = ["add_parser", "run"]


def add_parser(sub) -> None:
    p = sub.add_parser(
        "compare",
        help="compare controllers on the same scenarios with the same noise, gusts and lost frames",
        description="Run every scenario with every controller (the scenario's own and controller files), "
        "same seed and run indices for all (common random numbers), and print one table per scenario: "
        "metric means with 95 %% intervals, pass rates with Wilson intervals, margins, and paired "
        "differences from a baseline controller.",
    )
    p.add_argument("scenarios", metavar="SCENARIO", nargs="+", help="scenario file(s) (TOML)")
    p.add_argument(
        "-c",
        "--controller",
        action="append",
        default=[],
        metavar="FILE",
        help="controller file (TOML with a [controller] table); repeat for more",
    )
    p.add_argument("--no-own", action="store_true", help="leave out the scenarios' own controllers")
    p.add_argument(
        "--baseline", metavar="NAME", help="controller the differences are taken from (default: first)"
    )
    p.add_argument(
        "--rank-by",
        metavar="METRIC[=W,...]",
        help="order rows by a metric's mean, or a weighted score of several (means over the baseline's)",
    )
    p.add_argument(
        "--margins",
        choices=("none", "analytic", "all"),
        default="all",
        help="analytic margins (PID, cascade, LQG, Smith) and/or margins by experiment (default: all)",
    )
    p.add_argument("--run", type=int, default=0, metavar="K", help="run index to plot for every controller")
    p.add_argument("--runs", type=int, help="Monte Carlo runs (overrides [run] runs)")
    p.add_argument("--seed", type=int, help="run seed (overrides [run] seed)")
    p.add_argument(
        "--workers", type=int, default=1, help="processes for the pairings (results do not change)"
    )
    add_format_option(p)
    p.add_argument(
        "--out", type=Path, metavar="DIR", help="write CSV, JSON, Markdown, plots and a manifest here"
    )
    add_force_option(p)
    p.add_argument("--allow-code", action="store_true", help="allow user controller classes (runs your code)")
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    from rollrig.sim.analysis.compare import compare, parse_rank_by, rank, resolve_candidates
    from rollrig.sim.report.compare_tables import comparison_table, difference_table, tidy_csv, tidy_rows
    from rollrig.sim.scenario import load_scenario

    scenarios = [
        apply_run_overrides(
            load_scenario(p), args.runs, args.seed, min_runs=2, why=" (a paired interval needs 2)"
        )
        for p in args.scenarios
    ]
    if not 1 <= args.workers <= 64:
        raise UserInputError(f"--workers {args.workers}: allowed: 1 ≤ workers ≤ 64")
    for sc in scenarios:
        if not 0 <= args.run < sc.run.runs:
            raise UserInputError(f"--run {args.run}: allowed: 0 ≤ run < {sc.run.runs} (runs of {sc.path})")
    cands = resolve_candidates(scenarios, args.controller, own=not args.no_own, allow_code=args.allow_code)
    weights = None
    if args.rank_by is not None:
        from rollrig.sim.analysis.compare import headline_metrics

        weights = parse_rank_by(args.rank_by, headline_metrics(scenarios[0]))
    if args.out is not None:
        from rollrig.sim.report.outdir import check_out_dir

        check_out_dir(args.out, args.force)
    stream = status_stream(args.format)
    results = compare(
        scenarios,
        cands,
        baseline=args.baseline,
        allow_code=args.allow_code,
        margins=args.margins,
        shown_run=args.run,
        workers=args.workers,
        progress=(lambda msg: print(f"  running {msg}", file=stream, flush=True)),
    )
    tables = []
    for c in results:
        scores = None
        if weights is not None:
            missing = [k for k in weights if k not in c.result(c.baseline).summaries]
            if missing:
                raise UserInputError(
                    f"--rank-by {args.rank_by}: {missing[0]} is not computed for {c.scenario.path} "
                    "(step metrics need a step command)"
                )
            scores = rank(c, weights)
        tables += [
            comparison_table(c, scores, args.rank_by or ""),
            comparison_table(c, scores, args.rank_by or "", part="checks"),
            difference_table(c),
        ]
    rows = tidy_rows(results)
    if args.format == "csv":
        print(tidy_csv(rows), end="")
    else:
        print_tables(tables, args.format)
    if args.out is not None:
        _write(args, results, tables, rows, cands)
        say_written(args.out, args.format)
    return 0


def _write(args, results, tables, rows, cands) -> None:
    import hashlib

    from rollrig.sim.analysis.compare_loops import OMEGA
    from rollrig.sim.report.compare_plots import plot_bank_overlay, plot_loops, plot_metric_bars
    from rollrig.sim.report.compare_tables import tidy_csv
    from rollrig.sim.report.outdir import manifest, output_folder, scenario_hash, write_json
    from rollrig.sim.report.table import render

    with output_folder(args.out, force=args.force) as tmp:
        (tmp / "compare.md").write_text(render(tables, "md"))
        (tmp / "compare.csv").write_text(tidy_csv(rows))
        write_json(
            tmp / "compare.json", [{"title": t.title, "rows": t.records, "notes": t.notes} for t in tables]
        )
        loops = []
        for i, c in enumerate(results):
            stem = f"{i + 1}-{Path(c.scenario.path).stem}"
            plot_bank_overlay(c, tmp / f"{stem}-bank.png")
            plot_metric_bars(c, tmp / f"{stem}-metrics.png")
            loops += [
                (f"{r.candidate} · {c.scenario.title}", r.loop_response)
                for r in c.results
                if r.loop_response is not None
            ]
        plot_loops(loops, OMEGA, tmp / "loops.png")
        sc0 = results[0].scenario
        files = {
            c.name: (
                {"file": c.path, "sha256": hashlib.sha256(Path(c.path).read_bytes()).hexdigest()}
                if c.path
                else "scenario's own [controller]"
            )
            for c in cands
        }
        write_json(
            tmp / "manifest.json",
            manifest(
                scenario_path=sc0.path,
                scenario=sc0,
                scenario_sha256=sc0.sha256,
                seed=sc0.run.seed,
                runs=range(sc0.run.runs),
                command_line=getattr(args, "command_line", None),
                extra={
                    "scenarios": [
                        {
                            "path": c.scenario.path,
                            "sha256": c.scenario.sha256,
                            "canonical_sha256": scenario_hash(c.scenario),
                        }
                        for c in results
                    ],
                    "controllers": files,
                    "baseline": results[0].baseline,
                    "common_random_numbers": "same seed and run indices for every controller",
                },
            ),
        )
