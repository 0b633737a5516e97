"""``rollrig check FILE...``: validate scenarios without running them."""

from __future__ import annotations

import argparse
import math
import sys

__all__ = ["add_parser", "run"]


def add_parser(sub) -> None:
    p = sub.add_parser(
        "check",
        help="validate scenario files without running them",
        description="Validate scenario files: every value, what `rollrig run` would refuse, and the "
        "memory and time the run needs. Every file is checked; exit 2 if any failed.",
    )
    p.add_argument("scenarios", metavar="FILE", nargs="+", help="scenario files (TOML)")
    p.set_defaults(func=run)


def _check_one(path: str) -> str:
    from rollrig.sim.cli.common import check_batch_resources
    from rollrig.sim.resources import fmt_bytes
    from rollrig.sim.scenario import load_scenario

    sc = load_scenario(path)
    est = check_batch_resources(sc, sc.run.runs, where=path)
    cam = sc.camera
    return (
        f"{path}: ok — {sc.title}; {sc.plant.name}, {sc.run.runs} run(s) of {sc.run.duration_s:g} s, "
        f"camera {cam.frame_rate_hz:g} Hz, latency {cam.latency_s * 1000:g} ms, "
        f"controller {sc.controller.kind} at {sc.controller.rate_hz:g} Hz, "
        f"{len(sc.disturbances)} disturbance source(s), bank limit "
        f"{math.degrees(sc.criteria.bank_limit_rad):g}°; needs about {fmt_bytes(est.bytes)}, "
        f"{est.seconds:.2g} s"
    )


def run(args: argparse.Namespace) -> int:
    from rollrig.sim.errors import UserInputError, line

    failed = 0
    for path in args.scenarios:
        try:
            print(_check_one(path))
        except UserInputError as exc:
            failed += 1
            print(line(f"rollrig: error: {exc}"), file=sys.stderr)
    if failed and len(args.scenarios) > 1:
        print(f"rollrig: {failed} of {len(args.scenarios)} files failed", file=sys.stderr)
    return 2 if failed else 0
