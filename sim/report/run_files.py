"""The files of a ``rollrig run`` output folder.

Per run: ``metrics.csv`` (one row per run, one value per cell, SI units in
the header names, empty cell = never reached) and ``metrics.npz`` (the same
columns as arrays, ``inf`` = never reached). Summaries: ``metrics.json``
(statistics and pass fractions, ``null`` = never reached or no run to
summarise). Traces: ``trace.npz`` (every run up to :data:`MAX_RUNS_IN_NPZ`
runs, above that the percentile envelope of the runs that did not diverge)
and, for the first run and the run the plots show, ``trace_run<N>.csv`` and
``controller_run<N>.csv`` named by run index ``N``. Nothing per run is
written as JSON: CSV and arrays are fast to write and to read.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
from rollrig.sim.metrics import METRIC_INFO
from rollrig.sim.runner import RunOutcome

from .metric_keys import file_key, si_unit
from .outdir import manifest, write_json
from .run_tables import _summary_record, divergence_note

__all__ = ["write_run_files", "MAX_RUNS_IN_NPZ", "ENVELOPE_PERCENTILES", "worst_run", "envelope"]

MAX_RUNS_IN_NPZ = 100
ENVELOPE_PERCENTILES = (0, 5, 25, 50, 75, 95, 100)
_DEG = 180.0 / np.pi


def worst_run(outcome: RunOutcome) -> tuple[int, str]:
    """Row of the run the plots show, and why: the first diverged run, else the largest RMS error."""
    tr = outcome.trace
    if tr.diverged.any():
        return int(np.argmin(tr.diverged_at)), "first to diverge"
    return int(np.argmax(outcome.metrics["rms_error_rad"])), "largest RMS error"


def _column_text(v: np.ndarray, fmt: str = "%.17g") -> list[str]:
    """CSV cells of one column: full precision, empty for non-finite, 1/0 for booleans."""
    if v.dtype == bool:
        return np.where(v, "true", "false").tolist()
    if np.issubdtype(v.dtype, np.integer):
        return v.astype(str).tolist()
    out = np.char.mod(fmt, v).astype(object)
    out[~np.isfinite(v)] = ""
    return out.tolist()


def _write_csv(path: Path, header: list[str], columns: list[np.ndarray], fmt: str = "%.17g") -> None:
    """CSV of equal-length columns; float rows are formatted with one ``%`` per row (fast)."""
    cols = [np.asarray(c) for c in columns]
    lines = [",".join(header)]
    if all(c.dtype.kind == "f" for c in cols):
        data = np.column_stack(cols)
        finite = np.isfinite(data).all(axis=1)
        row_fmt = ",".join([fmt] * len(cols))
        body = [row_fmt % tuple(r) for r in data.tolist()]
        if not finite.all():  # rows holding a never-reached value: empty cells there
            cells = [_column_text(c, fmt) for c in cols]
            for i in np.flatnonzero(~finite):
                body[i] = ",".join(cell[i] for cell in cells)
        lines.extend(body)
    else:
        cells = [_column_text(c, fmt) for c in cols]
        lines.extend(",".join(row) for row in zip(*cells, strict=True))
    path.write_text("\n".join(lines) + "\n")


def envelope(values: np.ndarray, q) -> np.ndarray:
    """Percentiles over axis 0 of ``(runs, n_t)`` by numpy's linear method, from one sort.

    Equal to ``np.percentile(values, q, axis=0)`` for finite data, at a
    fraction of its cost for many percentiles (it partitions once per ``q``).
    """
    x = np.sort(np.ascontiguousarray(values.T), axis=1)  # (n_t, runs)
    h = (x.shape[1] - 1) * np.asarray(q, float) / 100.0
    lo = np.floor(h).astype(int)
    hi = np.minimum(lo + 1, x.shape[1] - 1)
    frac = h - lo
    return (x[:, lo] + frac * (x[:, hi] - x[:, lo])).T


def _trace_csvs(folder: Path, tr, row: int) -> list[str]:
    n = int(tr.run_index[row])
    f1, f2 = f"trace_run{n}.csv", f"controller_run{n}.csv"
    _write_csv(
        folder / f1,
        ["t_s", "bank_cmd_deg", "bank_deg", "roll_rate_deg_s", "aileron_deg"],
        [
            tr.t,
            tr.bank_cmd[row] * _DEG,
            tr.bank[row] * _DEG,
            tr.roll_rate[row] * _DEG,
            tr.aileron[row] * _DEG,
        ],
        fmt="%.9g",
    )
    _write_csv(
        folder / f2,
        ["t_s", "bank_reading_deg", "valid", "age_s", "aileron_cmd_deg"],
        [
            tr.t_ctrl,
            tr.bank_meas[row] * _DEG,
            tr.valid[row].astype(float),
            tr.age[row],
            tr.aileron_cmd[row] * _DEG,
        ],
        fmt="%.9g",
    )
    return [f1, f2]


def write_run_files(
    folder: Path, out: RunOutcome, *, run_indices, command_line: list[str] | None = None
) -> list[str]:
    """Write manifest, metrics and traces into ``folder``; return file names.

    ``command_line`` is recorded in the manifest (default: ``sys.argv``).
    """
    sc, tr = out.scenario, out.trace
    written = []
    div = tr.diverged

    # per run: CSV and arrays, SI, the unit in every name
    keys = [k for k in out.metrics if k not in ("diverged", "diverged_at_s")]
    names = ["run", "diverged", "diverged_at_s", *[file_key(k) for k in keys]]
    names += [f"pass_{c}" for c in out.passed] + ["pass_all"]
    cols = [tr.run_index, div, tr.diverged_at, *[np.asarray(out.metrics[k]) for k in keys]]
    cols += [np.asarray(ok, bool) for ok in out.passed.values()] + [out.all_passed]
    _write_csv(folder / "metrics.csv", names, cols)
    np.savez(folder / "metrics.npz", **dict(zip(names, cols, strict=True)))
    written += ["metrics.csv", "metrics.npz"]

    # summaries: JSON
    summaries = {}
    for k, s in out.summaries().items():
        rec = _summary_record(k, s)
        summaries[rec.pop("metric")] = rec
    write_json(
        folder / "metrics.json",
        {
            "runs": tr.batch,
            "n_diverged": int(div.sum()),
            "first_diverged_at_s": float(np.min(tr.diverged_at)) if div.any() else None,
            "divergence": divergence_note(tr.run_index, tr.diverged_at),
            "units": {file_key(k): si_unit(k) for k in keys if METRIC_INFO.get(k)},
            "summary": summaries,
            "pass_fraction": {k: p.__dict__ for k, p in out.pass_summaries().items()},
            "per_run": "metrics.csv, metrics.npz",
        },
    )
    written.append("metrics.json")

    # traces: the first run and the run the plots show, by run index
    worst, why = worst_run(out)
    rows = [0] if worst == 0 else [0, worst]
    for r in rows:
        written += _trace_csvs(folder, tr, r)

    arrays = {"t_s": tr.t, "t_ctrl_s": tr.t_ctrl, "run_index": tr.run_index, "diverged_at_s": tr.diverged_at}
    arrays["bank_cmd_rad"] = tr.bank_cmd[0]
    if tr.batch <= MAX_RUNS_IN_NPZ:
        content = "every run"
        arrays.update(
            bank_rad=tr.bank,
            roll_rate_rad_s=tr.roll_rate,
            aileron_rad=tr.aileron,
            bank_reading_rad=tr.bank_meas,
            valid=tr.valid,
            age_s=tr.age,
            aileron_cmd_rad=tr.aileron_cmd,
        )
    elif (~div).any():
        content = (
            f"percentile envelope of bank over the {int((~div).sum())} runs that did not diverge "
            f"(more than {MAX_RUNS_IN_NPZ} runs: per-run traces not kept)"
        )
        q = np.asarray(ENVELOPE_PERCENTILES)
        arrays.update(percentiles=q, bank_percentiles_rad=envelope(tr.bank[~div], q))
    else:
        content = f"no traces: all {tr.batch} runs diverged and there are more than {MAX_RUNS_IN_NPZ}"
    np.savez(folder / "trace.npz", **arrays)
    written.append("trace.npz")

    write_json(
        folder / "manifest.json",
        manifest(
            scenario_path=sc.path,
            scenario_sha256=sc.sha256,
            seed=sc.run.seed,
            runs=run_indices,
            command_line=command_line,
            extra={
                "title": sc.title,
                "duration_s": sc.run.duration_s,
                "base_step_s": sc.run.base_step_s,
                "trace_npz": content,
                "plotted_run": {"run": int(tr.run_index[worst]), "picked_as": why},
            },
        ),
    )
    written.append("manifest.json")
    return written
