"""``rollrig sweep FILE --set KEY=SPEC ...``: degradation maps over scenario keys.

Resumable: the same command continues an interrupted sweep in its folder.
Numerics live in :mod:`rollrig.sim.sweep`; this module only reads options and
prints.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from rollrig.sim.cli.common import say_written
from rollrig.sim.errors import UserInputError

__all__ = ["add_parser", "run"]


def add_parser(sub) -> None:
    p = sub.add_parser(
        "sweep",
        help="map metrics and pass rates over scenario keys (grid, Latin hypercube, random)",
        description=(
            "Run the scenario's Monte Carlo set at every point of a sweep over dotted scenario keys, "
            "with the same random numbers at every point. Writes one tidy table (CSV; Parquet with "
            "pyarrow), a heatmap with the pass/fail or stability boundary (two keys) or lines with "
            "interval bands (one key). Run the same command again to resume an interrupted sweep."
        ),
        epilog=(
            "SPEC: a:b:n (n values), log:a:b:n (log-spaced), v1,v2,... (list), v (fixed). "
            "For --design lhs/random a range needs no count (a:b, log:a:b). "
            "Example: --set sensor.latency_s=0:0.3:13 --set sensor.dropout_prob=0,0.1,0.2,0.3"
        ),
    )
    p.add_argument("scenario", metavar="FILE", help="scenario file (TOML)")
    p.add_argument(
        "--set",
        dest="sets",
        action="append",
        default=[],
        metavar="KEY=SPEC",
        help="a swept key, e.g. sensor.latency_s=0:0.3:13 (repeat for more keys)",
    )
    p.add_argument(
        "--design", choices=("grid", "lhs", "random"), default="grid", help="how points are placed"
    )
    p.add_argument("--points", type=int, metavar="N", help="number of points (lhs/random)")
    p.add_argument("--design-seed", type=int, default=0, help="seed of the lhs/random placement (default 0)")
    p.add_argument("--runs", type=int, help="Monte Carlo runs per point (default: the scenario's)")
    p.add_argument(
        "--seed", type=int, help="Monte Carlo seed shared by every point (default: the scenario's)"
    )
    p.add_argument(
        "--judge",
        choices=("criteria", "stability"),
        default="criteria",
        help="criteria: the scenario's metrics and pass/fail; stability: the margins experiment "
        "(quiet copy, small initial bank, settles or not)",
    )
    p.add_argument("--excitation-deg", type=float, default=1.0, help="stability: initial bank (default 1)")
    p.add_argument("--window-s", type=float, default=8.0, help="stability: judging window (default 8 s)")
    p.add_argument("--metric", help="column or metric drawn (default: pass_all, or settled)")
    p.add_argument("--out", type=Path, metavar="DIR", help="sweep folder (default rollrig-runs/<name>-sweep)")
    p.add_argument(
        "--restart", action="store_true", help="start the folder over (a changed sweep or scenario)"
    )
    p.add_argument(
        "--workers",
        type=int,
        metavar="N",
        help="processes (default: one per core; 1 = in this process)",
    )
    p.add_argument(
        "--dask", metavar="ADDRESS", help="run on an existing Dask cluster (pip install 'rollrig[dist]')"
    )
    p.add_argument("--dask-timeout-s", type=float, default=10.0, help="wait for the scheduler (default 10 s)")
    p.add_argument("--chunk-runs", type=int, default=2000, help="batch members per chunk (default 2000)")
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    p.add_argument("--allow-code", action="store_true", help="allow a user controller class (runs your code)")
    p.set_defaults(func=run)


def _progress(quiet: bool):
    """A rich progress bar on stderr (points done, elapsed, time left) and its updater."""
    if quiet:
        return None, None
    from rich.console import Console
    from rich.progress import (
        BarColumn,
        MofNCompleteColumn,
        Progress,
        TextColumn,
        TimeElapsedColumn,
        TimeRemainingColumn,
    )

    bar = Progress(
        TextColumn("sweep"),
        BarColumn(),
        MofNCompleteColumn(),
        TextColumn("points"),
        TimeElapsedColumn(),
        TextColumn("left"),
        TimeRemainingColumn(),
        console=Console(stderr=True),
        transient=False,
    )
    task = bar.add_task("sweep", total=None)

    def update(done: int, total: int) -> None:
        bar.update(task, completed=done, total=total)

    return bar, update


def run(args: argparse.Namespace) -> int:
    from rollrig.sim.sweep import load_doc, plan_sweep, run_sweep

    doc, text = load_doc(args.scenario)
    if args.workers is not None and args.workers < 1:
        raise UserInputError(f"--workers {args.workers}: allowed: ≥ 1")
    if not 0.1 <= args.dask_timeout_s <= 600:
        raise UserInputError(f"--dask-timeout-s {args.dask_timeout_s:g}: allowed: 0.1 ≤ value ≤ 600")
    plan = plan_sweep(
        args.scenario,
        doc,
        args.sets,
        design=args.design,
        n_points=args.points,
        design_seed=args.design_seed,
        runs=args.runs,
        seed=args.seed,
        judge=args.judge,
        excitation_deg=args.excitation_deg,
        window_s=args.window_s,
        chunk_runs=args.chunk_runs,
        allow_code=args.allow_code,
    )
    if args.metric is not None:
        _check_metric(plan, args.metric)
    out = args.out or Path("rollrig-runs") / f"{Path(args.scenario).stem}-sweep"
    bar, update = _progress(args.quiet)
    try:
        if bar is not None:
            bar.start()
        res = run_sweep(
            plan,
            out,
            text,
            restart=args.restart,
            workers=args.workers,
            dask=args.dask,
            dask_timeout_s=args.dask_timeout_s,
            metric=args.metric,
            command_line=getattr(args, "command_line", None),
            progress=update,
        )
    except KeyboardInterrupt:
        if bar is not None:
            bar.stop()
        print(
            f"rollrig: interrupted; the finished points are kept in {out}/; run the same command to go on",
            file=sys.stderr,
        )
        return 130
    finally:
        if bar is not None:
            bar.stop()
    print(
        f"{len(res.rows)} points ({res.resumed} resumed, {res.computed} computed) "
        f"in {res.elapsed_s:.1f} s; files: {', '.join(res.files)}"
    )
    say_written(res.folder, "table")
    return 0


def _check_metric(plan, metric: str) -> None:
    from rollrig.sim.metrics import METRIC_INFO
    from rollrig.sim.sweep.chunk import display_name

    if plan.definition["judge"] == "stability":
        known = ["settled", "growth_p50"]
    else:
        known = [
            "pass_all",
            *sorted({display_name(k)[0] for k, i in METRIC_INFO.items() if i.kind == "value"}),
        ]
    if metric not in known and not metric.startswith("pass_"):
        import difflib

        hint = difflib.get_close_matches(metric, known, n=1)
        did = f"; did you mean {hint[0]!r}?" if hint else ""
        raise UserInputError(f"--metric {metric}: unknown{did} (allowed: {', '.join(known)})")
