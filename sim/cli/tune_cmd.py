"""``rollrig tune FILE``: PID gains that stay good across camera degradations.

Exit status: 0 when a feasible candidate was found and the folder written;
2 for a mistake in the file or the options, and when no candidate meets the
constraints (one line naming the closest candidate and what it misses;
nothing is written); 130 for a second Ctrl-C (the first one ends the search
and keeps the best so far).
"""

from __future__ import annotations

import argparse
from pathlib import Path

from rollrig.sim.cli.common import (
    add_force_option,
    add_format_option,
    print_tables,
    say_written,
    status_stream,
)
from rollrig.sim.errors import UserInputError

__all__ = ["add_parser", "run", "NO_FEASIBLE_EXIT"]

#: Exit status when no candidate meets the constraints (the same as any user-input problem).
NO_FEASIBLE_EXIT = 2


def add_parser(sub) -> None:
    p = sub.add_parser(
        "tune",
        help="search PID gains that stay good across camera degradations",
        description="Search the scenario's PID gains with differential evolution over a set of camera "
        "degradations (the [tune] section: nominal, corners, Latin hypercube; several seeds each), "
        "subject to margin, bank-limit and pass-rate constraints; validate on a held-back set and "
        "write the tuned scenario, a before/after table and plots.",
    )
    p.add_argument("scenario", metavar="FILE", help="scenario file (TOML) with an optional [tune] section")
    p.add_argument(
        "--generations", type=int, help="generations after the initial population ([tune] generations)"
    )
    p.add_argument("--population", type=int, help="candidates per generation, ≥ 5 ([tune] population)")
    p.add_argument("--seeds", type=int, help="seeds per degradation case ([tune] seeds)")
    p.add_argument("--seed", type=int, help="search seed ([tune] seed)")
    p.add_argument("--lhs-cases", type=int, help="Latin-hypercube cases ([tune] lhs_cases)")
    p.add_argument(
        "--aggregate", choices=("mean", "worst", "cvar"), help="how cases combine ([tune] aggregate)"
    )
    p.add_argument("--no-sensitivity", action="store_true", help="skip the per-fault sensitivity table")
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    add_format_option(p)
    p.add_argument(
        "--out", type=Path, metavar="DIR", help="output folder (default rollrig-runs/tune-<name>-<time>)"
    )
    add_force_option(p)
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    from rollrig.sim.report.outdir import check_out_dir, default_out_dir, manifest, output_folder
    from rollrig.sim.report.tune_progress import tune_progress
    from rollrig.sim.report.tune_report import build_report, write_folder
    from rollrig.sim.tuning.search import prepare, tune, validate
    from rollrig.sim.tuning.spec import load_tuning, with_overrides

    sc, spec, text = load_tuning(args.scenario)
    spec = with_overrides(
        spec,
        generations=args.generations,
        population=args.population,
        seeds=args.seeds,
        seed=args.seed,
        lhs_cases=args.lhs_cases,
        aggregate=args.aggregate,
    )
    out = args.out if args.out is not None else default_out_dir(f"tune-{Path(args.scenario).stem}")
    check_out_dir(out, args.force, protect=[args.scenario])
    problem = prepare(sc, spec)
    with tune_progress(spec.generations, enabled=not args.quiet) as show:
        result = tune(problem, on_generation=show)
    if result.interrupted:
        print("interrupted: keeping the best candidate so far", file=status_stream(args.format))
    if not result.feasible:
        gains = ", ".join(f"{n} = {g:.4g}" for n, g in zip(problem.names, result.best, strict=True))
        from rollrig.sim.tuning.search import assess

        a, _ = assess(problem, result.best[None, :])
        misses = ", ".join(f"{k} by {v[0]:.3g}" for k, v in a.parts.items() if v[0] > 0)
        raise UserInputError(
            f"{args.scenario}: [tune.constraints] no candidate met the constraints; closest: {gains} "
            f"(misses {misses}); allowed: looser constraints, a wider search box or a larger budget"
        )
    validation = validate(result)
    report = build_report(result, validation, sensitivity=not args.no_sensitivity)
    print_tables(report.tables, args.format)
    info = manifest(
        scenario_path=sc.path,
        scenario=sc,
        scenario_sha256=sc.sha256,
        seed=spec.seed,
        runs=range(spec.seeds),
        command_line=getattr(args, "command_line", None),
        extra={
            "tuned_gains": dict(zip(problem.names, result.best.tolist(), strict=True)),
            "start_gains": dict(zip(problem.names, problem.start.tolist(), strict=True)),
            "interrupted": result.interrupted,
        },
    )
    with output_folder(out, force=args.force, protect=[args.scenario]) as tmp:
        write_folder(tmp, result, validation, report, text, info)
    say_written(out, args.format)
    return 0
