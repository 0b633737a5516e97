"""Cascade bank-hold controller: an outer bank loop commanding roll rate, an inner rate loop on the gyro.

Control law at each tick of period ``T`` (e = bank command − bank reading,
p the rate-gyro reading)::

    outer:  p_want = clip(k_bank·e + I_b, ±max_rate)     I_b += ki_bank·e·T (conditional)
    slew:   p_cmd += clip(p_want − p_cmd, ±max_accel·T)   (roll-acceleration limit)
    inner:  u = clip(k_rate·(p_cmd − p) + I_r, ±output_limit)
            I_r += ki_rate·(p_cmd − p)·T                   (conditional integration)

The two limits are the autopilot's own roll-rate and roll-acceleration
limits; typical values for heading-select modes are about 10°/s and 5°/s²
(MIL-F-9490D §3.1.2.3, as usually quoted), the defaults here.

Missing or stale bank signal: the inner loop keeps running on the gyro (it
damps the roll and so holds the bank roughly where it was). The outer loop's
rate command follows the same rule as the PID's output: held for ``hold_s``
once the reading is older than ``stale_after_s``, then faded linearly to
zero over ``fade_s`` (zero rate command: the inner loop then holds the
attitude by rate damping). The outer integrator freezes meanwhile.

No gyro: this controller needs one. The scenario loader refuses
``kind = "cascade"`` without a ``[sensor.gyro]`` table, and :meth:`step`
raises ``ValueError`` when an observation has no rate.

Every numeric parameter may be a scalar or a ``(batch,)`` array (one value
per run).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .base import Observation
from .model import SignalLoss, per_run

__all__ = ["CascadeConfig", "CascadeController"]

_PARAMS = (
    "k_bank_per_s",
    "ki_bank_per_s2",
    "k_rate_s",
    "ki_rate",
    "max_rate_rad_s",
    "max_accel_rad_s2",
    "output_limit_rad",
    "integrator_limit_rad",
)


@dataclass(frozen=True, eq=False)
class CascadeConfig:
    """Cascade gains and limits (each a scalar or a per-run ``(batch,)`` array).

    Parameters
    ----------
    k_bank_per_s : 1/s
        Outer gain: commanded roll rate per bank error.
    ki_bank_per_s2 : 1/s²
        Outer integral gain.
    k_rate_s : s
        Inner gain: aileron (rad) per roll-rate error (rad/s).
    ki_rate : 1
        Inner integral gain (aileron per rad of integrated rate error).
    max_rate_rad_s : rad/s
        Limit on the commanded roll rate.
    max_accel_rad_s2 : rad/s²
        Limit on the change of the commanded roll rate.
    output_limit_rad : rad
        Aileron command limit.
    integrator_limit_rad : rad
        Clamp on each integrator's contribution (outer in rad/s, inner in rad).
    stale_after_s, hold_s, fade_s : s
        Signal-loss rule (see module docstring).
    """

    k_bank_per_s: float | np.ndarray = 2.0
    ki_bank_per_s2: float | np.ndarray = 0.2
    k_rate_s: float | np.ndarray = 0.15
    ki_rate: float | np.ndarray = 0.0
    max_rate_rad_s: float | np.ndarray = math.radians(10.0)
    max_accel_rad_s2: float | np.ndarray = math.radians(5.0)
    output_limit_rad: float | np.ndarray = math.radians(20.0)
    integrator_limit_rad: float | np.ndarray = math.radians(10.0)
    stale_after_s: float | np.ndarray = 0.25
    hold_s: float | np.ndarray = 0.5
    fade_s: float | np.ndarray = 1.0


class CascadeController:
    """Batch cascade bank-hold controller (see module docstring for the law)."""

    def __init__(self, cfg: CascadeConfig) -> None:
        self.cfg = cfg

    def reset(self, batch: int) -> None:
        c = self.cfg
        self.p = {name: per_run(getattr(c, name), batch, name) for name in _PARAMS}
        self.loss = SignalLoss(c.stale_after_s, c.hold_s, c.fade_s)
        self.loss.reset(batch)
        self.i_bank = np.zeros(batch)
        self.i_rate = np.zeros(batch)
        self.p_cmd = np.zeros(batch)

    def step(self, obs: Observation) -> np.ndarray:
        if obs.rate is None:
            raise ValueError("the cascade controller needs a rate gyro (obs.rate is None)")
        q = self.p
        dt = obs.dt
        fresh = self.loss.fresh(obs.age)
        err = obs.bank_cmd - obs.bank

        lim_i = q["integrator_limit_rad"]
        p_raw = q["k_bank_per_s"] * err + self.i_bank
        p_lim = q["max_rate_rad_s"]
        p_want = np.clip(p_raw, -p_lim, p_lim)
        push = ((p_raw >= p_lim) & (err > 0)) | ((p_raw <= -p_lim) & (err < 0))
        grow = fresh & ~push
        self.i_bank = np.where(
            grow, np.clip(self.i_bank + q["ki_bank_per_s2"] * err * dt, -lim_i, lim_i), self.i_bank
        )
        p_want = self.loss.apply(p_want, obs.age)
        step = q["max_accel_rad_s2"] * dt
        self.p_cmd = self.p_cmd + np.clip(p_want - self.p_cmd, -step, step)

        e_rate = self.p_cmd - obs.rate
        u_raw = q["k_rate_s"] * e_rate + self.i_rate
        u_lim = q["output_limit_rad"]
        u = np.clip(u_raw, -u_lim, u_lim)
        push = ((u_raw >= u_lim) & (e_rate > 0)) | ((u_raw <= -u_lim) & (e_rate < 0))
        self.i_rate = np.where(
            push, self.i_rate, np.clip(self.i_rate + q["ki_rate"] * e_rate * dt, -lim_i, lim_i)
        )
        return u
