"""``rollrig turbulence``: check simulated Dryden turbulence against the spec."""

from __future__ import annotations

import argparse
from pathlib import Path

from rollrig.sim.cli.common import add_force_option, add_format_option, check_seed, print_tables, say_written
from rollrig.sim.errors import UserInputError

__all__ = ["add_parser", "run"]

_FLAGS = ("airspeed_mps", "altitude_ft", "span_m")


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
    p.add_argument("--intensity", choices=("light", "moderate", "severe"), default=None)
    p.add_argument("--span-m", type=float, help="wing span (m), without FILE")
    p.add_argument("--duration-s", type=float, default=600.0, help="length of each record (default 600)")
    p.add_argument("--records", type=int, default=8, help="independent records (default 8)")
    p.add_argument("--base-step-s", type=float, default=None, help="time step, s (default 0.01)")
    p.add_argument("--seed", type=int, default=1, help="seed, 0 … 2^63 − 1 (default 1)")
    p.add_argument("--out", type=Path, metavar="DIR", help="folder for turbulence_psd.png and the table")
    add_force_option(p, help="replace an output folder rollrig wrote")
    add_format_option(p)
    p.set_defaults(func=run)


def _scenario_altitude_ft(path: str) -> float | None:
    import tomllib

    try:
        doc = tomllib.loads(Path(path).read_text(encoding="utf-8-sig"))
        turb = doc["disturbance"]["turbulence"]
        if "altitude_ft" in turb:
            return float(turb["altitude_ft"])
        return float(turb["altitude_m"]) / 0.3048
    except (OSError, ValueError, KeyError, TypeError):
        return None


def _params(args):
    """Dryden parameters, time step and altitude (ft) from FILE or from the options."""
    from rollrig.sim.turbulence import FT_M, INTENSITY_W20_MPS, DrydenTurbulence, dryden_params

    if args.scenario:
        given = [f"--{f.replace('_', '-')}" for f in (*_FLAGS, "intensity") if getattr(args, f) is not None]
        if args.base_step_s is not None:
            given.append("--base-step-s")
        if given:
            raise UserInputError(
                f"{args.scenario}: {', '.join(given)} would conflict with the scenario's own values; "
                "allowed: a scenario FILE, or --airspeed-mps/--altitude-ft/--span-m without one"
            )
        from rollrig.sim.scenario import load_scenario

        sc = load_scenario(args.scenario)
        for src in sc.disturbances:
            if isinstance(src, DrydenTurbulence):
                return src.params, sc.run.base_step_s, _scenario_altitude_ft(args.scenario)
        raise UserInputError(
            f"{args.scenario}: [disturbance.turbulence] is missing; "
            "allowed: a scenario with turbulence, or --airspeed-mps/--altitude-ft/--span-m"
        )
    missing = [f"--{f.replace('_', '-')}" for f in _FLAGS if getattr(args, f) is None]
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
    w20 = INTENSITY_W20_MPS[args.intensity or "moderate"]
    params = dryden_params(args.altitude_ft * FT_M, w20, args.airspeed_mps, args.span_m)
    return params, (0.01 if args.base_step_s is None else args.base_step_s), args.altitude_ft


def run(args: argparse.Namespace) -> int:
    from rollrig.sim.analysis.turbulence_check import BYTES_PER_RECORD_STEP, check_turbulence
    from rollrig.sim.report.table import render
    from rollrig.sim.report.turbulence_report import plot_turbulence, turbulence_table
    from rollrig.sim.resources import BatchEstimate, check_fits

    if not 10.0 <= args.duration_s <= 36_000.0:
        raise UserInputError(f"--duration-s {args.duration_s:g}: allowed: 10 ≤ value ≤ 36000")
    if not 1 <= args.records <= 1000:
        raise UserInputError(f"--records {args.records}: allowed: 1 ≤ value ≤ 1000")
    if args.base_step_s is not None and not 1e-4 <= args.base_step_s <= 0.1:
        raise UserInputError(f"--base-step-s {args.base_step_s:g}: allowed: 0.0001 ≤ value ≤ 0.1")
    check_seed(args.seed)
    params, dt, altitude_ft = _params(args)
    steps = int(round(args.duration_s / dt))
    need = float(steps) * args.records * BYTES_PER_RECORD_STEP
    check_fits(
        BatchEstimate(args.records, steps, need, 0.0),
        where="rollrig turbulence",
        change="--records, --duration-s or a longer --base-step-s",
    )
    protect = [args.scenario] if args.scenario else []
    if args.out is not None:
        from rollrig.sim.report.outdir import check_out_dir

        check_out_dir(args.out, args.force, protect=protect)
    chk = check_turbulence(params, dt=dt, duration_s=args.duration_s, runs=args.records, seed=args.seed)
    table = turbulence_table(chk, altitude_ft)
    print_tables([table], args.format)
    if args.out is not None:
        from rollrig.sim.report.outdir import manifest, output_folder, write_json

        with output_folder(args.out, force=args.force, protect=protect) as tmp:
            plot_turbulence(chk, tmp / "turbulence_psd.png", altitude_ft)
            (tmp / "turbulence.md").write_text(render([table], "md"))
            write_json(tmp / "turbulence.json", table.records)
            write_json(
                tmp / "manifest.json",
                manifest(
                    scenario_path=args.scenario or "",
                    scenario_sha256="",
                    seed=args.seed,
                    runs=range(args.records),
                    extra={"command": "turbulence"},
                ),
            )
        say_written(args.out, args.format)
    return 0
