"""Judge a policy as ``rollrig run`` judges any controller: the scenario's Monte Carlo runs and criteria."""

from __future__ import annotations

import numpy as np
from rollrig.controllers.policy import ObservationLayout, PolicyController, PolicyNet

from ..runner import RunOutcome, run_scenario
from ..scenario import Scenario

__all__ = ["judge_policy", "pass_rate"]


def judge_policy(
    sc: Scenario, net: PolicyNet, layout: ObservationLayout, runs: int | None = None
) -> RunOutcome:
    """Run the scenario's Monte Carlo set (or its first ``runs`` runs) with the policy as controller."""
    ctrl = PolicyController(net, layout, sc.actuator.limit_rad)
    n = sc.run.runs if runs is None else runs
    return run_scenario(sc, controller=ctrl, run_indices=range(n))


def pass_rate(outcome: RunOutcome) -> float:
    """Fraction of runs meeting every criterion."""
    return float(np.mean(outcome.all_passed))
