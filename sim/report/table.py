"""One table model, four renderings: rich terminal, CSV, JSON, Markdown.

Every command that prints figures builds a :class:`Table` and hands it to
:func:`render`, so the four output formats stay consistent. A table holds
two views of the same results:

* ``rows``: display strings (rounded, in display units, "∞", "not settled")
  for the terminal table and Markdown;
* ``records``: one dict per row of plain values — numbers in the unit named
  by the key (``settling_time_s``, ``rms_error_rad``), ``None`` where a value
  was never reached — for JSON and CSV. CSV writes one value per cell (empty
  for ``None``), with one header row; several tables are separated by one
  empty line.

Tables printed to a pipe or file are not wrapped at 80 columns.
"""

from __future__ import annotations

import csv
import io
import math
from dataclasses import dataclass, field
from typing import Any

from .outdir import json_text, jsonable

__all__ = ["Table", "render", "FORMATS", "fmt_number", "jsonable", "json_text"]

FORMATS = ("table", "csv", "json", "md")


@dataclass
class Table:
    """A titled table of strings with optional notes below it.

    ``records`` keeps machine-readable values (numbers, not strings) for the
    JSON rendering; when absent the cells are used.
    """

    title: str
    columns: list[str]
    rows: list[list[str]] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)
    records: list[dict[str, Any]] | None = None
    styles: list[str | None] = field(default_factory=list)

    def add(self, *cells: Any, style: str | None = None) -> None:
        self.rows.append([str(c) for c in cells])
        self.styles.append(style)


def fmt_number(x: float, digits: int = 3, inf_text: str = "∞") -> str:
    """A number for display: ``digits`` significant figures, infinities named."""
    if x is None:
        return "—"
    x = float(x)
    if math.isnan(x):
        return "—"
    if math.isinf(x):
        return inf_text if x > 0 else f"-{inf_text}"
    if x == 0:
        return "0"
    if abs(x) >= 10**digits or abs(x) < 1e-3:
        return f"{x:.{digits - 1}e}"
    return f"{x:.{digits}g}" if abs(x) >= 1 else f"{x:.{digits}f}".rstrip("0").rstrip(".")


def render(tables: list[Table], fmt: str, console=None) -> str | None:
    """Render tables; ``fmt = "table"`` prints with rich and returns None."""
    if fmt == "table":
        from rich.console import Console
        from rich.table import Table as RichTable

        if console is None:
            console = Console()
            if not console.is_terminal:  # piped or redirected: no wrapping at 80 columns
                console = Console(width=1000, soft_wrap=True)
        for t in tables:
            rt = RichTable(title=t.title, title_justify="left", header_style="bold")
            for i, c in enumerate(t.columns):
                rt.add_column(c, justify="left" if i == 0 else "right")
            for row, style in zip(t.rows, t.styles or [None] * len(t.rows), strict=False):
                rt.add_row(*row, style=style)
            console.print(rt)
            for n in t.notes:
                console.print(f"  {n}", style="dim", highlight=False)
        return None
    if fmt == "csv":
        return "\n".join(_csv_block(t) for t in tables)
    if fmt == "json":
        out = [{"title": t.title, "rows": _records(t), "notes": t.notes} for t in tables]
        return json_text(out)
    if fmt == "md":
        lines = []
        for t in tables:
            lines.append(f"### {t.title}\n")
            lines.append("| " + " | ".join(t.columns) + " |")
            lines.append("|" + "|".join(["---"] + ["---:"] * (len(t.columns) - 1)) + "|")
            for r in t.rows:
                lines.append("| " + " | ".join(c.replace("|", "\\|") for c in r) + " |")
            lines.extend(["", *[f"_{n}_" for n in t.notes], ""])
        return "\n".join(lines) + "\n"
    raise ValueError(f"unknown format {fmt!r}")


def _records(t: Table) -> list[dict[str, Any]]:
    if t.records is not None:
        return t.records
    return [dict(zip(t.columns, r, strict=False)) for r in t.rows]


def _cell(v: Any) -> str:
    """One CSV cell: numbers in full precision, never-reached/NaN empty, booleans true/false."""
    v = jsonable(v)
    if v is None:
        return ""
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, float):
        return repr(v)
    if isinstance(v, (list, dict)):  # a record that was not flattened: keep it one cell
        import json

        return json.dumps(v, ensure_ascii=False, separators=(",", ":"))
    return str(v)


def _csv_block(t: Table) -> str:
    """A table as CSV: one header row (units in the names), one value per cell."""
    recs = _records(t)
    cols: list[str] = []
    for r in recs:
        cols.extend(k for k in r if k not in cols)
    if not recs:
        cols = list(t.columns)
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(cols)
    for r in recs:
        w.writerow([_cell(r.get(c)) for c in cols])
    return buf.getvalue()
