"""Aileron servo: first-order lag with position and rate limits.

The stepping core (:mod:`sim.core`) integrates the lag exactly together with
the plant and clips the servo where a limit binds.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

__all__ = ["ActuatorSpec"]


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
