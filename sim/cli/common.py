"""Pieces the sub-commands share."""

from __future__ import annotations

import sys
from pathlib import Path

from rollrig.sim.errors import UserInputError
from rollrig.sim.scenario import Scenario

__all__ = ["apply_run_overrides", "MAX_RUNS", "print_tables", "status_stream", "say_written"]

MAX_RUNS = 100_000


def apply_run_overrides(
    sc: Scenario, runs: int | None, seed: int | None, *, min_runs: int = 1, why: str = ""
) -> Scenario:
    """The scenario with ``--runs`` and ``--seed`` applied (range-checked)."""
    changes = {}
    if runs is not None:
        if not min_runs <= runs <= MAX_RUNS:
            raise UserInputError(f"--runs {runs}: allowed: {min_runs} ≤ runs ≤ {MAX_RUNS}{why}")
        changes["runs"] = runs
    if seed is not None:
        if seed < 0:
            raise UserInputError(f"--seed {seed}: allowed: seed ≥ 0")
        changes["seed"] = seed
    return sc.with_run(**changes) if changes else sc


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
