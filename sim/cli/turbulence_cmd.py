"""``rollrig turbulence``: check simulated Dryden turbulence against the spec."""

from __future__ import annotations

import argparse
from pathlib import Path

from rollrig.sim.cli.common import print_tables, say_written
from rollrig.sim.errors import UserInputError

__all__ = ["add_parser", "run"]


def add_parser(sub) -> None:
    p = sub.add_parser(
        "turbulence",
        help="compare simulated Dryden turbulence with its specified σ and PSD",
        description="Simulate the Dryden gusts for a scenario's [disturbance.turbulence] (or for the "
        "speed, altitude and intensity given here) and compare sample σ and Welch PSD "
        "with MIL-F-8785C.",
    )
    p.add_argument("scenario", metavar="FILE", nargs="?", help="scenario with [disturbance.turbulence]")
    p.add_argument("--airspeed-mps", type=float, help="true airspeed (m/s), without FILE")
    p.add_argument("--altitude-ft", type=float, help="altitude above ground (ft), without FILE")
    p.add_argument("--intensity", choices=("light", "moderate", "severe"), default="moderate")
    p.add_argument("--span-m", type=float, help="wing span (m), without FILE")
    p.add_argument("--duration-s", type=float, default=600.0, help="length of each record (default 600)")
    p.add_argument("--records", type=int, default=8, help="independent records (default 8)")
    p.add_argument("--base-step-s", type=float, default=0.01)
    p.add_argument("--seed", type=int, default=1)
    p.add_argument("--out", type=Path, metavar="DIR", help="folder for turbulence_psd.png and the table")
    p.add_argument("--force", action="store_true", help="replace an existing output folder")
    p.add_argument("--format", choices=("table", "csv", "json", "md"), default="table")
    p.set_defaults(func=run)


def _params(args):
    from rollrig.sim.turbulence import FT_M, INTENSITY_W20_MPS, DrydenTurbulence, dryden_params

    if args.scenario:
        from rollrig.sim.scenario import load_scenario

        sc = load_scenario(args.scenario)
        for src in sc.disturbances:
            if isinstance(src, DrydenTurbulence):
                return src.params, sc.run.base_step_s
        raise UserInputError(
            f"{args.scenario}: [disturbance.turbulence] is missing; "
            "allowed: a scenario with turbulence, or --airspeed-mps/--altitude-ft/--span-m"
        )
    missing = [
        o
        for o, v in (
            ("--airspeed-mps", args.airspeed_mps),
            ("--altitude-ft", args.altitude_ft),
            ("--span-m", args.span_m),
        )
        if v is None
    ]
    if missing:
        raise UserInputError(f"rollrig turbulence: {', '.join(missing)} needed without a scenario FILE")
    checks = (
        ("--airspeed-mps", args.airspeed_mps, 1.0, 300.0),
        ("--altitude-ft", args.altitude_ft, 0.0, 100_000.0),
        ("--span-m", args.span_m, 0.1, 100.0),
    )
    for name, v, lo, hi in checks:
        if not lo <= v <= hi:
            raise UserInputError(f"rollrig turbulence: {name} {v:g}: allowed: {lo:g} ≤ value ≤ {hi:g}")
    return dryden_params(
        args.altitude_ft * FT_M, INTENSITY_W20_MPS[args.intensity], args.airspeed_mps, args.span_m
    ), args.base_step_s


def run(args: argparse.Namespace) -> int:
    from rollrig.sim.report.table import render
    from rollrig.sim.report.turbulence_check import check_turbulence, plot_turbulence, turbulence_table

    if not 10.0 <= args.duration_s <= 36_000.0:
        raise UserInputError(f"--duration-s {args.duration_s:g}: allowed: 10 ≤ value ≤ 36000")
    if not 1 <= args.records <= 1000:
        raise UserInputError(f"--records {args.records}: allowed: 1 ≤ value ≤ 1000")
    if not 1e-4 <= args.base_step_s <= 0.1:
        raise UserInputError(f"--base-step-s {args.base_step_s:g}: allowed: 0.0001 ≤ value ≤ 0.1")
    params, dt = _params(args)
    if args.out is not None:
        from rollrig.sim.report.outdir import check_out_dir

        check_out_dir(args.out, args.force)
    chk = check_turbulence(params, dt=dt, duration_s=args.duration_s, runs=args.records, seed=args.seed)
    table = turbulence_table(chk)
    print_tables([table], args.format)
    if args.out is not None:
        from rollrig.sim.report.outdir import manifest, output_folder, write_json

        with output_folder(args.out, force=args.force) as tmp:
            plot_turbulence(chk, tmp / "turbulence_psd.png")
            (tmp / "turbulence.md").write_text(render([table], "md"))
            write_json(
                tmp / "manifest.json",
                manifest(
                    scenario_path=args.scenario or "",
                    scenario_sha256="",
                    seed=args.seed,
                    runs=range(args.records),
                ),
            )
        say_written(args.out, args.format)
    return 0
