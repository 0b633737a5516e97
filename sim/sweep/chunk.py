"""Simulate one chunk of sweep points and summarise each point.

A chunk is plain data (a JSON-like dict, see :func:`run_chunk`): the base
scenario document, the swept keys and the points' values. Any worker — this
process, a process pool, a Dask worker — rebuilds the scenarios from it, so
no user code or live object travels. Points of one chunk differ only in keys
the core takes per run (:func:`~rollrig.sim.sweep.keys.signature`), so
the whole chunk is one batch: point ``i`` occupies members
``i·runs … (i+1)·runs − 1``, and every point uses run indices ``0 … runs − 1``
of the same seed — common random numbers, so neighbouring points differ by
the parameter, not by the luck of the draws.

Judges
------
``criteria``
    the scenario's own pass/fail criteria and metrics (as ``rollrig run``).
``stability``
    the experiment of ``rollrig margins`` (empirical margins): the quiet copy
    of the scenario (:func:`rollrig.sim.analysis.empirical.quiet_scenario`;
    swept keys are kept even where the quiet copy would switch them off),
    started at a small bank with a zero command, judged by
    :func:`~rollrig.sim.analysis.empirical.settle_verdict` over the last two
    windows; runs whose camera loses frames must also end inside the
    scenario's settling band (as the margins' loss-rate search does).
"""

from __future__ import annotations

import math
from dataclasses import replace
from typing import Any

import numpy as np
from rollrig.sim.scenario import Scenario

from .keys import scenario_with, stack_per_run

__all__ = ["run_chunk", "point_scenarios", "JUDGES", "display_name"]

JUDGES = ("criteria", "stability")


def display_name(key: str) -> tuple[str, float]:
    """Column name and scale of a metric (radians shown in degrees)."""
    from rollrig.sim.metrics import METRIC_INFO

    info = METRIC_INFO.get(key)
    if info is not None and info.unit == "deg":
        return key.replace("_rad", "_deg"), info.scale
    return key, 1.0 if info is None else info.scale


def point_scenarios(payload: dict[str, Any]) -> list[Scenario]:
    """The validated scenario of every point of a chunk."""
    keys = payload["keys"]
    return [
        scenario_with(payload["doc"], dict(zip(keys, vals, strict=True)), file=payload["file"])
        for _, vals in payload["points"]
    ]


def run_chunk(payload: dict[str, Any]) -> list[dict[str, Any]]:
    """Simulate a chunk; one result row (a dict of plain values) per point.

    Parameters
    ----------
    payload : dict
        ``doc`` (scenario document with runs and seed set), ``file`` (name for
        messages), ``keys`` (swept dotted keys), ``points`` (list of
        ``[point_id, [value per key]]``), ``judge`` (see :data:`JUDGES`),
        ``stability`` (``excitation_deg``, ``window_s``, ``base_step_s``) and
        ``allow_code``.

    Returns
    -------
    list of dict
        ``point`` (id), then the swept values and the statistics (see
        :mod:`rollrig.sim.sweep.table`).
    """
    scs = point_scenarios(payload)
    keys = payload["keys"]
    runs = scs[0].run.runs
    if payload["judge"] == "stability":
        rows = _stability(scs, payload, runs)
    else:
        rows = _criteria(scs, payload, runs)
    out = []
    for (pid, vals), stats in zip(payload["points"], rows, strict=True):
        row = {"point": int(pid)}
        row.update({k: float(v) for k, v in zip(keys, vals, strict=True)})
        row["runs"] = runs
        row.update(stats)
        out.append(row)
    return out


def _criteria(scs: list[Scenario], payload: dict, runs: int) -> list[dict]:
    from rollrig.sim.build import build_setup, make_controller
    from rollrig.sim.driver import run_batch
    from rollrig.sim.metrics import METRIC_INFO
    from rollrig.sim.runner import judge, metric_spec
    from rollrig.sim.stats import pass_fraction, summarize

    sc = stack_per_run(scs, runs)
    idx = np.tile(np.arange(runs), len(scs))
    ctrl = make_controller(sc.controller, allow_code=payload.get("allow_code", False), scenario=sc)
    # metrics-only recording, chunked by the driver to its memory budget
    res = run_batch(
        build_setup(sc),
        ctrl,
        seed=sc.run.seed,
        run_indices=idx,
        record="metrics",
        metric_spec=metric_spec(sc),
    )
    metrics = res.metrics
    passed = judge(metrics, sc)
    div = res.diverged
    all_ok = np.logical_and.reduce(list(passed.values()))
    rows = []
    for i in range(len(scs)):
        s = slice(i * runs, (i + 1) * runs)
        row: dict[str, Any] = {"n_diverged": int(div[s].sum())}
        for key, values in metrics.items():
            info = METRIC_INFO.get(key)
            if info is None or info.kind != "value":
                continue
            m = summarize(values[s], idx[s], info.larger_is_worse, div[s])
            name, scale = display_name(key)
            for stat in ("mean", "ci95_low", "ci95_high", "p5", "p50", "p95", "worst"):
                row[f"{name}_{stat}"] = float(getattr(m, stat)) * scale
        passes = {name: ok[s] for name, ok in passed.items()}
        passes["all"] = all_ok[s]
        for name, ok in passes.items():
            p = pass_fraction(ok, div[s])
            row[f"pass_{name}"] = p.fraction
            row[f"pass_{name}_low"] = p.low
            row[f"pass_{name}_high"] = p.high
        rows.append(row)
    return rows


def _keep_swept(q: Scenario, sc: Scenario, keys: list[str]) -> Scenario:
    """The quiet copy ``q`` with the swept keys' values of ``sc`` put back."""
    for key in keys:
        section, _, rest = key.partition(".")
        if section == "sensor":
            if rest.startswith("bursts."):
                q = replace(q, camera=replace(q.camera, bursts=sc.camera.bursts))
            elif rest.startswith("gyro."):
                q = replace(q, gyro=sc.gyro)
            else:
                field = rest.replace("_deg", "_rad")
                if hasattr(q.camera, field):
                    q = replace(q, camera=replace(q.camera, **{field: getattr(sc.camera, field)}))
        elif section == "disturbance":
            q = replace(q, disturbances=sc.disturbances)
    return q


def _loses_frames(sc: Scenario) -> bool:
    cam = sc.camera
    bursts = cam.bursts is not None and float(np.max(cam.bursts.loss_rate)) > 0
    return bool(np.max(cam.dropout_prob) > 0 or bursts)


def _stability(scs: list[Scenario], payload: dict, runs: int) -> list[dict]:
    from rollrig.sim.analysis.empirical import quiet_scenario, settle_verdict
    from rollrig.sim.build import build_setup, make_controller
    from rollrig.sim.core import simulate
    from rollrig.sim.stats import pass_fraction

    st = payload["stability"]
    keys = payload["keys"]
    quiet = [_keep_swept(quiet_scenario(sc, st["base_step_s"]), sc, keys) for sc in scs]
    q = stack_per_run(quiet, runs)
    dt = q.run.base_step_s
    w_steps = int(round(st["window_s"] / dt))
    n_steps = 3 * w_steps
    phi0 = math.radians(st["excitation_deg"])
    setup = build_setup(q.with_run(duration_s=n_steps * dt))
    x0 = np.zeros(q.plant.n_states)
    x0[q.plant.phi_index] = phi0
    setup = replace(setup, bank_cmd=np.zeros(n_steps + 1), x0=x0)
    ctrl = make_controller(q.controller, allow_code=payload.get("allow_code", False), scenario=q)
    idx = np.tile(np.arange(runs), len(scs))
    trace = simulate(setup, ctrl, seed=q.run.seed, run_indices=idx)
    frac = q.criteria.settle_band_frac
    band_frac = float(frac) if frac is not None else 0.05
    band = np.repeat([band_frac * phi0 if _loses_frames(sc) else math.inf for sc in quiet], runs)
    settled, growth = settle_verdict(
        trace.bank, trace.roll_rate, w_steps, phi0, q.criteria.bank_limit_rad, trace.diverged, band
    )
    rows = []
    for i in range(len(scs)):
        s = slice(i * runs, (i + 1) * runs)
        p = pass_fraction(settled[s])
        g = growth[s]
        rows.append(
            {
                "n_diverged": int(trace.diverged[s].sum()),
                "settled": p.fraction,
                "settled_low": p.low,
                "settled_high": p.high,
                "growth_p50": float(np.median(np.nan_to_num(g, nan=np.inf))),
            }
        )
    return rows
