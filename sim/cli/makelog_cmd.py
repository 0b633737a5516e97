"""``rollrig make-log FILE``: record what our camera model gives for a scenario, as a sensor log."""

from __future__ import annotations

import argparse
from pathlib import Path

from rollrig.sim.errors import UserInputError

__all__ = ["add_parser", "run"]


def add_parser(sub) -> None:
    p = sub.add_parser(
        "make-log",
        help="write a synthetic sensor log from a scenario (for fit-sensor)",
        description="Simulate one run of a scenario and write every camera frame "
        "(time, reference bank, reading, valid) as CSV.",
    )
    p.add_argument("scenario", metavar="FILE", help="scenario file (TOML)")
    p.add_argument("-o", "--out", type=Path, metavar="LOG.csv", help="log file (default <scenario>.csv)")
    p.add_argument(
        "--run", type=int, default=0, metavar="N", help="which run of the Monte Carlo set (default 0)"
    )
    p.add_argument("--seed", type=int, help="run seed (overrides [run] seed)")
    p.add_argument("--force", action="store_true", help="replace an existing log file")
    p.add_argument("--allow-code", action="store_true", help="allow a user controller class (runs your code)")
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    from rollrig.sim.scenario import load_scenario
    from rollrig.sim.sensor_log import make_log, write_log

    sc = load_scenario(args.scenario)
    out = args.out or Path(args.scenario).with_suffix(".csv")
    if out.exists() and not args.force:
        raise UserInputError(f"{out}: log file exists; allowed: a new file, or --force to replace it")
    if args.run < 0:
        raise UserInputError(f"--run {args.run}: allowed: N ≥ 0")
    if args.seed is not None and args.seed < 0:
        raise UserInputError(f"--seed {args.seed}: allowed: seed ≥ 0")
    log = make_log(sc, run=args.run, seed=args.seed, allow_code=args.allow_code)
    write_log(out, log)
    lost = int((~log.valid).sum())
    print(
        f"wrote {out}: {log.t.size} frames over {log.t[-1] - log.t[0]:.1f} s, {lost} invalid "
        f"({100 * lost / log.t.size:.1f} %)"
    )
    return 0
