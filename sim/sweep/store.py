"""The sweep folder: its definition, finished points appended as they come,
and a lock so that two sweeps never write one folder at once.

Files
-----
``sweep.json``
    the sweep definition (canonical scenario hash, axes, design, runs,
    judge); written once, atomically, when the folder is created.
``scenario.toml``
    the scenario text as it was read.
``points.jsonl``
    one JSON object per finished point. Each chunk's rows are appended with
    one ``write`` on a file opened for appending, then ``fsync``: a process
    killed at any moment (even by SIGKILL) leaves whole lines plus at most
    one unterminated tail, which reading ignores and the next append
    truncates away. Rows are keyed by point id; a point found twice is kept
    once (the first), so nothing is ever counted twice.
"""

from __future__ import annotations

import fcntl
import json
import math
import os
import shutil
from pathlib import Path
from typing import Any

from rollrig.sim.errors import UserInputError
from rollrig.sim.report.outdir import write_json
from rollrig.sim.report.table import jsonable

__all__ = ["SweepStore", "DEFINITION", "POINTS", "atomic_write_text"]

DEFINITION = "sweep.json"
POINTS = "points.jsonl"
_LOCK = ".sweep.lock"


def atomic_write_text(path: Path, text: str) -> None:
    """Write a file through a temporary sibling and a rename (never half-written)."""
    tmp = path.with_name(f".{path.name}.tmp-{os.getpid()}")
    with open(tmp, "w", encoding="utf-8") as f:
        f.write(text)
        f.flush()
        os.fsync(f.fileno())
    os.replace(tmp, path)


def _from_json(v: Any) -> Any:
    if v == "inf":
        return math.inf
    if v == "-inf":
        return -math.inf
    return v


class SweepStore:
    """A sweep folder opened for running (see the module docstring)."""

    def __init__(self, folder: Path) -> None:
        self.folder = Path(folder)
        self._lock_fd: int | None = None

    # ------------------------------------------------------------ opening
    @staticmethod
    def is_sweep(folder: Path) -> bool:
        return (Path(folder) / DEFINITION).is_file()

    def recorded_definition(self) -> dict | None:
        p = self.folder / DEFINITION
        if not p.is_file():
            return None
        try:
            return json.loads(p.read_text())["definition"]
        except (ValueError, KeyError, TypeError):
            return None

    def open(self, definition: dict, scenario_text: str, *, restart: bool, extra: dict | None = None) -> int:
        """Create, resume or (with ``restart``) start the folder over.

        Returns the number of points already finished.

        Raises
        ------
        UserInputError
            The folder holds a different sweep (or is not a sweep folder) and
            ``restart`` is false; or another sweep is writing it.
        """
        f = self.folder
        if f.exists() and not f.is_dir():
            raise UserInputError(f"{f}: exists and is not a folder; allowed: a folder path")
        if f.exists() and any(f.iterdir()):
            old = self.recorded_definition()
            if old is None and not restart:
                raise UserInputError(
                    f"{f}: is not a sweep folder; allowed: a new folder, or --restart to replace it"
                )
            if old is not None and old != definition and not restart:
                what = _first_difference(old, definition)
                raise UserInputError(
                    f"{f}: holds a different sweep ({what} changed); allowed: the same command to resume, "
                    "--restart to start over, or another --out"
                )
        f.mkdir(parents=True, exist_ok=True)
        self._lock()
        if restart and self.recorded_definition() != definition or not self.is_sweep(f):
            for child in f.iterdir():
                if child.name == _LOCK:
                    continue
                shutil.rmtree(child) if child.is_dir() else child.unlink()
            atomic_write_text(f / "scenario.toml", scenario_text)
            write_json(f / f".{DEFINITION}.tmp", {"definition": definition, **(extra or {})})
            os.replace(f / f".{DEFINITION}.tmp", f / DEFINITION)
        elif restart:  # same definition, asked to start over: drop the finished points
            for name in (POINTS,):
                (f / name).unlink(missing_ok=True)
        return len(self.finished())

    def _lock(self) -> None:
        fd = os.open(self.folder / _LOCK, os.O_RDWR | os.O_CREAT, 0o644)
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            os.close(fd)
            raise UserInputError(
                f"{self.folder}: another sweep is writing this folder; allowed: wait for it"
            ) from None
        self._lock_fd = fd

    def close(self) -> None:
        if self._lock_fd is not None:
            os.close(self._lock_fd)
            self._lock_fd = None

    # ------------------------------------------------------------ points
    def finished(self) -> dict[int, dict]:
        """Finished rows by point id (whole lines only; first of duplicates kept)."""
        p = self.folder / POINTS
        if not p.is_file():
            return {}
        data = p.read_bytes()
        out: dict[int, dict] = {}
        for line in data.split(b"\n")[:-1]:  # the part after the last newline is an unfinished tail
            try:
                row = json.loads(line)
                pid = int(row["point"])
            except (ValueError, KeyError, TypeError):
                continue
            if pid not in out:
                out[pid] = {k: _from_json(v) for k, v in row.items()}
        return out

    def append(self, rows: list[dict]) -> None:
        """Append rows with one write and fsync (see the module docstring)."""
        if not rows:
            return
        p = self.folder / POINTS
        data = "".join(json.dumps(jsonable(r), ensure_ascii=False) + "\n" for r in rows).encode()
        fd = os.open(p, os.O_WRONLY | os.O_CREAT | os.O_APPEND, 0o644)
        try:
            size = os.fstat(fd).st_size
            if size:
                with open(p, "rb") as f:  # drop a tail left by a killed writer
                    f.seek(size - 1)
                    if f.read(1) != b"\n":
                        f.seek(0)
                        keep = f.read().rfind(b"\n") + 1
                        os.ftruncate(fd, keep)
            os.write(fd, data)
            os.fsync(fd)
        finally:
            os.close(fd)


def _first_difference(old: dict, new: dict) -> str:
    for key in new:
        if old.get(key) != new.get(key):
            return {"scenario_sha256_canonical": "the scenario"}.get(key, key)
    return "the definition"
