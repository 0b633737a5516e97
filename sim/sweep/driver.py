"""Run a planned sweep into its folder: resume, execute, then write the table,
plots and manifest."""

from __future__ import annotations

import signal
import time
from collections.abc import Callable
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path

from rollrig.sim.report.outdir import manifest, write_json

from .execute import connect_dask, default_workers, run_dask, run_local, run_pool
from .plan import SweepPlan
from .plots import write_sweep_plots
from .store import SweepStore
from .table import columns, write_tables

__all__ = ["SweepResult", "run_sweep", "finish_folder"]


@dataclass(frozen=True)
class SweepResult:
    """What a sweep did.

    Attributes
    ----------
    folder : Path
    rows : list of dict
        Every point's row, sorted by point id.
    resumed : int
        Points already finished when this call started.
    computed : int
        Points computed by this call.
    elapsed_s : s
        Wall time of this call.
    files : list of str
    """

    folder: Path
    rows: list[dict]
    resumed: int
    computed: int
    elapsed_s: float
    files: list[str]


@contextmanager
def _sigterm_as_interrupt():
    """SIGTERM ends the sweep like Ctrl-C (finished points are already on disk)."""

    def handler(signum, frame):
        raise KeyboardInterrupt

    try:
        old = signal.signal(signal.SIGTERM, handler)
    except ValueError:  # not the main thread
        yield
        return
    try:
        yield
    finally:
        signal.signal(signal.SIGTERM, old)


def run_sweep(
    plan: SweepPlan,
    folder: Path,
    scenario_text: str,
    *,
    restart: bool = False,
    workers: int | None = 1,
    dask: str | None = None,
    dask_timeout_s: float = 10.0,
    metric: str | None = None,
    command_line: list[str] | None = None,
    progress: Callable[[int, int], None] | None = None,
) -> SweepResult:
    """Run the points of ``plan`` that ``folder`` does not hold yet, then write the results.

    Parameters
    ----------
    plan : SweepPlan
    folder : Path
        Sweep folder (created, or resumed when it holds the same sweep).
    scenario_text : str
        The scenario file's text (kept in the folder for the report).
    restart : bool
        Start over when the folder holds a different sweep (or the same one).
    workers : int or None
        1: this process; n > 1: a pool of n processes; ``None``: one per core.
    dask : str, optional
        Address of an existing Dask scheduler (then ``workers`` is ignored).
    dask_timeout_s : s
        How long to wait for the scheduler to answer.
    metric : str, optional
        Column drawn by the plots (default: the pass/settled fraction).
    progress : callable, optional
        ``progress(done, total)`` after every chunk.
    """
    t0 = time.perf_counter()
    client = connect_dask(dask, dask_timeout_s) if dask else None
    store = SweepStore(folder)
    try:
        resumed = store.open(plan.definition, scenario_text, restart=restart)
        done = set(store.finished())
        todo = plan.chunks_without(done)
        total = plan.n_points
        count = [len(done)]
        if progress:
            progress(count[0], total)

        def on_rows(rows: list[dict]) -> None:
            fresh = [r for r in rows if r["point"] not in done]
            store.append(fresh)
            done.update(r["point"] for r in fresh)
            count[0] = len(done)
            if progress:
                progress(count[0], total)

        with _sigterm_as_interrupt():
            if client is not None:
                tag = plan.definition["coords_sha256"][:8] + plan.definition["scenario_sha256_canonical"][:8]
                run_dask(todo, on_rows, client, tag=tag)
            else:
                n = default_workers() if workers is None else workers
                if n <= 1 or len(todo) <= 1:
                    run_local(todo, on_rows)
                else:
                    run_pool(todo, on_rows, min(n, len(todo)))
        rows = sorted(store.finished().values(), key=lambda r: r["point"])
        files = finish_folder(plan, folder, rows, metric=metric, command_line=command_line)
    finally:
        store.close()
        if client is not None:
            client.close()
    return SweepResult(
        folder=Path(folder),
        rows=rows,
        resumed=resumed,
        computed=len(rows) - resumed,
        elapsed_s=time.perf_counter() - t0,
        files=files,
    )


def finish_folder(
    plan: SweepPlan, folder: Path, rows: list[dict], *, metric: str | None, command_line: list[str] | None
) -> list[str]:
    """Table, plots and manifest of a finished sweep."""
    from rollrig.sim.scenario import parse_scenario

    folder = Path(folder)
    files = write_tables(folder, rows, plan.keys)
    cols = columns(rows, plan.keys)
    files += write_sweep_plots(folder, rows, cols, plan.axes, plan.definition["judge"], metric)
    sc = parse_scenario(plan.doc, file=plan.file)
    write_json(
        folder / "manifest.json",
        manifest(
            scenario_path=plan.file,
            scenario_sha256=plan.definition["scenario_sha256_canonical"],
            seed=sc.run.seed,
            runs=range(sc.run.runs),
            command_line=command_line,
            extra={
                "title": sc.title,
                "command": "sweep",
                "kind": "sweep",
                "points": plan.n_points,
                "swept_keys": plan.keys,
                "judge": plan.definition["judge"],
                "files": files,
            },
        ),
    )
    return files + ["manifest.json"]
