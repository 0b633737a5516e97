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

__all__ = ["Table", "render", "FORMATS", "fmt_number"]

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
        return json.dumps(out, indent=2, ensure_ascii=False, default=_json_default) + "\n"
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


def _json_default(obj: Any) -> Any:
    try:
        import numpy as np

        if isinstance(obj, np.generic):
            return obj.item()
        if isinstance(obj, np.ndarray):
            return obj.tolist()
    except ImportError:  # pragma: no cover
        pass
    return str(obj)
