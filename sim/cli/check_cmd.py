"""``rollrig check FILE``: validate a scenario without running it."""

from __future__ import annotations

import argparse
import math

__all__ = ["add_parser", "run"]


def add_parser(sub) -> None:
    p = sub.add_parser(
        "check",
        help="validate scenario files without running them",
        description="Validate scenario files; exit 2 on the first mistake.",
    )
    p.add_argument("scenarios", metavar="FILE", nargs="+", help="scenario files (TOML)")
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    from rollrig.sim.scenario import load_scenario

    for path in args.scenarios:
        sc = load_scenario(path)
        cam = sc.camera
        print(
            f"{path}: ok — {sc.title}; {sc.plant.name}, {sc.run.runs} run(s) of {sc.run.duration_s:g} s, "
            f"camera {cam.frame_rate_hz:g} Hz, latency {cam.latency_s * 1000:g} ms, "
            f"controller {sc.controller.kind} at {sc.controller.rate_hz:g} Hz, "
            f"{len(sc.disturbances)} disturbance source(s), bank limit "
            f"{math.degrees(sc.criteria.bank_limit_rad):g}°"
        )
    return 0
