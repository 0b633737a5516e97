"""PID bank-hold controller for a camera-fed bank signal.

Control law, at each tick of period ``dt`` (e = bank command − bank reading)::

    u = kp·e + I − kd·D          clipped to ±output_limit
    I ← I + ki·e·dt              only when that does not push u further into
                                 the limit (conditional integration), and
                                 clamped to ±integrator_limit

``D`` is the bank rate, filtered by a first-order low-pass at
``derivative_filter_hz``. With ``derivative_source = "measurement"`` it is the
difference of successive camera readings divided by the time between their
captures (the reader's age tells the capture time), so the staircase of a slow
camera does not produce spikes. With ``"gyro"`` it is the rate-gyro reading.

Missing or stale signal: when the newest valid reading is older than
``stale_after_s`` the integrator freezes and the output holds its last value
for ``hold_s``, then fades linearly to neutral over ``fade_s``. When readings
return, control resumes from the new reading without a derivative kick.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .base import Observation

__all__ = ["PIDConfig", "PIDController"]


@dataclass(frozen=True)
class PIDConfig:
    """PID gains and limits.

    Parameters
    ----------
    kp : rad/rad
        Proportional gain, aileron per bank error.
    ki_per_s : 1/s
        Integral gain.
    kd_s : s
        Derivative gain (aileron per bank rate).
    derivative_source : {"measurement", "gyro"}
        Where the bank rate comes from.
    derivative_filter_hz : Hz
        Corner of the first-order filter on the rate.
    output_limit_rad : rad
        Command limit (normally the aileron travel).
    integrator_limit_rad : rad
        Clamp on the integrator's contribution.
    stale_after_s : s
        Age beyond which the bank reading counts as lost.
    hold_s : s
        How long the last output is held once the signal is lost.
    fade_s : s
        Time to fade the held output to neutral after ``hold_s``.
    """

    kp: float = 1.0
    ki_per_s: float = 0.0
    kd_s: float = 0.0
    derivative_source: str = "measurement"
    derivative_filter_hz: float = 5.0
    output_limit_rad: float = math.radians(20.0)
    integrator_limit_rad: float = math.radians(10.0)
    stale_after_s: float = 0.25
    hold_s: float = 0.5
    fade_s: float = 1.0


class PIDController:
    """Batch PID bank-hold controller (see module docstring for the law)."""

    def __init__(self, cfg: PIDConfig) -> None:
        self.cfg = cfg

    def reset(self, batch: int) -> None:
        self.integral = np.zeros(batch)
        self.rate_f = np.zeros(batch)
        self.prev_bank = np.zeros(batch)
        self.prev_capture = np.full(batch, np.nan)
        self.held = np.zeros(batch)
        self.output = np.zeros(batch)

    def step(self, obs: Observation) -> np.ndarray:
        c = self.cfg
        dt = obs.dt
        bank = obs.bank
        fresh = obs.age <= c.stale_after_s
        capture = obs.t - obs.age
        alpha = -math.expm1(-2.0 * math.pi * c.derivative_filter_hz * dt)

        # bank rate
        if c.derivative_source == "gyro" and obs.rate is not None:
            rate = obs.rate
        else:
            new = fresh & ((capture > self.prev_capture) | np.isnan(self.prev_capture))
            gap = np.where(new, capture - self.prev_capture, 1.0)
            ok = new & np.isfinite(gap) & (gap > 0)
            rate = np.where(ok, (bank - self.prev_bank) / np.where(ok, gap, 1.0), self.rate_f)
            self.prev_bank = np.where(new, bank, self.prev_bank)
            # after a loss, restart differencing from the first fresh reading
            self.prev_capture = np.where(new, capture, np.where(fresh, self.prev_capture, np.nan))
        self.rate_f = np.where(fresh, self.rate_f + alpha * (rate - self.rate_f), self.rate_f)

        err = obs.bank_cmd - bank
        u_raw = c.kp * err + self.integral - c.kd_s * self.rate_f
        lim = c.output_limit_rad
        u = np.clip(u_raw, -lim, lim)
        pushing = ((u_raw >= lim) & (err > 0)) | ((u_raw <= -lim) & (err < 0))
        grow = fresh & ~pushing
        self.integral = np.where(
            grow,
            np.clip(self.integral + c.ki_per_s * err * dt, -c.integrator_limit_rad, c.integrator_limit_rad),
            self.integral,
        )

        # signal lost: hold, then fade to neutral
        lost_for = np.where(fresh, 0.0, obs.age - c.stale_after_s)
        self.held = np.where(fresh, u, self.held)
        if c.fade_s > 0:
            fade = np.clip(1.0 - (lost_for - c.hold_s) / c.fade_s, 0.0, 1.0)
        else:
            fade = (lost_for <= c.hold_s).astype(float)
        fade = np.where(np.isfinite(obs.age), fade, 0.0)
        self.output = np.where(fresh, u, self.held * fade)
        return self.output
