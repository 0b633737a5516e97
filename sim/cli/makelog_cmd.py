"""``rollrig make-log FILE``: record what our camera model gives for a scenario, as a sensor log."""

from __future__ import annotations

import argparse
from pathlib import Path

from rollrig.sim.cli.common import MAX_SEED, add_force_option, check_seed
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
    p.add_argument("--seed", type=int, help="run seed, 0 … 2^63 − 1 (overrides [run] seed)")
    add_force_option(p, help="replace an existing log file")
    p.add_argument("--allow-code", action="store_true", help="allow a user controller class (runs your code)")
    p.set_defaults(func=run)


def _check_log_path(out: Path, force: bool, scenario: str) -> None:
    """One line, before simulating, if the log cannot be written where asked."""
    import os
    import tempfile

    if out.is_dir():
        raise UserInputError(f"{out}: is a folder; allowed: a file name (e.g. {out / 'log.csv'})")
    if out.exists() and not force:
        raise UserInputError(f"{out}: log file exists; allowed: a new file, or --force to replace it")
    try:
        if out.resolve() == Path(scenario).resolve():
            raise UserInputError(f"{out}: is the scenario file itself; allowed: another file name")
    except OSError:
        pass
    anc = out.parent
    while not anc.exists() and anc != anc.parent:
        anc = anc.parent
    try:
        if not anc.is_dir():
            raise NotADirectoryError(20, "not a folder")
        fd, probe = tempfile.mkstemp(prefix=".rollrig-probe-", dir=anc)
        os.close(fd)
        os.unlink(probe)
    except OSError as exc:
        raise UserInputError(
            f"{out}: cannot write there ({anc}: {exc.strerror}); allowed: a writable folder"
        ) from None


def run(args: argparse.Namespace) -> int:
    from rollrig.sim.scenario import load_scenario
    from rollrig.sim.sensor_log import make_log, write_log

    if not 0 <= args.run <= MAX_SEED:
        raise UserInputError(f"--run {args.run}: allowed: 0 ≤ N ≤ 2^63 − 1")
    check_seed(args.seed)
    sc = load_scenario(args.scenario)
    out = args.out or Path(args.scenario).with_suffix(".csv")
    _check_log_path(out, args.force, args.scenario)
    log = make_log(sc, run=args.run, seed=args.seed, allow_code=args.allow_code)
    try:
        write_log(out, log)
    except OSError as exc:
        raise UserInputError(
            f"{out}: could not write the log ({exc.strerror}); nothing was written"
        ) from None
    lost = int((~log.valid).sum())
    print(
        f"wrote {out}: {log.t.size} frames over {log.t[-1] - log.t[0]:.1f} s, {lost} invalid "
        f"({100 * lost / log.t.size:.1f} %)"
    )
    return 0
