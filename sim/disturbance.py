"""Disturbance sources and how they reach the plant.

Every source produces, for a block of base steps, an array ``(n, batch, 4)``
of the plant's disturbance inputs, in this channel order (SI):

====  =====================  ======  ==============================================
 ch    name                   unit    enters the plant through
====  =====================  ======  ==============================================
 0     ``v_gust``             m/s     side-gust velocity (air-relative sideslip)
 1     ``p_gust``             rad/s   gust roll rate (air-relative roll rate)
 2     ``r_gust``             rad/s   gust yaw rate (air-relative yaw rate)
 3     ``roll_accel``         rad/s²  rolling-moment disturbance / Ixx
====  =====================  ======  ==============================================

Sources do not depend on the aircraft's state, so the core asks for them in
blocks (vectorised over time) rather than step by step. A source is reset once
per batch with one generator per run (see :mod:`sim.seeding`).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Protocol, runtime_checkable

import numpy as np

__all__ = [
    "CHANNELS",
    "N_CHANNELS",
    "DisturbanceSource",
    "SteadyRollMoment",
    "DisturbanceSet",
]

CHANNELS: tuple[str, ...] = ("v_gust", "p_gust", "r_gust", "roll_accel")
N_CHANNELS = len(CHANNELS)


@runtime_checkable
class DisturbanceSource(Protocol):
    """A state-independent disturbance signal generator."""

    #: Name used to derive this source's random streams (see :mod:`sim.seeding`).
    component: str

    def reset(self, dt: float, rngs: Sequence[np.random.Generator]) -> None:
        """Start a new batch with base step ``dt`` (s), one generator per run."""

    def block(self, k0: int, n: int) -> np.ndarray:
        """Inputs for base steps ``k0 .. k0+n-1``, shape ``(n, batch, 4)``.

        Blocks are requested in order and without gaps.
        """


@dataclass
class SteadyRollMoment:
    """A rolling-moment bias (mistrim, fuel imbalance), with an optional step.

    Parameters
    ----------
    accel_rad_s2 : rad/s²
        Rolling moment divided by roll inertia, from ``t = 0``.
    step_time_s : s or None
        Time at which the bias changes by ``step_accel_rad_s2``.
    step_accel_rad_s2 : rad/s²
        Size of the change.
    """

    accel_rad_s2: float = 0.0
    step_time_s: float | None = None
    step_accel_rad_s2: float = 0.0
    component: str = "roll-moment"

    def reset(self, dt: float, rngs: Sequence[np.random.Generator]) -> None:
        self._dt = float(dt)
        self._batch = len(rngs)

    def block(self, k0: int, n: int) -> np.ndarray:
        out = np.zeros((n, self._batch, N_CHANNELS))
        t = (k0 + np.arange(n)) * self._dt
        level = np.full(n, self.accel_rad_s2)
        if self.step_time_s is not None:
            level = level + np.where(t >= self.step_time_s - 1e-12, self.step_accel_rad_s2, 0.0)
        out[:, :, 3] = level[:, None]
        return out


class DisturbanceSet:
    """The sum of several sources; an empty set gives no disturbance."""

    def __init__(self, sources: Sequence[DisturbanceSource] = ()) -> None:
        self.sources = tuple(sources)

    def __bool__(self) -> bool:
        return bool(self.sources)

    def reset(self, dt: float, rng_for: callable) -> None:
        """``rng_for(component)`` returns the list of per-run generators."""
        for src in self.sources:
            src.reset(dt, rng_for(src.component))

    def block(self, k0: int, n: int, batch: int) -> np.ndarray:
        if len(self.sources) == 1:
            return self.sources[0].block(k0, n)
        out = np.zeros((n, batch, N_CHANNELS))
        for src in self.sources:
            out += src.block(k0, n)
        return out
