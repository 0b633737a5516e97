"""Where chunks run: this process, a local process pool, or a Dask cluster.

Every executor hands each finished chunk's rows to ``on_rows`` in the
calling process, which appends them to the sweep folder; rows carry their
point id, so a chunk that a cluster recomputes after losing a worker can
never be counted twice (the folder keeps the first row of each point).
"""

from __future__ import annotations

import os
from collections.abc import Callable, Iterable

from rollrig.sim.errors import UserInputError

from .chunk import run_chunk

__all__ = ["run_local", "run_pool", "run_dask", "connect_dask", "default_workers", "DASK_TIMEOUT_S"]

#: Seconds to wait for a Dask scheduler to answer before giving up.
DASK_TIMEOUT_S = 10.0

OnRows = Callable[[list[dict]], None]


def default_workers() -> int:
    """Processes for a local pool: the cores this process may use."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # pragma: no cover - not Linux
        return max(1, os.cpu_count() or 1)


def run_local(chunks: Iterable[dict], on_rows: OnRows) -> None:
    """Run chunks one after another in this process (each chunk is one vectorised batch)."""
    for c in chunks:
        on_rows(run_chunk(c))


def run_pool(chunks: list[dict], on_rows: OnRows, workers: int) -> None:
    """Run chunks on a pool of ``workers`` processes; rows arrive as chunks finish.

    On an interrupt (Ctrl-C, SIGTERM) or an error the workers are terminated
    at once: their unfinished chunks are simply not recorded.
    """
    import multiprocessing as mp

    ctx = mp.get_context("spawn")  # no forked copy of a progress-bar thread or BLAS state
    pool = ctx.Pool(processes=workers)
    ok = False
    try:
        for rows in pool.imap_unordered(run_chunk, chunks):
            on_rows(rows)
        ok = True
    finally:
        if ok:
            pool.close()
        else:
            pool.terminate()
        pool.join()


def connect_dask(address: str, timeout_s: float = DASK_TIMEOUT_S):
    """A ``distributed.Client`` of an existing cluster (one-line error when none answers)."""
    try:
        from distributed import Client
    except ImportError:
        raise UserInputError(
            "--dask needs the Dask extra; allowed: pip install 'rollrig[dist]', or run without --dask"
        ) from None
    try:
        return Client(address, timeout=f"{timeout_s}s", set_as_default=False)
    except (OSError, TimeoutError) as exc:
        raise UserInputError(
            f"--dask {address}: no Dask scheduler answered within {timeout_s:g} s ({type(exc).__name__}); "
            "allowed: the address of a running scheduler, e.g. tcp://127.0.0.1:8786"
        ) from None
    except ValueError as exc:
        raise UserInputError(
            f"--dask {address}: not a scheduler address ({exc}); allowed: tcp://HOST:PORT"
        ) from None


def run_dask(chunks: list[dict], on_rows: OnRows, client, *, tag: str) -> None:
    """Submit every chunk to a Dask cluster; rows arrive as chunks finish.

    Chunks are plain dicts (the scenario document and the points' values);
    the workers import rollrig and rebuild the scenarios. A worker lost
    mid-chunk is handled by the scheduler, which runs the chunk again on
    another worker; the keys name the sweep and the chunk's first point.
    """
    from distributed import as_completed

    futures = [
        client.submit(run_chunk, c, key=f"rollrig-sweep-{tag}-{c['points'][0][0]}", pure=False, retries=2)
        for c in chunks
    ]
    try:
        with client.as_current():  # as_completed looks for a current client
            for fut in as_completed(futures):
                on_rows(fut.result())
    finally:
        for fut in futures:
            fut.release()
