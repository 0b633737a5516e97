"""Synthetic sensor logs (what our camera model records) and reading log files.

:func:`make_log` runs one run of a scenario's closed loop and records, for
every frame, the time it was delivered, the true bank at that time (the
"reference" a trusted inertial unit would give), the reading and its
validity. Lost frames are written with an empty reading and ``valid = 0``.
:func:`read_log` reads such a CSV (or a user's own) with named columns.
"""

from __future__ import annotations

import csv
import math
import os
import tempfile
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .build import build_setup, make_controller
from .driver import run_batch
from .errors import LogFileError
from .scenario import Scenario

__all__ = ["SensorLogData", "make_log", "write_log", "read_log", "DEFAULT_COLUMNS"]

DEFAULT_COLUMNS = {"time": "t_s", "reference": "reference_deg", "reading": "reading_deg", "valid": "valid"}


@dataclass(frozen=True)
class SensorLogData:
    """A sensor log: time (s), reference and reading (rad), validity, optional confidence."""

    t: np.ndarray
    reference: np.ndarray
    reading: np.ndarray
    valid: np.ndarray | None
    confidence: np.ndarray | None = None


def make_log(
    sc: Scenario, *, run: int = 0, seed: int | None = None, allow_code: bool = False
) -> SensorLogData:
    """Simulate run ``run`` of a scenario and record every delivered frame."""
    setup = build_setup(sc)
    ctrl = make_controller(sc.controller, allow_code=allow_code, scenario=sc)
    got = {}

    def frames(stepper, rows) -> None:
        cam = stepper.camera
        value, valid, conf = cam.frame_readings()
        deliver = cam.deliver_step[0]
        keep = deliver <= setup.n_steps
        d = deliver[keep]
        got["log"] = SensorLogData(
            t=d * setup.dt,
            reference=stepper.rec_bank[d, 0].copy(),
            reading=np.where(valid[0, keep], value[0, keep], np.nan),
            valid=valid[0, keep].copy(),
            confidence=None if conf is None else conf[0, keep].copy(),
        )

    run_batch(setup, ctrl, seed=sc.run.seed if seed is None else seed, run_indices=[run], on_done=frames)
    return got["log"]


def write_log(path: Path, log: SensorLogData) -> None:
    """Write a log as CSV (degrees), atomically (temp file, then rename)."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", dir=path.parent)
    try:
        with os.fdopen(fd, "w", newline="") as f:
            w = csv.writer(f, lineterminator="\n")
            cols = ["t_s", "reference_deg", "reading_deg", "valid"]
            if log.confidence is not None:
                cols.append("confidence")
            w.writerow(cols)
            for i in range(log.t.size):
                r = log.reading[i]
                row = [
                    f"{log.t[i]:.6f}",
                    f"{math.degrees(log.reference[i]):.6f}",
                    "" if not math.isfinite(r) else f"{math.degrees(r):.6f}",
                    "1" if log.valid is None or log.valid[i] else "0",
                ]
                if log.confidence is not None:
                    row.append(f"{log.confidence[i]:.4f}")
                w.writerow(row)
        os.chmod(tmp, 0o644)
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise


def read_log(
    path: str | Path,
    *,
    time_col: str = "t_s",
    reference_col: str = "reference_deg",
    reading_col: str = "reading_deg",
    valid_col: str | None = "valid",
    valid_required: bool = False,
) -> SensorLogData:
    """Read a CSV log; angles in degrees in the file, radians returned.

    Empty reading cells (or ``nan``) are readings the reader did not give.
    The validity column is optional unless ``valid_required``; it holds
    1/0, true/false or yes/no.
    """
    p = Path(path)
    try:
        text = p.read_text(encoding="utf-8-sig")
    except FileNotFoundError:
        raise LogFileError(f"{p}: no such log file") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise LogFileError(f"{p}: cannot be read as UTF-8 text ({exc.__class__.__name__})") from None
    rows = list(csv.reader(line for line in text.splitlines() if line.strip() and not line.startswith("#")))
    if not rows:
        raise LogFileError(f"{p}: is empty; allowed: a CSV file with a header row")
    header = [h.strip() for h in rows[0]]
    cols = {}
    for what, name, needed in (
        ("time", time_col, True),
        ("reference", reference_col, True),
        ("reading", reading_col, True),
        ("valid", valid_col, valid_required),
    ):
        if name is None:
            continue
        if name not in header:
            if needed:
                raise LogFileError(
                    f"{p}: {what} column {name!r} not found; "
                    f"allowed: one of {', '.join(header)} "
                    f"(choose with --{what}-col)"
                )
            continue
        cols[what] = header.index(name)
    data = rows[1:]

    def column(what: str, allow_empty: bool) -> np.ndarray:
        j = cols[what]
        out = np.empty(len(data))
        for i, row in enumerate(data):
            cell = row[j].strip() if j < len(row) else ""
            if cell == "" and allow_empty:
                out[i] = np.nan
                continue
            try:
                out[i] = float(cell)
            except ValueError:
                raise LogFileError(
                    f"{p}: row {i + 2}, column {header[j]!r} = {cell!r} is not a number; "
                    "allowed: numbers" + (" or empty" if allow_empty else "")
                ) from None
        return out

    valid = None
    if "valid" in cols:
        j = cols["valid"]
        truth = {"1": True, "0": False, "true": True, "false": False, "yes": True, "no": False}
        valid = np.empty(len(data), bool)
        for i, row in enumerate(data):
            cell = (row[j] if j < len(row) else "").strip().lower()
            if cell not in truth:
                raise LogFileError(
                    f"{p}: row {i + 2}, column {header[j]!r} = {cell!r}; allowed: 1/0, true/false, yes/no"
                )
            valid[i] = truth[cell]
    return SensorLogData(
        t=column("time", False),
        reference=np.radians(column("reference", True)),
        reading=np.radians(column("reading", True)),
        valid=valid,
    )
