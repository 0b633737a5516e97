"""Candidates × cases × seeds as batches of the stepping core.

Every run of the grid is one run of a core batch (:func:`sim.driver.run_batch`,
recording only what the metrics need) with its own parameters:
the PID gains (``kp``, ``ki_per_s``, ``kd_s``) and the per-run camera fields
travel as ``(batch,)`` arrays, so a whole population with every degradation
case and seed is one batch (split into chunks of at most ``chunk_runs``
runs). Axes the core cannot yet take per run (:data:`PER_RUN_AXES` lists the
ones it can) split the grid into one batch per distinct combination of their
values: a loop over *cases*, never over candidates.

Run order inside a batch is candidate-major, then case, then seed; the run
index handed to the core is the seed index, so every candidate and every
case draws the same noise, losses and turbulence (common random numbers).
"""

from __future__ import annotations

import dataclasses
import time
from dataclasses import dataclass

import numpy as np
from rollrig.controllers.pid import PIDController

from ..build import build_setup
from ..driver import run_batch
from ..runner import judge, metric_spec
from ..scenario import Scenario
from .cases import CaseSet, scenario_for_case

__all__ = ["GridResult", "PER_RUN_AXES", "simulate_grid", "controller_for"]


def _per_run_axes() -> frozenset[str]:
    """Degradation axes whose fields the stepping core takes as one value per run.

    Read from the core's own table of per-run fields (:data:`sim.params.PER_RUN`)
    where it has one; a core without it takes latency and losses only.
    """
    try:
        from ..params import PER_RUN
    except ImportError:
        return frozenset({"latency_s", "loss_rate"})
    cam = set(PER_RUN.get("CameraConfig", ()))
    burst = set(PER_RUN.get("BurstConfig", ()))
    field = {
        "latency_s": "latency_s" in cam,
        "noise_deg": "noise_rad" in cam,
        "quantization_deg": "quantization_rad" in cam,
        "bias_deg": "bias_rad" in cam,
        "scale": "scale" in cam,
        "loss_rate": "dropout_prob" in cam and "loss_rate" in burst,
        "burst_frames": "mean_burst_frames" in burst,
        "turbulence_scale": {"sigma_v_mps", "sigma_w_mps"} <= set(PER_RUN.get("DrydenParams", ())),
    }
    return frozenset(k for k, ok in field.items() if ok)


#: Degradation axes the stepping core takes as one value per run (``frame_rate_hz``
#: sets the frame schedule's shape and is shared by a batch).
PER_RUN_AXES = _per_run_axes()

#: Metrics kept from each run (the score terms and what the report shows).
KEPT = (
    "itae",
    "overshoot_pct",
    "settling_time_s",
    "aileron_rms_rad",
    "rms_error_rad",
    "steady_state_error_rad",
    "peak_abs_bank_rad",
    "pct_time_at_limit",
)


@dataclass
class GridResult:
    """Metrics of a candidates × cases × seeds grid.

    Attributes
    ----------
    metrics : dict of (P, C, S) float arrays, SI (the keys of :data:`KEPT` present)
    passed : (P, C, S) bool, every [criteria] limit met
    bank_ok : (P, C, S) bool, bank within its limit and no divergence
    wall_s : s, time spent simulating and evaluating
    batches : int, core batches run
    """

    metrics: dict[str, np.ndarray]
    passed: np.ndarray
    bank_ok: np.ndarray
    wall_s: float
    batches: int

    @property
    def runs(self) -> int:
        return int(self.passed.size)


def controller_for(sc: Scenario, names: tuple[str, ...], gains: np.ndarray) -> PIDController:
    """The scenario's PID with the named gains replaced (scalars or ``(batch,)`` arrays)."""
    changes = {n: gains[..., j] if np.ndim(gains) > 1 else gains[j] for j, n in enumerate(names)}
    return PIDController(dataclasses.replace(sc.controller.pid, **changes))


def simulate_grid(
    sc: Scenario,
    names: tuple[str, ...],
    gains: np.ndarray,
    cases: CaseSet,
    *,
    chunk_runs: int = 4096,
) -> GridResult:
    """Simulate every candidate on every case with every seed.

    Parameters
    ----------
    sc : Scenario
        The scenario (its [criteria] judge the runs).
    names : tuple of str
        Gain names, columns of ``gains``.
    gains : (P, G) float
        Candidate gains (SI as in [controller]).
    cases : CaseSet
    chunk_runs : int
        Largest core batch.

    Returns
    -------
    GridResult
    """
    gains = np.atleast_2d(np.asarray(gains, float))
    n_p, n_c, n_s = gains.shape[0], cases.n_cases, cases.seed_indices.size
    spec = metric_spec(sc)
    out = {k: np.full((n_p, n_c, n_s), np.inf) for k in KEPT}
    present: set[str] = set()
    passed = np.zeros((n_p, n_c, n_s), bool)
    bank_ok = np.zeros((n_p, n_c, n_s), bool)
    static = [j for j, n in enumerate(cases.names) if n not in PER_RUN_AXES]
    dynamic = [j for j, n in enumerate(cases.names) if n in PER_RUN_AXES]
    keys = [tuple(cases.values[c, static].tolist()) for c in range(n_c)]
    t0 = time.perf_counter()
    batches = 0
    for key in dict.fromkeys(keys):  # first-seen order: deterministic
        group = np.array([c for c in range(n_c) if keys[c] == key])
        static_sc = scenario_for_case(sc, {cases.names[j]: v for j, v in zip(static, key, strict=True)})
        pp, cc, ss = (a.ravel() for a in np.meshgrid(np.arange(n_p), group, np.arange(n_s), indexing="ij"))
        run_sc = scenario_for_case(static_sc, {cases.names[j]: cases.values[cc, j] for j in dynamic})
        res = run_batch(
            build_setup(run_sc),
            controller_for(sc, names, gains[pp]),
            seed=sc.run.seed,
            run_indices=cases.seed_indices[ss],
            record="metrics",
            metric_spec=spec,
            chunk_runs=chunk_runs,
        )
        m = res.metrics
        ok = judge(m, sc)
        for k in KEPT:
            if k in m:
                out[k][pp, cc, ss] = m[k]
                present.add(k)
        bank_ok[pp, cc, ss] = ok["bank_limit"]
        allok = np.ones(pp.size, bool)
        for v in ok.values():
            allok &= v
        passed[pp, cc, ss] = allok
        batches += res.chunks
    metrics = {k: v for k, v in out.items() if k in present}
    return GridResult(metrics, passed, bank_ok, time.perf_counter() - t0, batches)
