"""Optional rate gyro: roll rate with bias, bias drift and white noise, at its own rate.

The bias drift is a first-order Gauss–Markov process (stationary std
``bias_drift_rad_s``, correlation time ``bias_drift_time_s``), the usual
model of a gyro's bias instability; its whole per-sample sequence is drawn at
reset (:func:`sensors.stages.gauss_markov`), one random stream per error
(``gyro.noise``, ``gyro.drift``).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np

from .stages import column, gauss_markov

__all__ = ["GyroConfig", "RateGyro", "gyro_errors"]


@dataclass(frozen=True)
class GyroConfig:
    """Rate-gyro parameters.

    Parameters
    ----------
    rate_hz : Hz
        Sample rate.
    noise_rad_s : rad/s
        Standard deviation of white noise per sample.
    bias_rad_s : rad/s
        Constant bias.
    bias_drift_rad_s : rad/s
        Stationary standard deviation of the drifting part of the bias.
    bias_drift_time_s : s
        Correlation time of the bias drift.
    """

    rate_hz: float = 100.0
    noise_rad_s: float = 0.0
    bias_rad_s: float = 0.0
    bias_drift_rad_s: float = 0.0
    bias_drift_time_s: float = 100.0


def _sel(v, rows: np.ndarray | None):
    a = np.asarray(v, dtype=float)
    return a if a.ndim == 0 or rows is None else np.ascontiguousarray(a[rows])


def gyro_errors(
    cfg: GyroConfig,
    n: int,
    rng_for: Callable[[str], Sequence[np.random.Generator]],
    rows: np.ndarray | None = None,
):
    """Per-sample error ``(batch, n)`` rad/s (bias + drift + noise), or the bias alone.

    Parameters may be per run (``(batch,)``); ``rows`` selects the runs that
    ``rng_for`` gives generators for (all when ``None``).
    """

    def normals(stream: str) -> np.ndarray:
        gens = rng_for(stream)
        out = np.empty((len(gens), n))
        for row, g in zip(out, gens, strict=True):
            g.standard_normal(out=row)
        return out

    total = None
    if np.any(np.asarray(cfg.noise_rad_s) > 0):
        total = column(_sel(cfg.noise_rad_s, rows)) * normals("gyro.noise")
    if np.any(np.asarray(cfg.bias_drift_rad_s) > 0):
        eps = normals("gyro.drift")
        drift = gauss_markov(
            eps, _sel(cfg.bias_drift_rad_s, rows), _sel(cfg.bias_drift_time_s, rows), 1.0 / cfg.rate_hz
        )
        total = drift if total is None else total + drift
    bias = column(_sel(cfg.bias_rad_s, rows))
    if total is None:
        return bias if np.ndim(bias) == 0 else np.broadcast_to(bias, (bias.shape[0], n)).copy()
    return total + bias


class RateGyro:
    """Samples roll rate at ``rate_hz`` on the base grid; holds between samples.

    The gyro's mutable state (its current value and per-sample errors) lives
    here; the stepping core owns one per batch. Each run has its own clock
    (local step), so a run restarted with :meth:`start` samples as a fresh
    run would.
    """

    def __init__(self, cfg: GyroConfig, dt: float, n_steps: int, batch: int) -> None:
        self.cfg = cfg
        self.dt = float(dt)
        period = 1.0 / cfg.rate_hz
        n = int(math.floor(n_steps * self.dt / period + 1e-9)) + 1
        steps = np.rint(np.arange(n) * period / self.dt).astype(np.int64)
        self.n_samples = n
        self.sample_at = np.full(n_steps + 1, -1, dtype=np.int64)  # sample index due at each local step
        ok = steps <= n_steps
        self.sample_at[steps[ok]] = np.arange(n)[ok]
        self.sample_step = steps  # local step of each sample
        # index of the newest sample due at or before each local step (-1: none yet)
        self.newest_at = np.maximum.accumulate(self.sample_at)
        self._err = np.zeros((n, batch))
        self.value = np.zeros(batch)
        self._rows = np.arange(batch)

    def start(
        self,
        rows: np.ndarray,
        rng_for: Callable[[str], Sequence[np.random.Generator]],
        rate: np.ndarray | None = None,
    ) -> None:
        """(Re)start the runs ``rows`` at their local step 0 (``rng_for`` gives their generators).

        With ``rate`` (those runs' roll rate at step 0) the sample due at step 0 is taken.
        """
        rows = np.asarray(rows, dtype=np.int64)
        err = gyro_errors(self.cfg, self.n_samples, rng_for, rows)
        self._err[:, rows] = np.asarray(err).T if np.ndim(err) else err
        value = self.value.copy()  # a new array: an observation already handed out keeps its rate
        j0 = self.sample_at[0]
        value[rows] = rate + self._err[j0, rows] if rate is not None and j0 >= 0 else 0.0
        self.value = value

    def sample(self, k: int, rate: np.ndarray) -> None:
        """Take a sample at local step ``k`` (every run on the same clock) if one is due."""
        j = self.sample_at[k]
        if j >= 0:
            self.value = rate + self._err[j]

    def sample_newest(self, kl: np.ndarray, rates: np.ndarray) -> None:
        """Take each run's newest sample due in its local steps ``kl + 1 .. kl + m``.

        ``kl`` is each run's local step before the ``m`` base steps just
        taken (``(batch,)``) and ``rates[j]`` the roll rate after step
        ``j + 1`` (``(m, batch)``); a run's clock stops at the episode's
        end. Only the newest sample can be read afterwards, so taking it
        alone gives the value sampling at every step would.
        """
        last = self.sample_at.size - 1
        si = self.newest_at[np.minimum(kl + rates.shape[0], last)]
        step = self.sample_step[si]  # si = -1 picks a sample that ``due`` masks out
        due = (si >= 0) & (step > kl)
        if np.count_nonzero(due):
            rate = rates[np.where(due, step - kl - 1, 0), self._rows]
            self.value = np.where(due, rate + self._err[np.maximum(si, 0), self._rows], self.value)

    def read(self) -> np.ndarray:
        return self.value
