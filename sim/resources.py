"""How much memory and time a batch will take, checked before it starts.

The stepping core records the bank, roll rate and aileron of every run at
every base step, and the metrics make a few copies of them while they are
computed; memory grows with runs × steps. :func:`estimate_batch` gives a
conservative figure from :data:`BYTES_PER_RUN_STEP` (measured peak resident
memory of ``rollrig run`` batches, rounded up), and :func:`check_fits`
refuses, with one line that says how much is needed and what to change,
a batch that cannot fit in the memory this machine has available.
"""

from __future__ import annotations

import os
from dataclasses import dataclass

from .errors import UserInputError

__all__ = [
    "BatchEstimate",
    "estimate_batch",
    "available_memory_bytes",
    "check_fits",
    "fmt_bytes",
    "BYTES_PER_RUN_STEP",
]

#: peak bytes per run and base step of a full-trace ``rollrig run`` (measured, rounded up)
BYTES_PER_RUN_STEP = 96
#: extra bytes per run-step when the plant state is recorded, per state
BYTES_PER_STATE = 8
#: seconds per base step of the whole batch (per-step overhead) and per run-step (measured, 2 cores)
SECONDS_PER_STEP = 40e-6
SECONDS_PER_RUN_STEP = 0.12e-6
#: fixed memory of a process that has imported numpy and scipy (bytes; from memory, not measured here)
BASE_BYTES = 150 * 2**20


@dataclass(frozen=True)
class BatchEstimate:
    """Expected peak memory (bytes) and run time (s) of a batch."""

    runs: int
    steps: int
    bytes: float
    seconds: float


def estimate_batch(runs: int, steps: int, *, n_states_recorded: int = 0) -> BatchEstimate:
    """Memory and time of ``runs`` runs of ``steps`` base steps each."""
    per = BYTES_PER_RUN_STEP + BYTES_PER_STATE * n_states_recorded
    mem = BASE_BYTES + float(runs) * float(steps + 1) * per
    sec = float(steps) * (SECONDS_PER_STEP + SECONDS_PER_RUN_STEP * float(runs))
    return BatchEstimate(int(runs), int(steps), mem, sec)


def available_memory_bytes() -> float:
    """Memory available to a new allocation: ``MemAvailable`` (Linux), else physical memory."""
    try:
        with open("/proc/meminfo") as f:
            for row in f:
                if row.startswith("MemAvailable:"):
                    return float(row.split()[1]) * 1024.0
    except OSError:
        pass
    try:
        return float(os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES"))
    except (ValueError, OSError, AttributeError):
        return float("inf")


def fmt_bytes(n: float) -> str:
    """``1.5 GiB`` style."""
    for unit in ("B", "KiB", "MiB", "GiB", "TiB", "PiB"):
        if abs(n) < 1024.0 or unit == "PiB":
            return f"{n:.0f} {unit}" if unit == "B" else f"{n:.1f} {unit}"
        n /= 1024.0
    return f"{n:.1f} PiB"  # pragma: no cover


def check_fits(est: BatchEstimate, *, where: str, change: str, available: float | None = None) -> None:
    """Refuse a batch whose estimated peak memory exceeds what is available.

    Parameters
    ----------
    est : BatchEstimate
    where : str
        What is being run, for the message (a file name, an option).
    change : str
        What the user can change, for the message.
    available : float, optional
        Bytes available (default :func:`available_memory_bytes`).
    """
    avail = available_memory_bytes() if available is None else available
    if est.bytes > avail:
        runs_fit = max(0, int((avail - BASE_BYTES) / (est.bytes - BASE_BYTES) * est.runs))
        hint = f"at most about {runs_fit} runs of this length" if runs_fit >= 1 else "a shorter run"
        raise UserInputError(
            f"{where}: {est.runs} run(s) × {est.steps} steps need about {fmt_bytes(est.bytes)} of memory, "
            f"{fmt_bytes(avail)} is available; allowed: {hint} ({change})"
        )
