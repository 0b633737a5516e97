"""Output folders written atomically, each with a run manifest.

Files are written into a hidden sibling folder; only when everything is in
place is it renamed to the requested name, so an error or Ctrl-C never leaves
a half-written result behind, and an existing folder is replaced only when
the user asked for it (``--force``).
"""

from __future__ import annotations

import json
import os
import platform
import shutil
import sys
import tempfile
import time
from contextlib import contextmanager
from pathlib import Path
from typing import Any

import numpy as np
from rollrig.sim import __version__
from rollrig.sim.errors import UserInputError

from . import CAUTION
from .table import jsonable

__all__ = ["default_out_dir", "check_out_dir", "output_folder", "write_json", "manifest"]


def default_out_dir(stem: str, root: str = "rollrig-runs") -> Path:
    """``rollrig-runs/<stem>-<YYYYmmdd-HHMMSS>`` (suffixed if taken)."""
    base = Path(root) / f"{stem}-{time.strftime('%Y%m%d-%H%M%S')}"
    out, n = base, 2
    while out.exists():
        out = base.with_name(f"{base.name}-{n}")
        n += 1
    return out


def check_out_dir(path: Path, force: bool) -> None:
    """Refuse to overwrite an existing folder unless forced (before any work)."""
    if path.exists() and not force:
        raise UserInputError(f"{path}: output folder exists; allowed: a new folder, or --force to replace it")
    if path.exists() and not path.is_dir():
        raise UserInputError(f"{path}: exists and is not a folder; allowed: a folder path")
    parent = path.parent
    while not parent.exists() and parent != parent.parent:  # first existing ancestor
        parent = parent.parent
    if not parent.is_dir():  # --out some_file/sub would fail later with an OSError
        raise UserInputError(f"{parent}: exists and is not a folder; allowed: an output path inside a folder")


@contextmanager
def output_folder(path: Path, force: bool = False):
    """Yield a temporary folder that becomes ``path`` when the block succeeds."""
    path = Path(path)
    check_out_dir(path, force)
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(prefix=f".{path.name}.partial-", dir=path.parent))
    try:
        yield tmp
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    old = None
    if path.exists():
        old = path.with_name(f".{path.name}.old-{os.getpid()}")
        os.replace(path, old)
    os.replace(tmp, path)
    if old is not None:
        shutil.rmtree(old, ignore_errors=True)


def write_json(path: Path, data: Any) -> None:
    """JSON with infinities written as the strings ``"inf"``/``"-inf"`` (never NaN)."""
    Path(path).write_text(json.dumps(jsonable(data), indent=2, ensure_ascii=False) + "\n")


def manifest(
    *,
    scenario_path: str,
    scenario_sha256: str,
    seed: int,
    runs: list[int] | range,
    extra: dict | None = None,
    command_line: list[str] | None = None,
) -> dict:
    """Provenance of an output folder."""
    runs = list(runs)
    data = {
        "tool": "rollrig",
        "version": __version__,
        "created_utc": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
        "command_line": list(sys.argv if command_line is None else command_line),
        "scenario": scenario_path,
        "scenario_sha256": scenario_sha256,
        "seed": seed,
        "runs": len(runs),
        "run_indices": runs if len(runs) <= 20 else f"{runs[0]}..{runs[-1]}",
        "python": platform.python_version(),
        "numpy": np.__version__,
        "caution": CAUTION,
    }
    if extra:
        data.update(extra)
    return data
