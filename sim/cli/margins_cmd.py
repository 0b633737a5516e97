"""``rollrig margins FILE``: stability margins and handling-quality ratings.

Prints the analytic margins (PID loops: frequency response with the camera's
delay, exact) beside the empirical ones (any controller: simulation), and the
MIL-F-8785C ratings of the airframe and the closed loop. python-control is
imported only when this command runs.
"""

from __future__ import annotations

import argparse
import hashlib
from pathlib import Path

from rollrig.sim.cli.common import (
    add_force_option,
    add_format_option,
    print_tables,
    say_written,
    status_stream,
)
from rollrig.sim.errors import UserInputError

__all__ = ["add_parser", "run"]

CLASSES = ("I", "II", "III", "IV", "II-C", "II-L")
CATEGORIES = ("A", "B", "C")


def add_parser(sub) -> None:
    p = sub.add_parser(
        "margins",
        help="stability margins (analytic and empirical) and handling qualities",
        description=(
            "Gain, phase, delay and disk margins of the loop broken at the aileron command "
            "(analytic, PID only), empirical gain/delay/frame-loss margins by simulation "
            "(any controller), and MIL-F-8785C ratings of the airframe and the closed loop."
        ),
    )
    p.add_argument("scenario", metavar="FILE", nargs="?", help="scenario file (TOML)")
    p.add_argument(
        "--frequency-response",
        metavar="CSV",
        type=Path,
        help=(
            "analyse a measured open-loop response L(jω) instead of a scenario: CSV with "
            "omega_rad_s or frequency_hz, and magnitude_db + phase_deg or real_rad_per_rad + imag_rad_per_rad"
        ),
    )
    p.add_argument(
        "--class",
        dest="aircraft_class",
        type=str.upper,
        choices=CLASSES,
        default="I",
        help="MIL-F-8785C aircraft class (default I: small light airplanes)",
    )
    p.add_argument(
        "--category",
        type=str.upper,
        choices=CATEGORIES,
        default="B",
        help="flight-phase category (default B: cruise, gradual manoeuvres)",
    )
    add_format_option(p, help="how to print the tables (default: table)")
    p.add_argument(
        "--plot", action="store_true", help="write Bode/Nichols/Nyquist plots (PID) into an output folder"
    )
    p.add_argument(
        "--out",
        type=Path,
        metavar="DIR",
        help="output folder (default with --plot: rollrig-runs/<name>-margins-<time>)",
    )
    add_force_option(p)
    p.add_argument("--no-empirical", action="store_true", help="skip the simulated margins")
    p.add_argument("--seed", type=int, default=0, help="seed of the frame-loss draws (default 0)")
    p.add_argument(
        "--allow-code",
        action="store_true",
        help="allow the scenario to load a user controller class (runs your code)",
    )
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    from rollrig.sim.report.outdir import check_out_dir, default_out_dir, manifest, output_folder, write_json
    from rollrig.sim.report.table import render
    from rollrig.sim.scenario import load_scenario

    if (args.scenario is None) == (args.frequency_response is None):
        raise UserInputError(
            "rollrig margins: give a scenario FILE or --frequency-response CSV (one of them)"
        )
    if args.frequency_response is not None:
        return _run_frequency_response(args)
    sc = load_scenario(args.scenario)
    if args.seed < 0:
        raise UserInputError(f"--seed {args.seed}: allowed: seed ≥ 0")
    out_dir = None
    if args.plot or args.out is not None:
        out_dir = args.out or default_out_dir(f"{Path(sc.path).stem}-margins")
        check_out_dir(out_dir, args.force)

    from rollrig.sim.analysis.empirical import EmpiricalSettings
    from rollrig.sim.analysis.margins_report import margins_report
    from rollrig.sim.report.margin_plots import write_margin_plots
    from rollrig.sim.report.margins_tables import margins_tables

    try:
        rep = margins_report(
            sc,
            aircraft_class=args.aircraft_class,
            category=args.category,
            empirical=not args.no_empirical,
            settings=EmpiricalSettings(seed=args.seed),
            allow_code=args.allow_code,
        )
    except UserInputError:
        raise
    except ValueError as exc:  # class/category combination refused by the tables
        raise UserInputError(f"--class {args.aircraft_class} --category {args.category}: {exc}") from None
    tables = margins_tables(rep)
    print_tables(tables, args.format)

    if out_dir is not None:
        with output_folder(out_dir, force=args.force) as tmp:
            write_json(
                tmp / "manifest.json",
                manifest(
                    scenario=sc,
                    scenario_path=sc.path,
                    scenario_sha256=sc.sha256,
                    seed=args.seed,
                    runs=[0],
                    extra={
                        "title": sc.title,
                        "command": "margins",
                        "class": rep.aircraft_class,
                        "category": rep.category,
                    },
                ),
            )
            write_json(
                tmp / "margins.json",
                [{"title": t.title, "rows": t.records, "notes": t.notes} for t in tables],
            )
            (tmp / "margins.md").write_text(render(tables, "md"))
            written = write_margin_plots(rep, tmp) if args.plot else []
        if args.plot and not written:
            print(
                "no linear model for this controller: no Bode/Nichols/Nyquist plot",
                file=status_stream(args.format),
            )
        say_written(out_dir, args.format)
    return 0


def _run_frequency_response(args: argparse.Namespace) -> int:
    """``rollrig margins --frequency-response CSV``: the margins report of measured data."""
    from rollrig.sim.report.outdir import check_out_dir, default_out_dir, manifest, output_folder, write_json
    from rollrig.sim.report.table import render

    path = args.frequency_response
    out_dir = None
    if args.plot or args.out is not None:
        out_dir = args.out or default_out_dir(f"{path.stem}-margins")
        check_out_dir(out_dir, args.force)
    from rollrig.sim.analysis.frequency_response_file import load_frequency_response
    from rollrig.sim.analysis.linear_loop import margins
    from rollrig.sim.report.margins_tables import loop_tables

    data = load_frequency_response(path)
    result = margins(data)
    tables = loop_tables(result, f"{path.name} (measured open loop)")
    print_tables(tables, args.format)
    if out_dir is not None:
        from rollrig.sim.report.margin_plots import plot_margins

        with output_folder(out_dir, force=args.force) as tmp:
            write_json(
                tmp / "manifest.json",
                manifest(
                    scenario_path=str(path),
                    scenario_sha256=hashlib.sha256(path.read_bytes()).hexdigest(),
                    seed=0,
                    runs=[],
                    extra={"command": "margins", "frequency_response": str(path)},
                ),
            )
            write_json(
                tmp / "margins.json",
                [{"title": t.title, "rows": t.records, "notes": t.notes} for t in tables],
            )
            (tmp / "margins.md").write_text(render(tables, "md"))
            if args.plot:
                plot_margins(data, tmp / "margins.png", result=result, title=path.name)
        say_written(out_dir, args.format)
    return 0
