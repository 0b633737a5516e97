"""One table model, four renderings: rich terminal, CSV, JSON, Markdown.

Every command that prints figures builds a :class:`Table` and hands it to
:func:`render`, so the four output formats stay consistent.
"""

from __future__ import annotations

import csv
import io
import json
import math
from dataclasses import dataclass, field
from typing import Any

__all__ = ["Table", "render", "FORMATS", "fmt_number", "jsonable"]

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

        console = console or Console()
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
        buf = io.StringIO()
        w = csv.writer(buf, lineterminator="\n")
        for i, t in enumerate(tables):
            if i:
                buf.write("\n")
            w.writerow(["# " + t.title])
            w.writerow(t.columns)
            w.writerows(t.rows)
        return buf.getvalue()
    if fmt == "json":
        out = []
        for t in tables:
            recs = (
                t.records
                if t.records is not None
                else [dict(zip(t.columns, r, strict=False)) for r in t.rows]
            )
            out.append({"title": t.title, "rows": recs, "notes": t.notes})
        return json.dumps(jsonable(out), indent=2, ensure_ascii=False, default=str) + "\n"
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


def jsonable(obj: Any) -> Any:
    """Plain JSON values: numpy scalars and arrays unwrapped, infinities as ``"inf"``/``"-inf"``.

    Standard JSON has no infinity (``json.dumps`` would write ``Infinity``,
    which strict parsers reject); a metric that was never reached is written
    as the string ``"inf"``, and ``float("inf")`` reads it back. NaN, which
    no metric should produce, becomes ``null``.
    """
    import numpy as np

    if isinstance(obj, dict):
        return {str(k): jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [jsonable(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return jsonable(obj.tolist())
    if isinstance(obj, (np.floating, float)):
        f = float(obj)
        if math.isnan(f):
            return None
        if math.isinf(f):
            return "inf" if f > 0 else "-inf"
        return f
    if isinstance(obj, np.integer):
        return int(obj)
    if isinstance(obj, np.bool_):
        return bool(obj)
    return obj
