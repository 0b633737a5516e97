"""The controller protocol.

A controller sees only what a real autopilot would see: the camera reader's
output (latest valid bank reading, whether the newest frame was valid, and how
old the reading is), an optional rate gyro, the bank command and time. It
returns an aileron command in radians for every run of the batch.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Protocol, runtime_checkable

import numpy as np

__all__ = ["Observation", "Controller"]


@dataclass(frozen=True)
class Observation:
    """What the controller receives at one tick. Arrays are ``(batch,)``.

    Attributes
    ----------
    t : float, s
        Time of the tick.
    dt : float, s
        Controller period.
    bank : rad
        Latest valid bank reading (0 before the first valid reading).
    valid : bool
        Whether the newest delivered frame was valid.
    age : s
        Age of ``bank`` since its frame was captured (``inf`` if none yet).
    bank_cmd : rad
        Commanded bank angle.
    rate : rad/s or None
        Latest rate-gyro reading, when a gyro is fitted.
    """

    t: float
    dt: float
    bank: np.ndarray
    valid: np.ndarray
    age: np.ndarray
    bank_cmd: np.ndarray
    rate: np.ndarray | None = None


@runtime_checkable
class Controller(Protocol):
    """Anything with ``reset`` and ``step`` like this is a controller."""

    def reset(self, batch: int) -> None:
        """Prepare internal state for a batch of ``batch`` independent runs."""

    def step(self, obs: Observation) -> np.ndarray:
        """Return the aileron command, rad, shape ``(batch,)``."""
