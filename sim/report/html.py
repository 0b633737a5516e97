"""One self-contained HTML page from any rollrig output folder (``rollrig report``).

A folder's *kind* (run, margins, sweep, ...) is read from its
``manifest.json`` (``kind`` or ``command``) or recognised by its files. Each
known kind is described in :data:`KINDS` by the files it holds and how each
is shown; every file a kind does not describe — and every file of a kind
this module does not know (folders of commands added later) — is shown by
the generic rules: CSV as tables, JSON as tables or text, Markdown and TOML
as text, PNG/JPEG as embedded images. The page is rendered by a Jinja2
template shipped in ``templates/`` with autoescaping; figures are embedded as
``data:`` URIs and a Content-Security-Policy forbids any other resource, so
the one file can be mailed.
"""

from __future__ import annotations

import base64
import csv
import hashlib
import json
import math
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from rollrig.sim.errors import UserInputError

from . import CAUTION

__all__ = ["KINDS", "Kind", "Section", "folder_kind", "build_page", "render_report", "write_report"]

MAX_ROWS = 200
MAX_COLS = 40
MAX_TEXT = 200_000
IMAGE_TYPES = {".png": "image/png", ".jpg": "image/jpeg", ".jpeg": "image/jpeg", ".svg": "image/svg+xml"}


@dataclass
class Section:
    """One part of the page: a heading with tables, images and text blocks."""

    title: str
    note: str = ""
    tables: list[dict] = field(default_factory=list)  # {title, columns, rows, note}
    images: list[dict] = field(default_factory=list)  # {name, uri}
    texts: list[dict] = field(default_factory=list)  # {title, text}


# ------------------------------------------------------------------ readers
def _fmt(v: Any) -> str:
    if isinstance(v, bool):
        return "yes" if v else "no"
    if isinstance(v, float):
        if math.isinf(v):
            return "∞" if v > 0 else "−∞"
        if math.isnan(v):
            return "—"
        return f"{v:.4g}"
    if v is None:
        return "—"
    if isinstance(v, list | dict):
        text = json.dumps(v, ensure_ascii=False)
        return text if len(text) <= 120 else text[:117] + "…"
    s = str(v)
    try:
        return _fmt(float(s)) if s.strip() and s.strip()[0] in "-0123456789.i" else s
    except ValueError:
        return s


def csv_table(
    path: Path, title: str | None = None, columns: Callable[[list[str]], list[str]] | None = None
) -> dict:
    """A CSV file as a table (at most :data:`MAX_ROWS` rows and :data:`MAX_COLS` columns)."""
    with open(path, newline="", encoding="utf-8", errors="replace") as f:
        rows = list(csv.reader(f))
    if not rows:
        return {"title": title or path.name, "columns": [], "rows": [], "note": "empty file"}
    head, body = rows[0], rows[1:]
    keep = list(range(len(head)))
    if columns is not None:
        wanted = set(columns(head))
        keep = [i for i, c in enumerate(head) if c in wanted]
    notes = []
    if len(keep) > MAX_COLS:
        notes.append(f"first {MAX_COLS} of {len(keep)} columns")
        keep = keep[:MAX_COLS]
    elif len(keep) < len(head):
        notes.append(f"{len(keep)} of {len(head)} columns")
    if len(body) > MAX_ROWS:
        notes.append(f"first {MAX_ROWS} of {len(body)} rows")
    cells = [[_fmt(r[i]) if i < len(r) else "" for i in keep] for r in body[:MAX_ROWS]]
    note = "; ".join(notes) + (f" (all of it in {path.name})" if notes else "")
    return {"title": title or path.name, "columns": [head[i] for i in keep], "rows": cells, "note": note}


def records_table(title: str, records: list[dict], note: str = "") -> dict:
    """A list of flat dicts as a table (columns in first-seen order)."""
    cols: list[str] = []
    for r in records:
        cols += [k for k in r if k not in cols]
    rows = [[_fmt(r.get(c)) for c in cols] for r in records[:MAX_ROWS]]
    return {"title": title, "columns": cols[:MAX_COLS], "rows": [r[:MAX_COLS] for r in rows], "note": note}


def mapping_table(title: str, data: dict, note: str = "") -> dict:
    return {
        "title": title,
        "columns": ["key", "value"],
        "rows": [[k, _fmt(v)] for k, v in data.items()],
        "note": note,
    }


def image(path: Path) -> dict:
    mime = IMAGE_TYPES[path.suffix.lower()]
    return {"name": path.name, "uri": f"data:{mime};base64,{base64.b64encode(path.read_bytes()).decode()}"}


def text_block(path: Path, title: str | None = None) -> dict:
    text = path.read_text(encoding="utf-8", errors="replace")
    if len(text) > MAX_TEXT:
        text = text[:MAX_TEXT] + f"\n… (cut; the whole file is {path.name})"
    return {"title": title or path.name, "text": text}


def _json(path: Path) -> Any:
    try:
        return json.loads(path.read_text(encoding="utf-8"))
    except (ValueError, UnicodeDecodeError):
        return None


def generic_file(path: Path) -> Section | None:
    """How any file is shown when its kind does not say (``None``: listed only)."""
    suf = path.suffix.lower()
    if suf == ".csv":
        return Section(path.name, tables=[csv_table(path)])
    if suf in IMAGE_TYPES:
        return Section(path.name, images=[image(path)])
    if suf in (".md", ".toml", ".txt"):
        return Section(path.name, texts=[text_block(path)])
    if suf == ".json":
        data = _json(path)
        if isinstance(data, list) and data and all(isinstance(r, dict) for r in data):
            if all({"title", "rows"} <= r.keys() for r in data):  # titled tables
                return Section(
                    path.name,
                    tables=[
                        records_table(r["title"], r["rows"], "; ".join(r.get("notes", []))) for r in data
                    ],
                )
            return Section(path.name, tables=[records_table(path.name, data)])
        if isinstance(data, dict) and all(
            not isinstance(v, dict | list) or len(json.dumps(v)) < 200 for v in data.values()
        ):
            return Section(path.name, tables=[mapping_table(path.name, data)])
        return Section(path.name, texts=[text_block(path)])
    return None


# ------------------------------------------------------------------ kinds
def _run_summary(folder: Path) -> Section:
    data = _json(folder / "metrics.json") or {}
    summary = [{"metric": k, **v} for k, v in (data.get("summary") or {}).items()]
    passes = [{"criterion": k, **v} for k, v in (data.get("pass_fraction") or {}).items()]
    return Section(
        "Monte Carlo statistics",
        note=f"units: {data.get('units', 'SI')}; mean with its 95 % t interval; pass fractions: Wilson",
        tables=[records_table("metrics over the runs", summary), records_table("pass fractions", passes)],
    )


def _margins_tables(folder: Path) -> Section:
    data = _json(folder / "margins.json") or []
    tables = [
        records_table(t.get("title", ""), t.get("rows", []), "; ".join(t.get("notes", [])))
        for t in data
        if isinstance(t, dict)
    ]
    return Section("Stability margins and handling qualities", tables=tables)


def _sweep_columns(head: list[str]) -> list[str]:
    base = {"point", "runs", "n_diverged"}
    return [
        c
        for c in head
        if c in base
        or "." in c
        or c.endswith("_mean")
        or (c.startswith(("pass_", "settled")) and not c.endswith(("_low", "_high")))
    ]


def _sweep_tables(folder: Path) -> Section:
    d = (_json(folder / "sweep.json") or {}).get("definition", {})
    axes = [
        {
            "key": a.get("key"),
            "kind": a.get("kind"),
            "spec": a.get("spec"),
            "values": len(a.get("values", [])),
        }
        for a in d.get("axes", [])
    ]
    about = {k: v for k, v in d.items() if k not in ("axes", "coords_sha256")}
    tables = [records_table("swept keys", axes), mapping_table("sweep definition", about)]
    if (folder / "sweep.csv").is_file():
        tables.append(csv_table(folder / "sweep.csv", "points (means and pass fractions)", _sweep_columns))
    return Section(
        "Parameter sweep", note="one row per point; intervals and percentiles are in sweep.csv", tables=tables
    )


@dataclass(frozen=True)
class Kind:
    """A folder kind: how it is recognised and which files it shows first, how.

    Attributes
    ----------
    title : str
    recognise : tuple of str
        Files whose presence identifies the kind when the manifest does not say.
    sections : callable
        ``folder -> Section`` for the kind's own summary.
    consumed : tuple of str
        Files that summary shows (not shown again by the generic rules; other
        files still are, images first).
    """

    title: str
    recognise: tuple[str, ...]
    sections: Callable[[Path], Section]
    consumed: tuple[str, ...]


#: Known folder kinds. A command's folder whose kind is missing here gets the
#: generic page (every table, image and text of the folder).
KINDS: dict[str, Kind] = {
    "sweep": Kind(
        "Parameter sweep",
        ("sweep.json",),
        _sweep_tables,
        ("sweep.json", "sweep.csv", "points.jsonl", "sweep.parquet"),
    ),
    "margins": Kind("Stability margins", ("margins.json",), _margins_tables, ("margins.json", "margins.md")),
    "run": Kind("Monte Carlo run", ("metrics.json",), _run_summary, ("metrics.json", "metrics.md")),
}


def folder_kind(folder: Path, manifest: dict | None) -> str:
    """The kind named by the manifest, else recognised by files, else ``"unknown"``."""
    if manifest:
        for key in ("kind", "command"):
            if isinstance(manifest.get(key), str):
                return manifest[key]
    for name, kind in KINDS.items():
        if all((folder / f).exists() for f in kind.recognise):
            return name
    return "unknown"


def _scenario_text(folder: Path, manifest: dict | None) -> tuple[str, str] | None:
    """The scenario's text and where it came from."""
    inside = sorted(folder.glob("*.toml"))
    if inside:
        return inside[0].read_text(
            encoding="utf-8", errors="replace"
        ), f"{inside[0].name} (kept in the folder)"
    path = (manifest or {}).get("scenario")
    if not isinstance(path, str) or not Path(path).is_file():
        return None
    raw = Path(path).read_bytes()
    same = hashlib.sha256(raw).hexdigest() == (manifest or {}).get("scenario_sha256")
    how = "unchanged since the run (same SHA-256)" if same else "read now; it may have changed since the run"
    return raw.decode("utf-8", errors="replace"), f"{path} — {how}"


def build_page(folder: Path) -> dict:
    """Everything the template shows, as plain data."""
    folder = Path(folder)
    if not folder.is_dir():
        raise UserInputError(f"{folder}: no such folder; allowed: a rollrig output folder")
    files = sorted(p for p in folder.iterdir() if p.is_file() and not p.name.startswith("."))
    manifest = _json(folder / "manifest.json") if (folder / "manifest.json").is_file() else None
    if manifest is None and not files:
        raise UserInputError(f"{folder}: empty folder; allowed: a rollrig output folder")
    kind_name = folder_kind(folder, manifest if isinstance(manifest, dict) else None)
    kind = KINDS.get(kind_name)
    sections: list[Section] = []
    consumed = {"manifest.json"}
    if kind is not None:
        sections.append(kind.sections(folder))
        consumed.update(kind.consumed)
    scen = _scenario_text(folder, manifest if isinstance(manifest, dict) else None)
    consumed.update(p.name for p in folder.glob("*.toml"))
    rest = [p for p in files if p.name not in consumed]
    rest.sort(key=lambda p: (p.suffix.lower() not in IMAGE_TYPES, p.name))  # figures first
    listed = []
    for p in rest:
        try:
            sec = generic_file(p)
        except (OSError, ValueError, UnicodeDecodeError):
            sec = None
        if sec is None:
            listed.append(p.name)
        else:
            sections.append(sec)
    man = manifest if isinstance(manifest, dict) else {}
    title = man.get("title") or folder.name
    return {
        "title": f"{title} — {kind.title if kind else f'rollrig {kind_name} folder'}",
        "kind": kind_name,
        "known_kind": kind is not None,
        "folder": folder.name,
        "caution": CAUTION,
        "manifest": mapping_table("manifest.json", man) if man else None,
        "scenario": None if scen is None else {"text": scen[0], "source": scen[1]},
        "sections": sections,
        "listed": listed,
        "files": [p.name for p in files],
    }


def render_report(folder: Path) -> str:
    """The HTML page of a folder (Jinja2 template ``templates/report.html.j2``, autoescaped)."""
    import jinja2

    env = jinja2.Environment(
        loader=jinja2.PackageLoader("rollrig.sim.report", "templates"),
        autoescape=jinja2.select_autoescape(default=True),
        undefined=jinja2.StrictUndefined,
        trim_blocks=True,
        lstrip_blocks=True,
    )
    return env.get_template("report.html.j2").render(page=build_page(folder))


def write_report(folder: Path, out: Path | None = None) -> Path:
    """Write the page (default ``FOLDER/report.html``) through a temporary file and a rename."""
    folder = Path(folder)
    html = render_report(folder)
    out = Path(out) if out is not None else folder / "report.html"
    if out.is_dir():
        raise UserInputError(f"{out}: is a folder; allowed: an .html file path")
    tmp = out.with_name(f".{out.name}.tmp")
    try:
        tmp.write_text(html, encoding="utf-8")
    except OSError as exc:
        raise UserInputError(f"{out}: cannot be written ({exc.strerror})") from None
    tmp.replace(out)
    return out
