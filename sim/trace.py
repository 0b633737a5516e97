"""The record of a batch of closed-loop runs.

All per-run arrays are batch-first: ``(batch, n_t)``. Angles in radians,
rates in rad/s, time in seconds.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["Trace"]


@dataclass(frozen=True)
class Trace:
    """Time histories of a batch of runs on the base-step grid.

    Attributes
    ----------
    t : (n_t,) s
        Base-step time grid, ``t[0] = 0``.
    bank_cmd : (batch, n_t) rad
        Commanded bank angle.
    bank : (batch, n_t) rad
        True bank angle.
    roll_rate : (batch, n_t) rad/s
        True roll rate.
    aileron : (batch, n_t) rad
        Aileron position (actuator output).
    t_ctrl : (n_c,) s
        Controller tick times (a subset of ``t``).
    bank_meas : (batch, n_c) rad
        Bank reading the controller used at each tick.
    valid : (batch, n_c) bool
        Whether the newest frame delivered to the controller was valid.
    age : (batch, n_c) s
        Age of the reading used at each tick (``inf`` before the first one).
    aileron_cmd : (batch, n_c) rad
        Aileron command from the controller at each tick.
    states : (batch, n_t, n_x) or None
        Full plant state, when recorded.
    state_names : tuple of str
        Names of the plant states.
    diverged_at : (batch,) s
        Time the run was declared diverged, ``inf`` if it did not diverge.
    run_index : (batch,) int
        Index of each run in the Monte Carlo set (for replay).
    seed : int
        Run seed.
    """

    t: np.ndarray
    bank_cmd: np.ndarray
    bank: np.ndarray
    roll_rate: np.ndarray
    aileron: np.ndarray
    t_ctrl: np.ndarray
    bank_meas: np.ndarray
    valid: np.ndarray
    age: np.ndarray
    aileron_cmd: np.ndarray
    states: np.ndarray | None
    state_names: tuple[str, ...]
    diverged_at: np.ndarray
    run_index: np.ndarray
    seed: int

    @property
    def batch(self) -> int:
        return int(self.bank.shape[0])

    @property
    def dt(self) -> float:
        return float(self.t[1] - self.t[0])

    @property
    def diverged(self) -> np.ndarray:
        """(batch,) bool: runs that diverged."""
        return np.isfinite(self.diverged_at)
