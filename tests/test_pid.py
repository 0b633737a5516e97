"""PID bank-hold controller: law, anti-windup, derivative from readings, loss handling."""

from __future__ import annotations

import math

import numpy as np
import pytest
from rollrig.controllers.base import Observation
from rollrig.controllers.pid import PIDConfig, PIDController


def obs(t, bank, age=0.0, cmd=0.0, dt=0.02, rate=None):
    one = lambda v: np.atleast_1d(np.asarray(v, float))  # noqa: E731
    return Observation(
        t=t,
        dt=dt,
        bank=one(bank),
        valid=one(1.0) > 0,
        age=one(age),
        bank_cmd=one(cmd),
        rate=None if rate is None else one(rate),
    )


def test_proportional_only():
    c = PIDController(PIDConfig(kp=0.5))
    c.reset(1)
    assert c.step(obs(0.0, 0.1, cmd=0.3))[0] == pytest.approx(0.5 * 0.2)


def test_integrator_accumulates_and_is_clamped():
    cfg = PIDConfig(kp=0.0, ki_per_s=1.0, integrator_limit_rad=0.05, output_limit_rad=1.0)
    c = PIDController(cfg)
    c.reset(1)
    outs = [c.step(obs(k * 0.02, 0.0, age=0.0, cmd=0.1))[0] for k in range(100)]
    assert outs[1] == pytest.approx(0.1 * 0.02)  # one step of ki·e·dt (output uses the old integral)
    assert max(outs) == pytest.approx(0.05)


def test_conditional_integration_stops_windup_at_the_output_limit():
    cfg = PIDConfig(kp=10.0, ki_per_s=1.0, output_limit_rad=0.2, integrator_limit_rad=1.0)
    c = PIDController(cfg)
    c.reset(1)
    for k in range(200):
        assert c.step(obs(k * 0.02, 0.0, cmd=0.5))[0] == pytest.approx(0.2)
    assert c.integral[0] == 0.0


def test_derivative_from_successive_readings_uses_capture_times():
    """A ramp read by a 10 Hz camera gives the ramp rate, not spikes at each new frame."""
    cfg = PIDConfig(kp=0.0, kd_s=1.0, derivative_filter_hz=1000.0)
    c = PIDController(cfg)
    c.reset(1)
    rate = 0.2
    u = []
    for k in range(50):
        t = k * 0.02
        t_cap = math.floor(t / 0.1) * 0.1  # newest frame
        u.append(c.step(obs(t, rate * t_cap, age=t - t_cap))[0])
    assert np.allclose(u[10:], -rate, atol=1e-9)


def test_gyro_derivative():
    c = PIDController(PIDConfig(kp=0.0, kd_s=0.5, derivative_source="gyro", derivative_filter_hz=1000.0))
    c.reset(1)
    assert c.step(obs(0.0, 0.0, rate=0.4))[0] == pytest.approx(-0.2, rel=1e-6)


def test_lost_signal_hold_then_fade_to_neutral():
    cfg = PIDConfig(kp=1.0, stale_after_s=0.2, hold_s=0.5, fade_s=1.0)
    c = PIDController(cfg)
    c.reset(1)
    u0 = c.step(obs(0.0, 0.0, age=0.0, cmd=0.1))[0]
    assert u0 == pytest.approx(0.1)
    # reading stops at t = 0: age grows with time
    at = lambda t: c.step(obs(t, 0.0, age=t, cmd=0.1))[0]  # noqa: E731
    assert at(0.1) == pytest.approx(0.1)  # still fresh
    assert at(0.6) == pytest.approx(0.1)  # lost 0.4 s: holding
    assert at(1.2) == pytest.approx(0.1 * 0.5)  # lost 1.0 s: half-way through the fade
    assert at(2.0) == pytest.approx(0.0)  # faded out
    assert c.step(obs(2.1, 0.05, age=0.0, cmd=0.1))[0] == pytest.approx(0.05)  # resumes


def test_no_reading_yet_gives_neutral():
    c = PIDController(PIDConfig(kp=1.0))
    c.reset(1)
    assert c.step(obs(0.0, 0.0, age=math.inf, cmd=0.3))[0] == 0.0
