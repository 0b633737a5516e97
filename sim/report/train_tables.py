"""Tables and files of a training session: progress history and the trained policy's judgement."""

from __future__ import annotations

import csv
from pathlib import Path

from . import CAUTION
from .table import Table, fmt_number

__all__ = ["history_table", "write_history_csv", "LEARNED_CAUTION"]

#: what a learned policy does not guarantee (printed with every training result)
LEARNED_CAUTION = (
    "A learned policy is judged only on the runs simulated: it has no analytic stability "
    "margins, no guarantee outside the conditions it was trained and tested on, and no "
    "guarantee from one training seed to the next."
)


def history_table(history: list[dict], algorithm: str, max_rows: int = 12) -> Table:
    """Training progress: iteration (or steps), mean return, criteria pass rate, CPU time."""
    t = Table(
        title=f"training ({algorithm})",
        columns=["iteration", "mean return", "criteria pass rate", "CPU (s)"],
        notes=[LEARNED_CAUTION, CAUTION],
    )
    rows = [r for r in history if "pass_rate" in r] or history
    if len(rows) > max_rows:
        step = -(-len(rows) // max_rows)
        rows = rows[::step] + ([rows[-1]] if rows[-1] is not rows[::step][-1] else [])
    for r in rows:
        rate = r.get("pass_rate")
        t.add(
            str(r["iteration"]),
            fmt_number(r["mean_return"]),
            "—" if rate is None else f"{100 * rate:.0f} %",
            fmt_number(r.get("cpu_s", float("nan"))),
        )
    return t


def write_history_csv(path: Path, history: list[dict]) -> None:
    """Every iteration's figures as CSV (empty cells where not measured)."""
    keys = ["iteration", "mean_return", "sigma_r", "pass_rate", "cpu_s"]
    with open(path, "w", newline="") as f:
        w = csv.writer(f)
        w.writerow(keys)
        for r in history:
            w.writerow(["" if r.get(k) is None else r[k] for k in keys])
