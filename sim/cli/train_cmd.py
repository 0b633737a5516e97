"""``rollrig train FILE --algo ars|ppo|sac``: train a policy on a scenario's loop, judge it, write it."""

from __future__ import annotations

import argparse
from pathlib import Path

from rollrig.sim.cli.common import (
    MAX_SEED,
    add_force_option,
    add_format_option,
    print_tables,
    say_written,
    status_stream,
)
from rollrig.sim.errors import UserInputError

__all__ = ["add_parser", "run"]

ALGOS = ("ars", "ppo", "sac")


def add_parser(sub) -> None:
    p = sub.add_parser(
        "train",
        help="train a learned policy on a scenario and judge it on the scenario's criteria",
        description=(
            "Train a policy (ARS in numpy; PPO or SAC with the rl extra) on the scenario's closed loop, "
            "judge it on the scenario's Monte Carlo runs and criteria, and write the policy file "
            "(arrays and JSON) with a scenario that flies it."
        ),
    )
    p.add_argument("scenario", metavar="FILE", help="scenario file (TOML)")
    p.add_argument("--algo", choices=ALGOS, default="ars", help="training method (default: ars)")
    p.add_argument("--iterations", type=int, default=40, help="ARS iterations (default 40)")
    p.add_argument("--steps", type=int, default=50_000, help="PPO/SAC environment steps (default 50000)")
    p.add_argument("--directions", type=int, default=8, help="ARS directions per iteration (default 8)")
    p.add_argument("--top", type=int, default=4, help="ARS best directions kept (default 4)")
    p.add_argument("--step-size", type=float, default=0.02, help="ARS step size α (default 0.02)")
    p.add_argument("--noise", type=float, default=0.03, help="ARS exploration noise ν (default 0.03)")
    p.add_argument(
        "--hidden",
        default="",
        metavar="W[,W]",
        help="hidden layer widths, e.g. 16 or 32,32 (default: linear)",
    )
    p.add_argument("--history", type=int, default=3, help="ticks of camera readings observed (default 3)")
    p.add_argument("--seed", type=int, default=0, help="training seed (default 0)")
    p.add_argument(
        "--randomize",
        action="append",
        default=[],
        metavar="KEY=LO:HI",
        help="domain randomisation range, e.g. latency_s=0.02:0.1 (repeatable)",
    )
    p.add_argument(
        "--eval-every", type=int, default=5, help="judge the policy every N iterations (default 5)"
    )
    p.add_argument("--eval-runs", type=int, help="Monte Carlo runs used while training (default: all)")
    p.add_argument(
        "--cpu-s",
        type=float,
        help="stop after this much CPU time (s), at the next iteration or rollout start",
    )
    p.add_argument(
        "--resume",
        type=Path,
        metavar="CHECKPOINT",
        help="continue a session (same --algo and options) from its checkpoint",
    )
    p.add_argument(
        "--out", type=Path, metavar="DIR", help="output folder (default rollrig-runs/train-<name>-<time>)"
    )
    add_force_option(p)
    add_format_option(p)
    p.set_defaults(func=run)


def _ranges(items: list[str]) -> dict:
    out = {}
    for item in items:
        key, _, span = item.partition("=")
        lo, _, hi = span.partition(":")
        try:
            out[key.strip()] = (float(lo), float(hi if hi else lo))
        except ValueError:
            raise UserInputError(f"--randomize {item!r}: allowed: KEY=LOW:HIGH with numbers") from None
    return out


def _hidden(text: str) -> tuple[int, ...]:
    try:
        widths = tuple(int(w) for w in text.split(",") if w.strip())
    except ValueError:
        raise UserInputError(
            f"--hidden {text!r}: allowed: comma-separated widths such as 16 or 32,32"
        ) from None
    if len(widths) > 4 or any(not 1 <= w <= 256 for w in widths):
        raise UserInputError(f"--hidden {text!r}: allowed: up to 4 layers of 1..256")
    return widths


def _check(args) -> None:
    checks = [
        ("--iterations", args.iterations, 1, 100_000),
        ("--steps", args.steps, 64, 10_000_000),
        ("--directions", args.directions, 1, 512),
        ("--top", args.top, 1, args.directions),
        ("--history", args.history, 1, 64),
        ("--eval-every", args.eval_every, 1, 100_000),
        ("--seed", args.seed, 0, MAX_SEED),
    ]
    for name, v, lo, hi in checks:
        if not lo <= v <= hi:
            raise UserInputError(f"{name} {v}: allowed: {lo} ≤ value ≤ {hi}")
    for name, v in (("--step-size", args.step_size), ("--noise", args.noise), ("--cpu-s", args.cpu_s)):
        if v is not None and not v > 0:
            raise UserInputError(f"{name} {v}: allowed: a number > 0")
    if args.eval_runs is not None and args.eval_runs < 1:
        raise UserInputError(f"--eval-runs {args.eval_runs}: allowed: ≥ 1")


def run(args: argparse.Namespace) -> int:
    try:
        return _train(args)
    except KeyboardInterrupt as exc:  # a signal outside the training loop (start-up or wrap-up)
        import signal
        import sys

        ckpt = getattr(args, "checkpoint_file", None)
        if ckpt is None or not ckpt.exists():
            raise
        signum = getattr(exc, "signum", signal.SIGINT)
        print(
            f"rollrig: stopped by {signal.Signals(signum).name}; no output folder was written; "
            f"checkpoint kept at {ckpt} (continue with --resume)",
            file=sys.stderr,
        )
        return 128 + signum


def _train(args: argparse.Namespace) -> int:
    import sys

    from rollrig.sim.envs.episode import check_ranges
    from rollrig.sim.report.outdir import check_out_dir, default_out_dir
    from rollrig.sim.scenario import load_scenario
    from rollrig.sim.training.runs import checkpoint_path

    _check(args)
    sc = load_scenario(args.scenario)
    ranges = check_ranges(_ranges(args.randomize), "--randomize")
    hidden = _hidden(args.hidden)
    out_dir = args.out or default_out_dir(f"train-{Path(sc.path).stem}")
    check_out_dir(out_dir, args.force)
    args.checkpoint_file = Path(args.resume) if args.resume is not None else checkpoint_path(out_dir)
    stream = status_stream(args.format)

    if args.algo == "ars":
        from rollrig.sim.training.runs import train_ars

        result, meta = train_ars(sc, args, ranges, hidden, out_dir, stream)
    else:
        from rollrig.sim.training.runs import train_sb3

        result, meta = train_sb3(sc, args, ranges, hidden, out_dir, stream)
    if result.interrupted:
        where = (
            f"; checkpoint kept at {meta['checkpoint']} (continue with --resume)"
            if meta.get("checkpoint")
            else ""
        )
        done = result.history[-1]["iteration"] if result.history else 0
        if args.algo == "ars":
            print(f"rollrig: interrupted after iteration {done}{where}", file=sys.stderr)
        elif meta.get("checkpoint"):
            print(
                f"rollrig: interrupted; checkpoint of step {result.checkpoint_step} kept at "
                f"{meta['checkpoint']} (continue with --resume)",
                file=sys.stderr,
            )
        else:
            print("rollrig: interrupted before the first checkpoint; nothing was written", file=sys.stderr)
        return 128 + result.signum  # as a shell reports it: 130 Ctrl-C, 143 SIGTERM

    from rollrig.sim.training.runs import finish

    tables, folder = finish(sc, args, result, meta, out_dir)
    print_tables(tables, args.format)
    say_written(folder, args.format)
    return 0
