"""Optional rate gyro: roll rate with bias and white noise, at its own rate."""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np

__all__ = ["GyroConfig", "RateGyro"]


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
    """

    rate_hz: float = 100.0
    noise_rad_s: float = 0.0
    bias_rad_s: float = 0.0


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
        if self.cfg.noise_rad_s > 0:
            self.noise = np.stack([g.standard_normal(n) for g in rng_for("gyro.noise")])
        else:
            self.noise = None
        self.value = np.zeros(batch)

    def sample(self, k: int, rate: np.ndarray) -> None:
        """Take a sample at base step ``k`` if one is due."""
        j = self.sample_steps.get(k)
        if j is None:
            return
        v = rate + self.cfg.bias_rad_s
        if self.noise is not None:
            v = v + self.cfg.noise_rad_s * self.noise[:, j]
        self.value = v

    def read(self) -> np.ndarray:
        return self.value
