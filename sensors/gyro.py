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

from .stages import gauss_markov

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


def gyro_errors(cfg: GyroConfig, n: int, rng_for: Callable[[str], Sequence[np.random.Generator]]):
    """Per-sample error ``(batch, n)`` rad/s (bias + drift + noise), or the bias alone."""

    def normals(stream: str) -> np.ndarray:
        gens = rng_for(stream)
        out = np.empty((len(gens), n))
        for row, g in zip(out, gens, strict=True):
            g.standard_normal(out=row)
        return out

    total = None
    if cfg.noise_rad_s > 0:
        total = cfg.noise_rad_s * normals("gyro.noise")
    if cfg.bias_drift_rad_s > 0:
        eps = normals("gyro.drift")
        drift = gauss_markov(eps, cfg.bias_drift_rad_s, cfg.bias_drift_time_s, 1.0 / cfg.rate_hz)
        total = drift if total is None else total + drift
    if total is None:
        return float(cfg.bias_rad_s)
    return total + cfg.bias_rad_s


class RateGyro:
    """Samples roll rate at ``rate_hz`` on the base grid; holds between samples."""

    def __init__(self, cfg: GyroConfig, dt: float) -> None:
        self.cfg = cfg
        self.dt = float(dt)

    def reset(
        self, n_steps: int, batch: int, rng_for: Callable[[str], Sequence[np.random.Generator]]
    ) -> None:
        period = 1.0 / self.cfg.rate_hz
        n = int(math.floor(n_steps * self.dt / period + 1e-9)) + 1
        steps = np.rint(np.arange(n) * period / self.dt).astype(np.int64)
        self.sample_steps = {int(k): j for j, k in enumerate(steps) if k <= n_steps}
        err = gyro_errors(self.cfg, n, rng_for)
        self._err = err if np.isscalar(err) else np.ascontiguousarray(np.asarray(err).T)
        self.value = np.zeros(batch)

    def sample(self, k: int, rate: np.ndarray) -> None:
        """Take a sample at base step ``k`` if one is due."""
        j = self.sample_steps.get(k)
        if j is None:
            return
        self.value = rate + (self._err if np.isscalar(self._err) else self._err[j])

    def read(self) -> np.ndarray:
        return self.value
