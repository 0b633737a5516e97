"""The sweep's tidy table: one row per point, one column per statistic.

Columns: ``point`` (id), one column per swept dotted key, ``runs``,
``n_diverged``, then — judge ``criteria`` — for every metric ``<metric>_mean``,
``_ci95_low``, ``_ci95_high`` (Student-t interval of the mean), ``_p5``,
``_p50``, ``_p95`` and ``_worst`` (angles in degrees, names ending ``_deg``)
and for every criterion ``pass_<name>`` with its Wilson interval
``pass_<name>_low``/``_high`` (``pass_all``: every criterion); judge
``stability`` — ``settled`` (fraction of runs that settle) with its Wilson
interval and ``growth_p50`` (median envelope ratio of the last two windows).
Infinite values are written ``inf``.
"""

from __future__ import annotations

import csv
import io
import math
from pathlib import Path

__all__ = ["columns", "write_tables", "read_csv", "boundary_column"]


def columns(rows: list[dict], keys: list[str]) -> list[str]:
    """Column order: id, swept keys, run counts, then statistics in first-seen order."""
    head = ["point", *keys, "runs", "n_diverged"]
    rest: list[str] = []
    seen = set(head)
    for r in rows:
        for c in r:
            if c not in seen:
                seen.add(c)
                rest.append(c)
    return head + rest


def _cell(v) -> str:
    if isinstance(v, float):
        if math.isinf(v):
            return "inf" if v > 0 else "-inf"
        return repr(v)
    return str(v)


def write_tables(folder: Path, rows: list[dict], keys: list[str], stem: str = "sweep") -> list[str]:
    """Write ``<stem>.csv`` (always) and ``<stem>.parquet`` (when pyarrow is installed).

    Rows are sorted by point id. Returns the file names written.
    """
    from .store import atomic_write_text

    rows = sorted(rows, key=lambda r: r["point"])
    cols = columns(rows, keys)
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(cols)
    for r in rows:
        w.writerow([_cell(r.get(c, "")) for c in cols])
    atomic_write_text(Path(folder) / f"{stem}.csv", buf.getvalue())
    written = [f"{stem}.csv"]
    try:
        import pyarrow as pa
        import pyarrow.parquet as pq
    except ImportError:
        return written
    table = pa.Table.from_pylist([{c: r.get(c) for c in cols} for r in rows])
    tmp = Path(folder) / f".{stem}.parquet.tmp"
    pq.write_table(table, tmp)
    tmp.replace(Path(folder) / f"{stem}.parquet")
    written.append(f"{stem}.parquet")
    return written


def read_csv(path: Path) -> tuple[list[str], list[dict]]:
    """Columns and rows of a sweep CSV (numbers as float, ``inf`` included)."""
    with open(path, newline="") as f:
        r = csv.reader(f)
        cols = next(r)
        rows = []
        for line in r:
            row = {}
            for c, v in zip(cols, line, strict=True):
                try:
                    row[c] = float(v)
                except ValueError:
                    row[c] = v
            rows.append(row)
    return cols, rows


def boundary_column(judge: str) -> str:
    """The fraction whose 0.5 level is drawn as the boundary."""
    return "settled" if judge == "stability" else "pass_all"
