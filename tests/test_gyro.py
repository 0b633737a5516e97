"""Rate gyro: white noise, constant bias and Gauss–Markov bias drift."""

from __future__ import annotations

import numpy as np
from numpy.testing import assert_allclose, assert_array_equal
from rollrig.sensors.gyro import GyroConfig, RateGyro, gyro_errors
from rollrig.sim.seeding import run_generators


def _rng_for(batch: int, seed: int = 5):
    return lambda name: run_generators(seed, range(batch), name)


def test_noise_bias_and_drift_statistics():
    # Drift: first-order Gauss–Markov, x⁺ = a x + σ√(1−a²) ε, a = exp(−dt/τ)
    # (textbook identity, docs/references.md "Sensor statistics").
    batch, n, rate = 200, 4000, 50.0
    noise_only = gyro_errors(GyroConfig(rate_hz=rate, noise_rad_s=0.01, bias_rad_s=0.002), n, _rng_for(batch))
    assert_allclose(noise_only.mean(), 0.002, atol=5 * 0.01 / np.sqrt(batch * n))
    assert_allclose(noise_only.std(), 0.01, rtol=0.01)  # SE 0.1 %
    sigma, tau = 0.003, 2.0
    drift = gyro_errors(
        GyroConfig(rate_hz=rate, bias_drift_rad_s=sigma, bias_drift_time_s=tau), n, _rng_for(batch)
    )
    # effective samples ≈ N(1−a)/(1+a) ≈ 8000 → SE of std ≈ 0.8 %; 5 %
    assert_allclose(drift.std(), sigma, rtol=0.05)
    lags = np.array([10, 50, 100])  # 0.2, 1, 2 s
    d = drift - drift.mean()
    rho = np.array([np.mean(d[:, k:] * d[:, :-k]) for k in lags]) / d.var()
    assert_allclose(rho, np.exp(-lags / rate / tau), atol=0.04)
    # drift and noise come from separate streams: adding drift leaves the noise alone
    both = gyro_errors(
        GyroConfig(
            rate_hz=rate, noise_rad_s=0.01, bias_rad_s=0.002, bias_drift_rad_s=sigma, bias_drift_time_s=tau
        ),
        n,
        _rng_for(batch),
    )
    assert_allclose(both, noise_only + drift, atol=1e-15)


def test_samples_at_its_own_rate_and_holds():
    gyro = RateGyro(GyroConfig(rate_hz=25.0, bias_rad_s=0.1), 0.01, 100, 2)
    gyro.start(np.arange(2), _rng_for(2))
    seen = []
    for k in range(101):
        gyro.sample(k, np.full(2, float(k)))
        seen.append(gyro.read()[0])
    seen = np.array(seen)
    assert_array_equal(np.flatnonzero(gyro.sample_at >= 0), np.arange(0, 101, 4))
    assert_allclose(seen[[0, 3, 4, 7, 100]], [0.1, 0.1, 4.1, 4.1, 100.1])
