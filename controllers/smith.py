"""Smith predictor around the PID: dead-time compensation with the loop model.

O. J. M. Smith, "Closer control of loops with dead time", Chemical
Engineering Progress 53(5), 1957. The controller runs a model of the
aircraft and servo on its own aileron commands and feeds the PID, instead of
the late camera reading ``y(t − τ)``, the corrected signal::

    y_fb(t) = y(t − τ) + ŷ(t) − ŷ(t − τ̂)

where ``ŷ`` is the model's bank (started at zero: it carries only the
response to the controller's own commands) and ``τ̂`` the delay estimate.
When model and delay estimate are right, the last two terms cancel the
delay out of the loop and the PID acts as if on the undelayed bank.

Delay estimate: a fixed ``delay_s`` (the classical form; the simulator's
default is the camera's mean effective delay, latency + frame hold +
exposure mid-point), or, with ``delay_s = None``, the age of the reading
itself (the camera reader reports it, so each reading is matched with the
model's bank at its own capture time).

Sensitivity: the predictor is only as good as the model and the delay
estimate. With a wrong ``τ̂`` the correction no longer cancels the delay and
the loop sees a residual ``ŷ(t − τ) − ŷ(t − τ̂)``, a fast-changing signal
when the controller is aggressive; a PID tuned for the compensated loop can
lose much of its margin (shown in ``tests/test_smith.py``). With an
integrating plant (bank integrates roll rate) a steady roll moment leaves
the model's bank ramping, and the original predictor then keeps a steady
bank error; the PID's integrator reduces but does not remove it.

Stale signal: the inner PID's own rule (hold, then fade). The corrected
signal is presented to it as a current reading (age 0) while the camera
reading is fresh, and with the camera reading's true age once it is stale.

Per-run parameters: ``delay_s`` may be a ``(batch,)`` array.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np

from .base import Observation
from .model import LoopModel, discrete, per_run
from .pid import PIDConfig, PIDController

__all__ = ["SmithConfig", "SmithPredictor"]


@dataclass(frozen=True, eq=False)
class SmithConfig:
    """Smith predictor settings.

    Parameters
    ----------
    pid : PIDConfig
        The PID acting on the corrected signal.
    model : LoopModel
        Aircraft + servo model from the aileron command.
    delay_s : s, scalar, (batch,) array or None
        Delay estimate ``τ̂``; ``None`` uses each reading's reported age.
    """

    pid: PIDConfig
    model: LoopModel
    delay_s: float | np.ndarray | None = None


class SmithPredictor:
    """Batch Smith predictor with a PID (see module docstring)."""

    def __init__(self, cfg: SmithConfig) -> None:
        self.cfg = cfg
        self.pid = PIDController(cfg.pid)
        self._dt = None

    def _prepare(self, dt: float) -> None:
        self._ad, self._bd = discrete(self.cfg.model, dt)
        self._dt = dt

    def reset(self, batch: int) -> None:
        self.pid.reset(batch)
        self.batch = batch
        self._dt = None
        self.x = np.zeros((batch, self.cfg.model.n))
        self.u = np.zeros(batch)
        self.delay = None if self.cfg.delay_s is None else per_run(self.cfg.delay_s, batch, "delay_s")

    def step(self, obs: Observation) -> np.ndarray:
        c = self.cfg
        if self._dt is None:
            self._prepare(obs.dt)
            longest = max(
                float(np.max(self.delay)) if self.delay is not None else 0.0,
                float(np.max(c.pid.stale_after_s)),
            )
            self.n_buf = int(math.ceil(longest / obs.dt)) + 2
            self.buf = np.zeros((self.n_buf, self.batch))  # model bank at past ticks, newest at [tick % n]
            self.tick = 0
        else:
            self.x = self.x @ self._ad.T + self.u[:, None] * self._bd
            self.tick += 1
        phi = c.model.phi_index
        now = self.x[:, phi]
        self.buf[self.tick % self.n_buf] = now

        tau = obs.age if self.delay is None else self.delay
        back = np.clip(np.where(np.isfinite(tau), tau, 0.0) / obs.dt, 0.0, min(self.tick, self.n_buf - 1))
        lo = np.floor(back).astype(np.int64)
        frac = back - lo
        rows = np.arange(self.batch)
        y_lo = self.buf[(self.tick - lo) % self.n_buf, rows]
        y_hi = self.buf[(self.tick - np.minimum(lo + 1, self.tick)) % self.n_buf, rows]
        then = y_lo + frac * (y_hi - y_lo)

        fresh = obs.age <= c.pid.stale_after_s
        corrected = replace(obs, bank=obs.bank + now - then, age=np.where(fresh, 0.0, obs.age))
        self.u = np.asarray(self.pid.step(corrected), dtype=float).copy()
        return self.u
