"""Aileron servo: first-order lag with position and rate limits."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

__all__ = ["ActuatorSpec", "actuator_step"]


@dataclass(frozen=True)
class ActuatorSpec:
    """Aileron servo parameters.

    Parameters
    ----------
    time_constant_s : s
        First-order lag time constant (0 = follows the command at once,
        subject to the rate limit).
    limit_rad : rad
        Position limit (symmetric).
    rate_limit_rad_s : rad/s
        Rate limit (symmetric); ``inf`` for none.
    """

    time_constant_s: float = 0.08
    limit_rad: float = math.radians(20.0)
    rate_limit_rad_s: float = math.radians(60.0)

    def gain_per_step(self, dt: float) -> float:
        """Fraction of the remaining error removed in one base step (exact lag)."""
        if self.time_constant_s <= 0:
            return 1.0
        return -math.expm1(-dt / self.time_constant_s)


def actuator_step(
    position: np.ndarray, command: np.ndarray, spec: ActuatorSpec, alpha: float, dt: float
) -> np.ndarray:
    """Servo position after one base step.

    The unconstrained lag response ``alpha * (command - position)`` is limited
    to ``rate_limit * dt`` and the result clipped to the position limit.
    """
    change = alpha * (command - position)
    max_change = spec.rate_limit_rad_s * dt
    if math.isfinite(max_change):
        change = np.clip(change, -max_change, max_change)
    return np.clip(position + change, -spec.limit_rad, spec.limit_rad)
