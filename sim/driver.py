"""One driver: run a batch of closed-loop runs on the stepping core.

:func:`run_batch` is the one drive loop. Everything that runs whole batches
(``simulate``, ``run_scenario``, sensor logs, margins by experiment, sweeps,
tuning) calls it with a setup, a controller, a seed, run indices, an optional
:class:`Perturbation` (the margin probes) and a recording level:

* ``record="full"``: the whole :class:`~rollrig.sim.trace.Trace`;
* ``record="metrics"``: only what :func:`rollrig.sim.metrics.evaluate` needs
  (true bank and aileron), turned into metrics chunk by chunk, so the memory
  does not grow with the number of runs.

Large batches are split into chunks of runs (``chunk_runs``; by default sized
from a memory budget). Run ``i`` does not depend on the batch it is in, so
the results are the same whatever the chunking.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np

from . import params as P
from .core import LoopSetup, Stepper
from .trace import Trace

__all__ = ["Perturbation", "BatchResult", "run_batch", "chunk_size", "MEMORY_BUDGET_BYTES"]

#: Default memory budget of one chunk's records (bytes).
MEMORY_BUDGET_BYTES = 1 << 30

#: Bytes per run and base step each level keeps (records; the camera's
#: per-frame arrays and the metric evaluation's temporaries come on top).
_BYTES_PER_RUN_STEP = {"full": 40, "metrics": 16}
#: Temporaries of the metrics evaluation, bytes per run and base step.
_METRIC_TEMP_BYTES = 96


@dataclass(frozen=True)
class Perturbation:
    """Margin probes at the aileron command, between controller and servo.

    Parameters
    ----------
    input_gain : 1, float or (batch,), optional
        Multiplies the command.
    input_delay_s : s, float or (batch,), optional
        Delays the command (on the base grid).
    """

    input_gain: float | np.ndarray | None = None
    input_delay_s: float | np.ndarray | None = None

    def take(self, rows: np.ndarray, batch: int) -> Perturbation:
        def cut(v):
            return None if v is None else P.per_run(v, batch, "perturbation")[rows]

        return Perturbation(cut(self.input_gain), cut(self.input_delay_s))


@dataclass(frozen=True)
class BatchResult:
    """What a batch produced.

    Attributes
    ----------
    trace : Trace or None
        The whole record (``record="full"``).
    metrics : dict of (batch,) arrays or None
        :func:`rollrig.sim.metrics.evaluate` of every run (when a metric spec
        was given).
    diverged_at : (batch,) s
        Divergence time of each run (``inf`` if none).
    run_index : (batch,) int
    seed : int
    chunks : int
        Number of chunks the batch ran in.
    """

    trace: Trace | None
    metrics: dict[str, np.ndarray] | None
    diverged_at: np.ndarray
    run_index: np.ndarray
    seed: int
    chunks: int = 1

    @property
    def batch(self) -> int:
        return int(self.run_index.size)

    @property
    def diverged(self) -> np.ndarray:
        return np.isfinite(self.diverged_at)


def chunk_size(setup: LoopSetup, runs: int, record: str, budget_bytes: int = MEMORY_BUDGET_BYTES) -> int:
    """Runs per chunk so that one chunk's records stay within ``budget_bytes``."""
    per_step = _BYTES_PER_RUN_STEP.get(record, 16) + (_METRIC_TEMP_BYTES if record == "metrics" else 0)
    per_run = per_step * (setup.n_steps + 1)
    return int(max(1, min(runs, budget_bytes // max(per_run, 1))))


def _controller_for_rows(controller, rows: np.ndarray, batch: int):
    """The controller for a chunk: a copy whose per-run configuration is cut to ``rows``."""
    cfg = getattr(controller, "cfg", None)
    if cfg is None or not dataclasses.is_dataclass(cfg) or P.batch_size_of(cfg) is None:
        return controller
    return type(controller)(P.take(P.resolve(cfg, batch), rows))


def run_batch(
    setup: LoopSetup,
    controller,
    *,
    seed: int,
    run_indices: Sequence[int] = (0,),
    perturbation: Perturbation | None = None,
    record: str = "full",
    record_states: bool = False,
    metric_spec=None,
    chunk_runs: int | None = None,
    on_done: Callable[[Stepper, np.ndarray], None] | None = None,
) -> BatchResult:
    """Run a batch of closed-loop runs.

    Parameters
    ----------
    setup : LoopSetup
        The loop (immutable; per-run parameters as ``(batch,)`` arrays).
    controller : Controller
        Reset once per chunk; a controller whose ``cfg`` holds per-run arrays
        is rebuilt per chunk with its rows.
    seed : int
    run_indices : sequence of int
        Run index of each member (its random streams).
    perturbation : Perturbation, optional
        Margin probes at the aileron command.
    record : {"full", "metrics"}
        ``full`` returns the trace; ``metrics`` keeps only what the metrics
        need and needs ``metric_spec``.
    record_states : bool
        Keep the full plant state in the trace.
    metric_spec : MetricSpec, optional
        When given, metrics are evaluated (per chunk).
    chunk_runs : int, optional
        Runs per chunk (default: one chunk for ``full``; sized from
        :data:`MEMORY_BUDGET_BYTES` for ``metrics``).
    on_done : callable, optional
        ``on_done(stepper, rows)`` after each chunk (e.g. to read the
        camera's frames for a sensor log).

    Returns
    -------
    BatchResult
    """
    from .metrics import evaluate

    if record not in ("full", "metrics"):
        raise ValueError(f"record = {record!r}; allowed: 'full', 'metrics'")
    if record == "metrics" and metric_spec is None:
        raise ValueError("record='metrics' needs a metric_spec")
    runs = np.asarray(list(run_indices), dtype=np.int64).reshape(-1)
    batch = runs.size
    try:
        fixed = setup.batch_size()
    except ValueError:
        fixed = None  # per-run arrays disagree: the stepper names the field
    if fixed is not None and fixed != batch:
        fixed = None  # run as one batch: the stepper names the field that does not fit
        chunk_runs = batch
    if chunk_runs is None:
        chunk_runs = batch if record == "full" else chunk_size(setup, batch, record)
    chunk_runs = max(1, min(int(chunk_runs), max(batch, 1)))
    if record == "full" and chunk_runs < batch:
        raise ValueError("record='full' keeps the whole trace; chunking it would not save memory")
    pert = perturbation or Perturbation()

    traces, metrics_parts, div_parts = [], [], []
    n_chunks = 0
    for lo in range(0, batch, chunk_runs):
        rows = np.arange(lo, min(lo + chunk_runs, batch))
        whole = rows.size == batch
        sub_setup = setup if whole or fixed is None else setup.take(rows)
        ctrl = controller if whole else _controller_for_rows(controller, rows, batch)
        p = pert if whole else pert.take(rows, batch)
        st = Stepper(sub_setup)
        obs = st.reset(
            seed,
            runs[rows],
            record=record,
            record_states=record_states,
            input_gain=p.input_gain,
            input_delay_s=p.input_delay_s,
        )
        ctrl.reset(st.batch)
        while obs is not None:
            obs = st.advance(ctrl.step(obs))
        n_chunks += 1
        if on_done is not None:
            on_done(st, rows)
        div_parts.append(st.diverged_at.copy())
        if record == "full":
            tr = st.trace()
            traces.append(tr)
            if metric_spec is not None:
                metrics_parts.append(evaluate(tr, metric_spec))
        else:
            metrics_parts.append(_chunk_metrics(st, metric_spec))
        del st
    trace = traces[0] if traces else None
    metrics = None
    if metrics_parts:
        metrics = {k: np.concatenate([m[k] for m in metrics_parts]) for k in metrics_parts[0]}
    return BatchResult(
        trace=trace,
        metrics=metrics,
        diverged_at=np.concatenate(div_parts) if div_parts else np.zeros(0),
        run_index=runs,
        seed=int(seed),
        chunks=n_chunks,
    )


def _chunk_metrics(st: Stepper, spec) -> dict[str, np.ndarray]:
    """Metrics of a chunk recorded at the ``metrics`` level, from bank and aileron only.

    Evaluated on slices of runs so the evaluation's temporaries stay small.
    """
    from .metrics import evaluate

    s = st.setup
    n_t = s.n_steps + 1
    t = np.arange(n_t) * s.dt
    cmd = np.asarray(st._cmd)
    batch = st.batch
    part = max(1, min(batch, (MEMORY_BUDGET_BYTES // 2) // (_METRIC_TEMP_BYTES * n_t)))
    out = []
    for lo in range(0, batch, part):
        r = slice(lo, min(lo + part, batch))
        m = r.stop - r.start
        tr = Trace(
            t=t,
            bank_cmd=np.broadcast_to(cmd, (m, n_t)) if cmd.ndim == 1 else cmd[r],
            bank=st.rec_bank[:, r].T,
            roll_rate=None,
            aileron=st.rec_ail[:, r].T,
            t_ctrl=None,
            bank_meas=None,
            valid=None,
            age=None,
            aileron_cmd=None,
            states=None,
            state_names=s.plant.state_names,
            diverged_at=st.diverged_at[r].copy(),
            run_index=st.runs[r].copy(),
            seed=st.seed,
        )
        out.append(evaluate(tr, spec))
    return {k: np.concatenate([o[k] for o in out]) for k in out[0]}
