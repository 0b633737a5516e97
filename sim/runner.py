"""Run a scenario's batch and judge it: trace → metrics → pass/fail.

The one place where a :class:`~sim.scenario.Scenario` meets the stepping core,
the metrics and the criteria; the CLI, comparison and tuning all call it.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from rollrig.controllers.base import Controller

from .build import build_setup, make_controller
from .driver import run_batch
from .metrics import METRIC_INFO, MetricSpec, StepSegment, evaluate
from .scenario import Scenario
from .stats import MetricSummary, PassSummary, pass_fraction, summarize
from .trace import Trace

__all__ = ["RunOutcome", "metric_spec", "judge", "run_scenario", "CRITERIA_LABELS"]

CRITERIA_LABELS = {
    "bank_limit": "bank within limit, no divergence",
    "settling": "settling time ≤ limit",
    "overshoot": "overshoot ≤ limit",
    "rms_error": "RMS error ≤ limit",
    "steady_error": "steady-state error ≤ limit",
}


@dataclass(frozen=True)
class RunOutcome:
    """A judged batch.

    Attributes
    ----------
    scenario : Scenario
    trace : Trace
    metrics : dict of (batch,) arrays, SI
    passed : dict of criterion name -> (batch,) bool
    """

    scenario: Scenario
    trace: Trace
    metrics: dict[str, np.ndarray]
    passed: dict[str, np.ndarray]

    @property
    def all_passed(self) -> np.ndarray:
        """(batch,) bool: every criterion met."""
        out = np.ones(self.trace.batch, dtype=bool)
        for ok in self.passed.values():
            out &= ok
        return out

    def summaries(self) -> dict[str, MetricSummary]:
        """Monte Carlo statistics of every numeric metric."""
        out = {}
        div = self.trace.diverged
        for key, values in self.metrics.items():
            info = METRIC_INFO.get(key)
            if info is None or info.kind != "value":
                continue
            out[key] = summarize(values, self.trace.run_index, info.larger_is_worse, div)
        return out

    def pass_summaries(self) -> dict[str, PassSummary]:
        """Fraction of runs meeting each criterion, with a Wilson interval."""
        div = self.trace.diverged
        out = {name: pass_fraction(ok, div) for name, ok in self.passed.items()}
        out["all"] = pass_fraction(self.all_passed, div)
        return out


def metric_spec(sc: Scenario) -> MetricSpec:
    """Metric settings from a scenario's command profile and criteria."""
    times = list(sc.command.times_s)
    banks = list(sc.command.banks_rad)
    end = sc.run.duration_s
    bank0 = float(sc.x0[sc.plant.phi_index])
    steps = []
    prev = bank0
    for i, (t0, b) in enumerate(zip(times, banks, strict=True)):
        t1 = times[i + 1] if i + 1 < len(times) else end
        if t0 > 0 or abs(b - prev) > 1e-12:
            if t0 < end:
                steps.append(StepSegment(t_step_s=t0, t_end_s=t1, bank_from_rad=prev, bank_to_rad=b))
        prev = b
    c = sc.criteria
    return MetricSpec(
        steps=tuple(steps),
        settle_band_frac=c.settle_band_frac,
        settle_band_rad=c.settle_band_rad,
        hold_band_rad=c.hold_band_rad,
        bank_limit_rad=c.bank_limit_rad,
        aileron_limit_rad=sc.actuator.limit_rad,
        aileron_rate_limit_rad_s=sc.actuator.rate_limit_rad_s,
    )


def judge(metrics: dict[str, np.ndarray], sc: Scenario) -> dict[str, np.ndarray]:
    """Pass/fail of each criterion the scenario sets, per run."""
    c = sc.criteria
    passed = {"bank_limit": ~metrics["limit_exceeded"].astype(bool) & ~metrics["diverged"].astype(bool)}
    checks = (
        ("settling", "settling_time_s", c.max_settling_s),
        ("overshoot", "overshoot_pct", c.max_overshoot_pct),
        ("rms_error", "rms_error_rad", c.max_rms_error_rad),
        ("steady_error", "steady_state_error_rad", c.max_steady_error_rad),
    )
    for name, key, limit in checks:
        if limit is not None and key in metrics:
            passed[name] = metrics[key] <= limit
    return passed


def run_scenario(
    sc: Scenario,
    *,
    controller: Controller | None = None,
    allow_code: bool = False,
    run_indices: Sequence[int] | None = None,
    record_states: bool = False,
) -> RunOutcome:
    """Simulate a scenario's Monte Carlo batch and judge it.

    Parameters
    ----------
    sc : Scenario
    controller : Controller, optional
        Overrides the scenario's controller (comparison, tuning, policies).
    allow_code : bool
        Permission to import a user controller class named in the scenario.
    run_indices : sequence of int, optional
        Which runs to simulate (default ``range(sc.run.runs)``); a single index
        replays one run of a Monte Carlo set exactly.
    """
    ctrl = (
        controller
        if controller is not None
        else make_controller(sc.controller, allow_code=allow_code, scenario=sc)
    )
    runs = range(sc.run.runs) if run_indices is None else run_indices
    res = run_batch(build_setup(sc), ctrl, seed=sc.run.seed, run_indices=runs, record_states=record_states)
    trace = res.trace
    metrics = evaluate(trace, metric_spec(sc))
    return RunOutcome(scenario=sc, trace=trace, metrics=metrics, passed=judge(metrics, sc))
