"""``rollrig fit-sensor LOG.csv``: fit the camera-reader model to a recorded log."""

from __future__ import annotations

import argparse
import hashlib
from pathlib import Path

from rollrig.sim.cli.common import add_force_option, add_format_option, print_tables, say_written

__all__ = ["add_parser", "run"]


def add_parser(sub) -> None:
    p = sub.add_parser(
        "fit-sensor",
        help="fit the camera model to a recorded sensor log",
        description="Estimate latency, frame timing, bias, scale, quantisation, noise, "
        "wander, outliers and losses from a CSV log; write a [sensor] section.",
    )
    p.add_argument("log", metavar="LOG.csv", help="CSV log with a header row")
    p.add_argument("--time-col", default="t_s", help="time column, seconds (default t_s)")
    p.add_argument(
        "--reference-col", default="reference_deg", help="trusted bank, degrees (default reference_deg)"
    )
    p.add_argument(
        "--reading-col", default="reading_deg", help="camera reading, degrees (default reading_deg)"
    )
    p.add_argument(
        "--valid-col",
        default=None,
        help="validity column, 1/0 (default: 'valid' if present, else every reading is valid)",
    )
    p.add_argument("--max-latency", type=float, default=2.0, metavar="S", help="longest latency searched, s")
    p.add_argument(
        "--out", type=Path, metavar="DIR", help="output folder (default rollrig-runs/fit-<log>-<time>)"
    )
    add_force_option(p)
    p.add_argument("--no-files", action="store_true", help="print the table only, write no folder")
    add_format_option(p, help="how to print the estimates (default: table)")
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    from rollrig.sensors.fit import LogProblem, fit_sensor
    from rollrig.sim.errors import LogFileError, UserInputError
    from rollrig.sim.report.fit_report import fit_tables, plot_fit, sensor_toml
    from rollrig.sim.report.outdir import check_out_dir, default_out_dir, manifest, output_folder, write_json
    from rollrig.sim.report.table import render
    from rollrig.sim.sensor_log import read_log

    if not (0.0 < args.max_latency <= 10.0):
        raise UserInputError(f"--max-latency {args.max_latency}: allowed: 0 < S ≤ 10")
    log = read_log(
        args.log,
        time_col=args.time_col,
        reference_col=args.reference_col,
        reading_col=args.reading_col,
        valid_col=args.valid_col or "valid",
        valid_required=args.valid_col is not None,
    )
    out_dir = None
    if not args.no_files:
        out_dir = args.out or default_out_dir("fit-" + Path(args.log).stem)
        check_out_dir(out_dir, args.force, protect=[args.log])
    try:
        fit = fit_sensor(log.t, log.reference, log.reading, log.valid, max_latency_s=args.max_latency)
    except LogProblem as exc:
        raise LogFileError(f"{args.log}: {exc}") from None
    tables = fit_tables(fit, args.log)
    print_tables(tables, args.format)
    snippet = sensor_toml(fit, Path(args.log).name)
    if args.format == "table":
        print("\n" + snippet)
    if out_dir is not None:
        raw = Path(args.log).read_bytes()
        with output_folder(out_dir, force=args.force, protect=[args.log]) as tmp:
            (tmp / "sensor.toml").write_text(snippet)
            (tmp / "estimates.md").write_text(render(tables, "md"))
            (tmp / "estimates.json").write_text(render(tables, "json"))
            plot_fit(fit, tmp / "fit.png", f"Sensor fit: {Path(args.log).name}")
            write_json(
                tmp / "manifest.json",
                manifest(
                    scenario_path=str(args.log),
                    scenario_sha256=hashlib.sha256(raw).hexdigest(),
                    seed=None,
                    runs=[],
                    extra={"command": "fit-sensor", "input": "sensor log"},
                ),
            )
        say_written(out_dir, args.format)
    return 0
