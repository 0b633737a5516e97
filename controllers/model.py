"""Pieces the model-based controllers share: the loop model, per-run parameters, signal loss.

A model-based controller (Smith predictor, LQG) needs the aircraft and servo
model, but a controller never imports the simulator. The simulator side
builds a :class:`LoopModel` (plain matrices, SI) from the scenario and hands
it in as a configuration value.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.linalg

__all__ = ["LoopModel", "per_run", "discrete", "SignalLoss"]


@dataclass(frozen=True, eq=False)
class LoopModel:
    """Continuous linear model from the aileron command to the aircraft states.

    ``x' = a x + b u``, with ``u`` the aileron command (rad) and ``x`` the
    aircraft's states followed by the servo position (rad); the servo is a
    first-order lag (or absent, when its time constant is 0).

    Parameters
    ----------
    a : (n, n) ndarray, 1/s
    b : (n,) ndarray
    phi_index, p_index : int
        Rows of bank (rad) and roll rate (rad/s) in ``x``.
    accel_column : (n,) ndarray
        How a roll-acceleration disturbance (rad/s²) enters ``x'``; the
        Kalman filter's process noise acts here.
    state_names : tuple of str
    """

    a: np.ndarray
    b: np.ndarray
    phi_index: int
    p_index: int
    accel_column: np.ndarray
    state_names: tuple[str, ...] = ()

    @property
    def n(self) -> int:
        return int(np.asarray(self.a).shape[0])


def per_run(value, batch: int, name: str) -> np.ndarray:
    """``value`` as a contiguous ``(batch,)`` float array (a fresh copy).

    The one check of the per-run rule (see :mod:`rollrig.sim.params`, which
    re-exports it): a scalar for every run, or one value per run.

    Parameters
    ----------
    value : float or array_like of shape ``(batch,)``
    batch : int
        Runs in the batch.
    name : str
        The parameter's name, for the error message.

    Raises
    ------
    ValueError
        When ``value`` is neither a scalar nor one value per run.
    """
    a = np.asarray(value, dtype=float)
    if a.ndim == 0:
        return np.full(batch, float(a))
    if a.shape != (batch,):
        raise ValueError(
            f"{name}: allowed: a number or one value per run, shape ({batch},); got shape {a.shape}"
        )
    return np.array(a, dtype=float, order="C")


def discrete(model: LoopModel, dt: float) -> tuple[np.ndarray, np.ndarray]:
    """Exact zero-order-hold ``(Ad, bd)`` of the loop model over ``dt`` s (``scipy.linalg.expm``)."""
    n = model.n
    m = np.zeros((n + 1, n + 1))
    m[:n, :n] = model.a
    m[:n, n] = model.b
    e = scipy.linalg.expm(m * dt)
    return e[:n, :n], e[:n, n]


class SignalLoss:
    """Hold, then fade: what a controller's output does when its bank reading goes stale.

    The same rule as the PID (:mod:`controllers.pid`): while the newest valid
    reading is no older than ``stale_after_s`` the output passes through and
    is remembered; once it is older, the remembered output is held for
    ``hold_s`` and then faded linearly to zero over ``fade_s``. Before the
    first reading (age ``inf``) the output is zero. Parameters may be per run.
    """

    def __init__(self, stale_after_s, hold_s, fade_s) -> None:
        self._params = (stale_after_s, hold_s, fade_s)

    def reset(self, batch: int) -> None:
        self.stale_after, self.hold, self.fade = (
            per_run(v, batch, n)
            for v, n in zip(self._params, ("stale_after_s", "hold_s", "fade_s"), strict=True)
        )
        self.held = np.zeros(batch)

    def fresh(self, age: np.ndarray) -> np.ndarray:
        """(batch,) bool: the reading is young enough to use."""
        return age <= self.stale_after

    def apply(self, u: np.ndarray, age: np.ndarray) -> np.ndarray:
        """Output after the loss rule, for the wanted output ``u`` (any units)."""
        fresh = self.fresh(age)
        self.held = np.where(fresh, u, self.held)
        lost_for = np.where(fresh, 0.0, age - self.stale_after)
        with np.errstate(divide="ignore", invalid="ignore"):
            ramp = np.clip(1.0 - (lost_for - self.hold) / self.fade, 0.0, 1.0)
        fade = np.where(self.fade > 0, ramp, (lost_for <= self.hold).astype(float))
        fade = np.where(np.isfinite(age), fade, 0.0)
        return np.where(fresh, u, self.held * fade)
