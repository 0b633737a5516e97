"""Pieces the sub-commands share."""

from __future__ import annotations

import sys
import time
from contextlib import contextmanager
from pathlib import Path

from rollrig.sim.errors import UserInputError

__all__ = [
    "add_force_option",
    "add_format_option",
    "add_seed_option",
    "apply_run_overrides",
    "check_batch_resources",
    "check_seed",
    "MAX_RUNS",
    "MAX_SEED",
    "print_tables",
    "progress_reporter",
    "status_stream",
    "say_written",
]

MAX_RUNS = 100_000
#: seeds are stored as signed 64-bit integers in files and manifests
MAX_SEED = 2**63 - 1
#: show a progress bar on a terminal when a batch is expected to take longer (s)
PROGRESS_AFTER_S = 3.0


#: the ``--format`` choices every table-printing command offers
FORMATS = ("table", "csv", "json", "md")


def add_format_option(p, help: str | None = None) -> None:
    p.add_argument("--format", choices=FORMATS, default="table", help=help)


def add_force_option(p, help: str = "replace an existing output folder") -> None:
    p.add_argument("--force", action="store_true", help=help)


def add_seed_option(p, default=None) -> None:
    p.add_argument("--seed", type=int, default=default, help=f"run seed, 0 … 2^63 − 1 (default {default})")


def check_seed(seed: int | None, option: str = "--seed") -> None:
    if seed is not None and not 0 <= seed <= MAX_SEED:
        raise UserInputError(f"{option} {seed}: allowed: 0 ≤ seed ≤ 2^63 − 1 ({MAX_SEED})")


def apply_run_overrides(sc, runs: int | None, seed: int | None, *, min_runs: int = 1, why: str = ""):
    """The scenario with ``--runs`` and ``--seed`` applied (range-checked)."""
    changes = {}
    if runs is not None:
        if not min_runs <= runs <= MAX_RUNS:
            raise UserInputError(f"--runs {runs}: allowed: {min_runs} ≤ runs ≤ {MAX_RUNS}{why}")
        changes["runs"] = runs
    if seed is not None:
        check_seed(seed)
        changes["seed"] = seed
    return sc.with_run(**changes) if changes else sc


def check_batch_resources(sc, runs: int, *, where: str):
    """Estimate a scenario batch's memory and time; refuse what cannot fit (one line)."""
    from rollrig.sim.resources import check_fits, estimate_batch

    est = estimate_batch(runs, sc.run.n_steps)
    check_fits(est, where=str(where), change="--runs, [run] duration_s or a longer [run] base_step_s")
    return est


@contextmanager
def progress_reporter(expected_s: float, duration_s: float, what: str):
    """Yield a ``tick(t_s)`` callback drawing a rich progress bar, or ``None``.

    A bar (with time left) is shown only on a terminal and only when the
    batch is expected to take longer than :data:`PROGRESS_AFTER_S`.
    """
    if expected_s < PROGRESS_AFTER_S or not sys.stderr.isatty():
        yield None
        return
    from rich.console import Console
    from rich.progress import BarColumn, Progress, TextColumn, TimeElapsedColumn, TimeRemainingColumn

    with Progress(
        TextColumn(f"simulating {what}"),
        BarColumn(),
        TextColumn("{task.percentage:>3.0f} %"),
        TimeElapsedColumn(),
        TextColumn("left"),
        TimeRemainingColumn(),
        console=Console(stderr=True),
        transient=True,
    ) as bar:
        task = bar.add_task("sim", total=duration_s)
        last = [0.0]

        def tick(t_s: float) -> None:
            now = time.monotonic()
            if now - last[0] > 0.2:
                last[0] = now
                bar.update(task, completed=t_s)

        yield tick


def print_tables(tables: list, fmt: str) -> None:
    """Print report tables to standard output in the chosen format."""
    from rollrig.sim.report.table import render

    text = render(tables, fmt)
    if text is not None:
        sys.stdout.write(text)


def status_stream(fmt: str):
    """Where status lines go: with the table, or to stderr so CSV/JSON/Markdown stay clean."""
    return sys.stdout if fmt == "table" else sys.stderr


def say_written(folder: Path, fmt: str) -> None:
    print(f"wrote {folder}/", file=status_stream(fmt))
