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
from .model import per_run

__all__ = ["PIDConfig", "PIDController", "PER_RUN_FIELDS"]


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


#: Fields that may hold one value per run (listed with the others in :mod:`rollrig.sim.params`).
PER_RUN_FIELDS = (
    "kp",
    "ki_per_s",
    "kd_s",
    "derivative_filter_hz",
    "output_limit_rad",
    "integrator_limit_rad",
    "stale_after_s",
    "hold_s",
    "fade_s",
)


class PIDController:
    """Batch PID bank-hold controller (see module docstring for the law).

    Every numeric field of :class:`PIDConfig` may be a float or a ``(batch,)``
    array (one value per run); :meth:`reset` turns them into contiguous
    ``(batch,)`` arrays so a run alone and a run in a batch use the same
    arithmetic. The controller owns its state; :meth:`reset_rows` restarts
    some runs of the batch.
    """

    def __init__(self, cfg: PIDConfig) -> None:
        self.cfg = cfg
        if cfg.derivative_source not in ("measurement", "gyro"):
            raise ValueError(f"derivative_source = {cfg.derivative_source!r}; allowed: 'measurement', 'gyro'")

    def reset(self, batch: int) -> None:
        c = self.cfg
        self.batch = batch
        self.p = {}
        for name in PER_RUN_FIELDS:
            self.p[name] = per_run(getattr(c, name), batch, name)
        self._alpha_dt = None
        self._use_gyro = c.derivative_source == "gyro"
        self.integral = np.zeros(batch)
        self.rate_f = np.zeros(batch)
        self.prev_bank = np.zeros(batch)
        self.prev_capture = np.full(batch, np.nan)
        self.held = np.zeros(batch)
        self.output = np.zeros(batch)

    def reset_rows(self, rows) -> None:
        """Restart the runs ``rows`` of the batch (as :meth:`reset` would leave them)."""
        for name, value in (
            ("integral", 0.0),
            ("rate_f", 0.0),
            ("prev_bank", 0.0),
            ("prev_capture", np.nan),
            ("held", 0.0),
            ("output", 0.0),
        ):
            arr = getattr(self, name).copy()
            arr[rows] = value
            setattr(self, name, arr)

    def step(self, obs: Observation) -> np.ndarray:
        p = self.p
        dt = obs.dt
        if self._alpha_dt != dt:
            self._alpha = -np.expm1(-2.0 * np.pi * p["derivative_filter_hz"] * dt)
            self._alpha_dt = dt
        alpha = self._alpha
        bank = obs.bank
        fresh = obs.age <= p["stale_after_s"]

        # bank rate
        if self._use_gyro and obs.rate is not None:
            rate = obs.rate
        else:
            capture = obs.t - obs.age
            prev = self.prev_capture
            new = fresh & ~(capture <= prev)  # later than the last one, or the first (prev NaN)
            gap = capture - prev  # NaN on the first reading (prev is NaN): ok is then False
            ok = new & (gap > 0) & (gap < np.inf)
            rate = np.where(ok, (bank - self.prev_bank) / np.where(ok, gap, 1.0), self.rate_f)
            self.prev_bank = np.where(new, bank, self.prev_bank)
            # after a loss, restart differencing from the first fresh reading
            self.prev_capture = np.where(new, capture, np.where(fresh, prev, np.nan))
        self.rate_f = np.where(fresh, self.rate_f + alpha * (rate - self.rate_f), self.rate_f)

        err = obs.bank_cmd - bank
        u_raw = p["kp"] * err + self.integral - p["kd_s"] * self.rate_f
        lim = p["output_limit_rad"]
        u = np.minimum(np.maximum(u_raw, -lim), lim)
        pushing = ((u_raw >= lim) & (err > 0)) | ((u_raw <= -lim) & (err < 0))
        grow = fresh & ~pushing
        ilim = p["integrator_limit_rad"]
        grown = np.minimum(np.maximum(self.integral + p["ki_per_s"] * err * dt, -ilim), ilim)
        self.integral = np.where(grow, grown, self.integral)

        # signal lost: hold, then fade to neutral
        if fresh.all():
            self.held = u
            self.output = u
            return u
        lost_for = np.where(fresh, 0.0, obs.age - p["stale_after_s"])
        self.held = np.where(fresh, u, self.held)
        fade_s, hold_s = p["fade_s"], p["hold_s"]
        with np.errstate(invalid="ignore", divide="ignore"):
            ramp = np.minimum(np.maximum(1.0 - (lost_for - hold_s) / fade_s, 0.0), 1.0)
        fade = np.where(fade_s > 0, ramp, (lost_for <= hold_s).astype(float))
        fade = np.where(np.isfinite(obs.age), fade, 0.0)
        self.output = np.where(fresh, u, self.held * fade)
        return self.output
