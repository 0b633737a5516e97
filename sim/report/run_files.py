"""The files of a ``rollrig run`` output folder."""

from __future__ import annotations

import csv
from pathlib import Path

import numpy as np
from rollrig.sim.metrics import METRIC_INFO
from rollrig.sim.runner import RunOutcome

from .outdir import manifest, write_json

__all__ = ["write_run_files", "MAX_RUNS_IN_NPZ"]

MAX_RUNS_IN_NPZ = 100
_DEG = 180.0 / np.pi


def write_run_files(
    folder: Path, out: RunOutcome, *, run_indices, command_line: list[str] | None = None
) -> list[str]:
    """Write manifest, metrics and traces into ``folder``; return file names.

    ``command_line`` is recorded in the manifest (default: ``sys.argv``).
    """
    sc, tr = out.scenario, out.trace
    written = []
    write_json(
        folder / "manifest.json",
        manifest(
            scenario_path=sc.path,
            scenario_sha256=sc.sha256,
            seed=sc.run.seed,
            runs=run_indices,
            command_line=command_line,
            extra={"title": sc.title, "duration_s": sc.run.duration_s, "base_step_s": sc.run.base_step_s},
        ),
    )
    written.append("manifest.json")

    per_run = {k: v for k, v in out.metrics.items()}
    write_json(
        folder / "metrics.json",
        {
            "units": "SI (rad, s); percentages in %",
            "run_index": tr.run_index,
            "diverged_at_s": tr.diverged_at,
            "metrics": per_run,
            "passed": out.passed,
            "summary": {k: s.__dict__ for k, s in out.summaries().items()},
            "pass_fraction": {k: p.__dict__ for k, p in out.pass_summaries().items()},
        },
    )
    written.append("metrics.json")

    keys = list(per_run)
    with open(folder / "metrics.csv", "w", newline="") as f:
        w = csv.writer(f)
        cols = []
        for k in keys:
            info = METRIC_INFO.get(k)
            cols.append(k.replace("_rad", "_deg") if info is not None and info.unit == "deg" else k)
        w.writerow(["run", *cols, *[f"pass_{c}" for c in out.passed]])
        for i in range(tr.batch):
            row = [int(tr.run_index[i])]
            for k in keys:
                info = METRIC_INFO.get(k)
                v = float(per_run[k][i])
                row.append(f"{v * (info.scale if info else 1.0):.6g}")
            row += [int(ok[i]) for ok in out.passed.values()]
            w.writerow(row)
    written.append("metrics.csv")

    with open(folder / "trace_run0.csv", "w", newline="") as f:
        w = csv.writer(f)
        w.writerow(["t_s", "bank_cmd_deg", "bank_deg", "roll_rate_deg_s", "aileron_deg"])
        data = np.column_stack(
            [tr.t, tr.bank_cmd[0] * _DEG, tr.bank[0] * _DEG, tr.roll_rate[0] * _DEG, tr.aileron[0] * _DEG]
        )
        w.writerows(np.char.mod("%.6g", data).tolist())
    with open(folder / "controller_run0.csv", "w", newline="") as f:
        w = csv.writer(f)
        w.writerow(["t_s", "bank_reading_deg", "valid", "age_s", "aileron_cmd_deg"])
        for row in zip(
            tr.t_ctrl, tr.bank_meas[0] * _DEG, tr.valid[0], tr.age[0], tr.aileron_cmd[0] * _DEG, strict=True
        ):
            w.writerow([f"{row[0]:.6g}", f"{row[1]:.6g}", int(row[2]), f"{row[3]:.6g}", f"{row[4]:.6g}"])
    written += ["trace_run0.csv", "controller_run0.csv"]

    arrays = {"t_s": tr.t, "t_ctrl_s": tr.t_ctrl, "run_index": tr.run_index, "diverged_at_s": tr.diverged_at}
    if tr.batch <= MAX_RUNS_IN_NPZ:
        arrays.update(
            bank_cmd_rad=tr.bank_cmd[0],
            bank_rad=tr.bank,
            roll_rate_rad_s=tr.roll_rate,
            aileron_rad=tr.aileron,
            bank_reading_rad=tr.bank_meas,
            valid=tr.valid,
            age_s=tr.age,
            aileron_cmd_rad=tr.aileron_cmd,
        )
    else:  # large batches: the envelope, not every run
        keep = ~tr.diverged
        q = np.array([0, 5, 25, 50, 75, 95, 100])
        arrays.update(
            percentiles=q,
            bank_cmd_rad=tr.bank_cmd[0],
            bank_percentiles_rad=np.percentile(tr.bank[keep], q, axis=0)
            if keep.any()
            else np.zeros((q.size, tr.t.size)),
        )
    np.savez_compressed(folder / "trace.npz", **arrays)
    written.append("trace.npz")
    return written
