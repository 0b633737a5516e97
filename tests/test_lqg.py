"""LQG bank hold: LQR gains, the delay-line Kalman filter's consistency and its late readings."""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pytest
import scipy.integrate
import scipy.linalg
import scipy.stats
from numpy.testing import assert_allclose
from rollrig.controllers.lqg import DelayLineKalman, LQGConfig, LQGController, _van_loan, lqr_gain, tick_maps
from rollrig.sim.build import build_setup, loop_model, make_controller
from rollrig.sim.core import simulate
from rollrig.sim.runner import run_scenario
from rollrig.sim.scenario import parse_scenario


def _doc(sensor: dict, *, model: str = "small-uav", runs: int = 4, duration: float = 8.0) -> dict:
    return {
        "aircraft": {"model": model},
        "sensor": sensor,
        "controller": {"kind": "lqg"},
        "command": {"profile": "step", "to_deg": 15.0, "at_s": 1.0},
        "run": {"duration_s": duration, "runs": runs, "seed": 21},
    }


def _roll_only_model():
    return loop_model(parse_scenario(_doc({}, model="roll-only")))


def test_lqr_gain_matches_python_control_dlqr():
    control = pytest.importorskip("control")
    model = _roll_only_model()
    e, f, _ = tick_maps(model, 0.01, 2)
    n = model.n
    a, b = e[:n], f[:n, None]
    q = np.diag([1.0, 30.0, 0.1])
    r = np.array([[40.0]])
    k_ref, _, _ = control.dlqr(a, b, q, r)
    assert_allclose(lqr_gain(a, b, q, r), np.asarray(k_ref), rtol=1e-8)


def test_tick_maps_match_a_second_method():
    """Mean map by expm over the whole tick; noise by quadrature of e^(As) g g' e^(A's)."""
    model = _roll_only_model()
    h, s = 0.01, 3
    e, f, q = tick_maps(model, h, s)
    n = model.n
    aug = np.zeros((n + 1, n + 1))
    aug[:n, :n], aug[:n, n] = model.a, model.b
    whole = scipy.linalg.expm(aug * h * s)
    assert_allclose(e[:n], whole[:n, :n], rtol=1e-12, atol=1e-14)
    assert_allclose(f[:n], whole[:n, n], rtol=1e-12, atol=1e-14)
    # the oldest head entry is the bank at the start of the tick
    assert_allclose(e[-1], np.eye(n)[model.phi_index])
    g = np.asarray(model.accel_column)
    quad, _ = scipy.integrate.quad_vec(
        lambda t: scipy.linalg.expm(model.a * t) @ np.outer(g, g) @ scipy.linalg.expm(model.a.T * t),
        0.0,
        h * s,
        epsabs=1e-14,
    )
    assert_allclose(q[:n, :n], quad, rtol=1e-7, atol=1e-14)


def _run_filter(cfg, truth_x, deliveries, gyro, u, tick_every):
    """Drive the filter: ``deliveries[k]`` = (reading, age, use) per run at tick k."""
    kf = DelayLineKalman(cfg, tick_every * cfg.delay_step_s)
    batch = truth_x.shape[1]
    kf.reset(batch)
    est, cov = [], []
    for k in range(len(deliveries)):
        if k:
            kf.predict(u[k - 1])
        if gyro is not None:
            kf.gyro(gyro[k])
        y, age, use = deliveries[k]
        kf.camera(y, age, use)
        est.append(kf.x.copy())
        cov.append(kf.P[:, : kf.n, : kf.n].copy())
    return np.array(est), np.array(cov)


def test_nees_matches_its_dimension_within_chi_square_bounds():
    """NEES consistency test (Bar-Shalom, Li & Kirubarajan 2001, §5.4.2).

    With N independent runs, N times the run-averaged NEES at one time is
    chi-square with N·n_x degrees of freedom when the filter is consistent.
    Checked at times 0.5 s apart (long against the filter's correlation time)
    over a 14 s noise-only run with late (70 ms) and lost (20 %) readings; both
    each time's value and the pooled value must fall in two-sided 99.9 %
    chi-square bounds. NEES is taken over bank and roll rate (n_x = 2); the
    servo state is known to the filter up to 1e-6 rad² and carries no noise.
    """
    model = _roll_only_model()
    h, s, batch = 0.01, 2, 100
    ticks = 700
    q_psd, sig_c, sig_g = 0.8, math.radians(0.5), math.radians(0.3)
    cfg = LQGConfig(
        model=model,
        delay_step_s=h,
        max_delay_s=0.2,
        accel_psd=q_psd,
        camera_noise_rad=sig_c,
        gyro_noise_rad_s=sig_g,
    )
    rng = np.random.default_rng(2024)
    n = model.n
    p0 = np.eye(n) * 1e-6
    p0[model.phi_index, model.phi_index] = cfg.initial_bank_std_rad**2
    p0[model.p_index, model.p_index] = cfg.initial_rate_std_rad_s**2
    u = 0.05 * np.sin(0.7 * np.arange(ticks) * s * h)  # known command, held over each tick
    x, _ = _truth_held(model, h, s, ticks, batch, q_psd, np.random.default_rng(7), p0, u)
    phi = model.phi_index
    frame_every, latency_sub = 4, 7  # 25 Hz frames, 70 ms latency
    deliveries = []
    lost = rng.random((ticks * s // frame_every + 2, batch)) < 0.2
    for k in range(ticks):
        sub = k * s
        y, age, use = np.zeros(batch), np.zeros(batch), np.zeros(batch, bool)
        # newest frame delivered by this tick
        c = (sub - latency_sub) // frame_every * frame_every
        if c >= 0 and (c + latency_sub) > sub - s:  # delivered during the last tick
            f = c // frame_every
            use = ~lost[f]
            y = x[c, :, phi] + sig_c * rng.standard_normal(batch)
            age = np.full(batch, (sub - c) * h)
        deliveries.append((y, age, use))
    gyro = x[::s][:ticks, :, model.p_index] + sig_g * rng.standard_normal((ticks, batch))
    est, cov = _run_filter(cfg, x[::s][:ticks], deliveries, gyro, u, s)
    idx = [model.p_index, phi]
    err = x[::s][:ticks][:, :, idx] - est[:, :, idx]
    sub_cov = cov[:, :, idx][:, :, :, idx]
    nees = np.einsum("kbi,kbi->kb", err, np.linalg.solve(sub_cov, err[..., None])[..., 0])
    at = np.arange(100, ticks, 25)
    stat = batch * nees[at].mean(axis=1)
    dof = 2 * batch
    lo, hi = scipy.stats.chi2.ppf([0.0005, 0.9995], dof)
    assert np.all((stat > lo) & (stat < hi)), (stat.min(), stat.max(), lo, hi)
    pooled = stat.sum()
    lo, hi = scipy.stats.chi2.ppf([0.0005, 0.9995], dof * at.size)
    assert lo < pooled < hi
    assert nees[at].mean() == pytest.approx(2.0, rel=0.1)


def _truth_held(model, h, s, ticks, batch, q_psd, rng, p0, u_tick):
    n = model.n
    aug = np.zeros((n + 1, n + 1))
    aug[:n, :n], aug[:n, n] = model.a, model.b
    ee = scipy.linalg.expm(aug * h)
    ph, gh = ee[:n, :n], ee[:n, n]
    # Van Loan's noise integral (checked against quadrature in test_tick_maps_match_a_second_method)
    qh = _van_loan(np.asarray(model.a), np.asarray(model.accel_column), h)[1]
    chol = np.linalg.cholesky(q_psd * qh + 1e-18 * np.eye(n))
    x = np.empty((ticks * s + 1, batch, n))
    x[0] = rng.standard_normal((batch, n)) @ np.linalg.cholesky(p0).T
    for i in range(ticks * s):
        x[i + 1] = x[i] @ ph.T + u_tick[i // s] * gh + rng.standard_normal((batch, n)) @ chol.T
    return x, u_tick


def test_late_reading_at_capture_time_equals_on_time_reading():
    """Noise-free run: the same readings on time (age 0) and 140 ms late give the same estimate
    at every tick where no reading is still on its way."""
    model = _roll_only_model()
    h, s, batch, ticks = 0.01, 2, 3, 200
    cfg = LQGConfig(model=model, delay_step_s=h, max_delay_s=0.3)
    p0 = np.eye(model.n) * 1e-12
    u = 0.1 * np.cos(0.9 * np.arange(ticks) * s * h)
    x, _ = _truth_held(model, h, s, ticks, batch, 0.0, np.random.default_rng(1), p0, u)
    x[:, :, model.phi_index] += np.radians([5.0, -3.0, 10.0])  # the filter does not know the start
    truth = x[::s][:ticks]
    every, late = 25, 7  # a reading every 0.5 s, delivered 7 ticks (140 ms) late
    phi = model.phi_index
    on_time, delayed = [], []
    none = (np.zeros(batch), np.zeros(batch), np.zeros(batch, bool))
    for k in range(ticks):
        on_time.append((truth[k, :, phi], np.zeros(batch), np.ones(batch, bool)) if k % every == 0 else none)
        c = k - late
        if c >= 0 and c % every == 0:
            delayed.append((truth[c, :, phi], np.full(batch, late * s * h), np.ones(batch, bool)))
        else:
            delayed.append(none)
    gyro = truth[:, :, model.p_index]
    est_a, cov_a = _run_filter(cfg, truth, on_time, gyro, u, s)
    est_b, cov_b = _run_filter(cfg, truth, delayed, gyro, u, s)
    settled = np.array([k % every >= late for k in range(ticks)])
    assert_allclose(est_b[settled], est_a[settled], rtol=1e-8, atol=1e-10)
    assert_allclose(cov_b[settled], cov_a[settled], rtol=1e-7, atol=1e-14)
    # while a reading is on its way the late filter knows less (not a vacuous comparison)
    assert not np.allclose(est_b[~settled], est_a[~settled], rtol=1e-6, atol=1e-9)


def test_lqg_tracks_better_without_latency():
    """Same seed, same runs (common random numbers): no latency versus 150 ms.

    Camera only: every run tracks better without latency. With a noise-free
    gyro the filter carries the bank across the delay, so the latency then
    costs less than a tenth of what it costs the camera-only loop (measured:
    about 1 %) and still does not help on average.
    """

    def itae(sensor):
        out = run_scenario(parse_scenario(_doc(sensor, runs=6)))
        assert not out.trace.diverged.any()
        return out.metrics["itae"]

    cam = {"frame_rate_hz": 25.0, "noise_deg": 0.3}
    cost_cam = itae(dict(cam, latency_s=0.15)) - itae(dict(cam, latency_s=0.0))
    assert np.all(cost_cam > 0)
    gyro = dict(cam, gyro={"rate_hz": 100.0, "noise_deg_s": 0.0})
    cost_gyro = itae(dict(gyro, latency_s=0.15)) - itae(dict(gyro, latency_s=0.0))
    assert cost_gyro.mean() >= -0.1 * cost_cam.mean()
    assert abs(cost_gyro.mean()) < 0.1 * cost_cam.mean()


def test_per_run_parameters_equal_runs_alone():
    sc = parse_scenario(
        _doc(
            {"frame_rate_hz": 25.0, "latency_s": 0.08, "noise_deg": 0.5, "gyro": {"noise_deg_s": 0.3}}, runs=2
        )
    )
    ctrl = make_controller(sc.controller, scenario=sc)
    psd = np.array([0.2, 3.0])
    bank = np.radians([3.0, 8.0])
    cfg = dataclasses.replace(ctrl.cfg, accel_psd=psd, max_bank_error_rad=bank)
    both = simulate(build_setup(sc), LQGController(cfg), seed=5, run_indices=[0, 1])
    for i in range(2):
        one_cfg = dataclasses.replace(ctrl.cfg, accel_psd=float(psd[i]), max_bank_error_rad=float(bank[i]))
        alone = simulate(build_setup(sc), LQGController(one_cfg), seed=5, run_indices=[i])
        assert_allclose(both.bank[i], alone.bank[0], rtol=1e-9, atol=1e-12)
    assert not np.allclose(both.bank[0], both.bank[1])
