"""The published roll-loop design rule, used as a starting point for the search.

Beard & McLain, *Small Unmanned Aircraft: Theory and Practice* (Princeton
University Press, 2012), §6.3.1: for the roll dynamics
``φ/δa = aφ2 / (s (s + aφ1))`` and a PD loop ``δa = kp (φc − φ) − kd p``, the
closed loop is ``s² + (aφ1 + aφ2 kd) s + aφ2 kp``. Choosing the proportional
gain so that the largest expected bank error just saturates the aileron,

    kp = δa_max / eφ_max · sign(aφ2),   ωn = √(|aφ2| δa_max / eφ_max),
    kd = (2 ζ ωn − aφ1) / aφ2,          ζ ≈ 0.707.

A lateral model reduces to this form by keeping only the roll-rate row's own
terms, ``aφ1 = −A[p, p]`` and ``aφ2 = B[p, aileron]`` (the book's own
reduction: sideslip and yaw-rate coupling become a disturbance); that is exact
for the ``roll-only`` preset.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from ..runner import metric_spec
from ..scenario import Scenario

__all__ = ["RollRule", "roll_design_rule", "DEFAULT_ZETA", "DEFAULT_ERROR_RAD"]

#: Damping ratio of the rule (Beard & McLain 2012, §6.3.1).
DEFAULT_ZETA = 0.707
#: Largest expected bank error when the command has no step (common practice: 15°).
DEFAULT_ERROR_RAD = math.radians(15.0)


@dataclass(frozen=True)
class RollRule:
    """The rule's gains and what they were computed from.

    Attributes
    ----------
    kp : rad/rad
    kd_s : s
    a1_per_s, a2_per_s2 : roll-only coefficients used
    error_max_rad : rad, largest expected bank error
    aileron_max_rad : rad
    omega_n_rad_s : rad/s, natural frequency the rule sets
    zeta : damping ratio the rule aims at
    exact : bool, the plant *is* the roll-only model (not a reduction)
    """

    kp: float
    kd_s: float
    a1_per_s: float
    a2_per_s2: float
    error_max_rad: float
    aileron_max_rad: float
    omega_n_rad_s: float
    zeta: float
    exact: bool


def roll_design_rule(
    sc: Scenario, *, zeta: float = DEFAULT_ZETA, error_max_rad: float | None = None
) -> RollRule | None:
    """Gains from the roll-loop design rule for the scenario's plant and servo.

    ``error_max_rad`` defaults to the largest commanded bank step (or
    :data:`DEFAULT_ERROR_RAD` without a step). Returns ``None`` when the rule
    does not apply (no aileron authority on roll rate).
    """
    plant = sc.plant
    p = plant.p_index
    a1 = -float(plant.a[p, p])
    a2 = float(plant.b_control[p, 0])
    if a2 == 0.0:
        return None
    if error_max_rad is None:
        steps = [abs(s.size_rad) for s in metric_spec(sc).steps]
        error_max_rad = max(steps) if steps and max(steps) > 0 else DEFAULT_ERROR_RAD
    d_max = sc.actuator.limit_rad
    kp = d_max / error_max_rad * math.copysign(1.0, a2)
    wn = math.sqrt(abs(a2) * d_max / error_max_rad)
    kd = (2.0 * zeta * wn - a1) / a2
    return RollRule(
        kp=kp,
        kd_s=max(kd, 0.0),
        a1_per_s=a1,
        a2_per_s2=a2,
        error_max_rad=error_max_rad,
        aileron_max_rad=d_max,
        omega_n_rad_s=wn,
        zeta=zeta,
        exact=plant.n_states == 2,
    )
