"""The engine contract: parameters apart from state, pure observe, lock-step steppers, restarts."""

from __future__ import annotations

import math

import numpy as np
import pytest
from helpers import DRIFTING_GYRO
from numpy.testing import assert_array_equal
from rollrig.controllers.pid import PIDConfig, PIDController
from rollrig.sensors.camera import BurstConfig, CameraConfig
from rollrig.sim import presets
from rollrig.sim.actuator import ActuatorSpec
from rollrig.sim.core import LoopSetup, Stepper, simulate
from rollrig.sim.disturbance import SteadyRollMoment
from rollrig.sim.gusts import OneMinusCosineGust
from rollrig.sim.turbulence import INTENSITY_W20_MPS, DrydenTurbulence, dryden_params

D = math.radians


def everything_setup(n: int = 300, every: int = 2) -> LoopSetup:
    """Every random and time-dependent part switched on (camera stages, gyro, disturbances)."""
    plant = presets.light_single()
    # Not ALL_STAGES_CAMERA: test_per_run varies range_rad per run, which a classifier forbids.
    cam = CameraConfig(
        frame_rate_hz=30,
        latency_s=0.05,
        noise_rad=D(0.3),
        quantization_rad=D(0.25),
        jitter_s=0.003,
        exposure_s=0.02,
        latency_jitter_s=0.01,
        wander_rad=D(0.3),
        outlier_prob=0.02,
        outlier_rad=D(10.0),
        dropout_prob=0.05,
        bursts=BurstConfig(0.1, 3.0),
    )
    turb = DrydenTurbulence(
        dryden_params(200.0, INTENSITY_W20_MPS["moderate"], plant.airspeed_mps, plant.span_m)
    )
    dist = (
        SteadyRollMoment(0.1, step_time_s=1.0, step_accel_rad_s2=0.2),
        turb,
        OneMinusCosineGust(0.5, 20.0, 2.0, "v_gust", plant.airspeed_mps),
    )
    t = np.arange(n + 1) * 0.01
    return LoopSetup(
        plant=plant,
        dt=0.01,
        n_steps=n,
        ctrl_every=every,
        actuator=ActuatorSpec(0.08, D(20), D(60)),
        camera=cam,
        gyro=DRIFTING_GYRO,
        bank_cmd=np.where(t >= 0.3, D(15), 0.0),
        x0=np.zeros(plant.n_states),
        disturbances=dist,
    )


def pid() -> PIDController:
    return PIDController(PIDConfig(kp=0.6, ki_per_s=0.15, kd_s=0.08, derivative_source="gyro"))


def test_observe_is_pure():
    """Regression: observe() used to advance the camera's tick counter."""
    setup = everything_setup(200)
    ref = simulate(setup, pid(), seed=3, run_indices=range(2))
    st = Stepper(setup)
    ctrl = pid()
    obs = st.reset(3, range(2))
    ctrl.reset(2)
    while obs is not None:
        again = st.observe()
        st.observe()
        assert_array_equal(again.bank, obs.bank)
        assert_array_equal(again.age, obs.age)
        obs = st.advance(ctrl.step(st.observe()))
    assert_array_equal(st.trace().bank, ref.bank)
    assert_array_equal(st.trace().bank_meas, ref.bank_meas)


def test_two_steppers_on_one_setup_in_lock_step_with_different_batch_sizes():
    """Regression: disturbance state lived in the shared setup ("expected k0 = 512, got 0")."""
    setup = everything_setup(1200)  # longer than one disturbance block
    a_ref = simulate(setup, pid(), seed=5, run_indices=range(3))
    b_ref = simulate(setup, pid(), seed=5, run_indices=[7, 8])
    a, b = Stepper(setup), Stepper(setup)
    ca, cb = pid(), pid()
    oa, ob = a.reset(5, range(3)), b.reset(5, [7, 8])
    ca.reset(3), cb.reset(2)
    while oa is not None or ob is not None:
        if oa is not None:
            oa = a.advance(ca.step(oa))
        if ob is not None:
            ob = b.advance(cb.step(ob))
    assert_array_equal(a.trace().bank, a_ref.bank)
    assert_array_equal(b.trace().bank, b_ref.bank)
    assert_array_equal(b.trace().bank_meas, b_ref.bank_meas)


def test_views_are_read_only_and_track_the_state():
    setup = everything_setup(100)
    st = Stepper(setup)
    obs = st.reset(1, range(2))
    ctrl = pid()
    ctrl.reset(2)
    for _ in range(10):
        obs = st.advance(ctrl.step(obs))
    tr_bank = st.rec_bank[st.k]
    assert_array_equal(st.bank, tr_bank)
    assert_array_equal(st.aileron, st.rec_ail[st.k])
    for view in (st.bank, st.roll_rate, st.sideslip, st.yaw_rate, st.aileron):
        assert view.shape == (2,)
        with pytest.raises(ValueError):
            view[0] = 1.0
    assert_array_equal(st.episode_step, [20, 20])
    assert np.all(st.sideslip != 0.0) and np.all(st.yaw_rate != 0.0)  # turbulence moves them


def _local_history(setup, run: int, seed: int, n_ticks: int):
    """Bank, aileron and reading of a fresh single run at each of its first ticks."""
    st = Stepper(setup)
    ctrl = pid()
    obs = st.reset(seed, [run])
    ctrl.reset(1)
    out = []
    for _ in range(n_ticks):
        out.append((st.bank[0], st.aileron[0], obs.bank[0], obs.age[0], obs.rate[0], obs.bank_cmd[0]))
        obs = st.advance(ctrl.step(obs))
        if obs is None:
            break
    return out


def _restart_and_log(setup, seed: int, restart_tick: int, rows, runs, new_setup=None):
    """Three rows of ``setup``; after ``restart_tick`` ticks restart ``rows`` with ``runs``
    (and ``new_setup``), and go on to the end. Returns each row's log before and after."""
    st = Stepper(setup)
    ctrl = pid()
    obs = st.reset(seed, [0, 1, 2], record="none")
    ctrl.reset(3)
    seen = {r: [] for r in range(3)}
    before = None
    for tick in range(10**6):
        if tick == restart_tick:
            before, seen = seen, {r: [] for r in range(3)}
            obs = st.restart(rows, runs, setup=new_setup)
            ctrl.reset_rows(rows)
            steps_after_restart = st.episode_step.copy()
        if obs is None:
            break
        for r in range(3):
            seen[r].append((st.bank[r], st.aileron[r], obs.bank[r], obs.age[r], obs.rate[r], obs.bank_cmd[r]))
        obs = st.advance(ctrl.step(obs))
    assert st.finished.all()
    return before, seen, steps_after_restart


@pytest.mark.parametrize("restart_tick", [0, 37, 140])
def test_restarted_rows_evolve_as_fresh_runs(restart_tick):
    """After restart(rows, runs) each row replays a fresh single run with its run index, bit for bit,
    while the other rows go on unchanged (camera plan, disturbances, gyro and command restart)."""
    setup = everything_setup(300)
    seed = 11
    before, seen, steps = _restart_and_log(setup, seed, restart_tick, [2, 0], [9, 7])
    assert_array_equal(steps, [0, restart_tick * 2, 0])
    fresh7 = _local_history(setup, 7, seed, 150)
    fresh9 = _local_history(setup, 9, seed, 150)
    fresh1 = _local_history(setup, 1, seed, 150)
    assert seen[0][: len(fresh7)] == fresh7
    assert seen[2][: len(fresh9)] == fresh9
    assert before[1] + seen[1][: 150 - restart_tick] == fresh1  # row 1 went on undisturbed


def _dispersed(setup, k: float):
    """``setup`` with every kind of per-run value changed by the factor ``k`` (same structure)."""
    from dataclasses import replace

    cam = replace(setup.camera, latency_s=0.05 * k, noise_rad=D(0.3) * k, dropout_prob=0.05 * k)
    turb, moment, gust = setup.disturbances[1], setup.disturbances[0], setup.disturbances[2]
    p = turb.params
    turb = replace(turb, params=replace(p, sigma_v_mps=p.sigma_v_mps * k, sigma_w_mps=p.sigma_w_mps * k))
    x0 = np.zeros(setup.plant.n_states)
    x0[setup.plant.phi_index] = D(10.0) * k
    return replace(
        setup,
        actuator=ActuatorSpec(0.08 * k, D(20), D(60) * k),
        camera=cam,
        gyro=replace(setup.gyro, noise_rad_s=setup.gyro.noise_rad_s * k),
        bank_cmd=setup.bank_cmd * k,
        x0=x0,
        disturbances=(replace(moment, accel_rad_s2=0.1 * k), turb, replace(gust, amplitude=0.5 * k)),
    )


@pytest.mark.parametrize("restart_tick", [0, 61])
def test_restart_with_a_new_setup_gives_rows_its_per_run_values(restart_tick):
    """restart(rows, runs, setup=...) makes a restarted row a fresh run of the new setup, bit for bit
    (servo, camera, gyro, command, initial state, every disturbance's intensity), while the others
    go on with the values they started with."""
    base = everything_setup(300)
    other = _dispersed(base, 1.5)
    seed = 5
    before, seen, _ = _restart_and_log(base, seed, restart_tick, [1], [8], new_setup=other)
    fresh8 = _local_history(other, 8, seed, 150)
    assert seen[1][: len(fresh8)] == fresh8
    assert fresh8 != _local_history(base, 8, seed, 150)  # the new values did change the run
    fresh0 = _local_history(base, 0, seed, 150)
    assert before[0] + seen[0][: 150 - restart_tick] == fresh0  # row 0 kept its values


def test_restart_refuses_a_setup_of_another_structure():
    from dataclasses import replace

    base = everything_setup(50)
    st = Stepper(base)
    st.reset(0, range(2))
    with pytest.raises(ValueError, match="ctrl_every"):
        st.restart([0], [3], setup=replace(base, ctrl_every=5))
    with pytest.raises(ValueError, match="frame_rate_hz"):
        st.restart([0], [3], setup=replace(base, camera=replace(base.camera, frame_rate_hz=20.0)))


def test_restart_rejects_bad_rows():
    st = Stepper(everything_setup(50))
    st.reset(0, range(2))
    with pytest.raises(ValueError, match="rows"):
        st.restart([0, 0], [1, 2])
    with pytest.raises(ValueError, match="run indices"):
        st.restart([0], [1, 2])


# ------------------------------------------------------------------ servo limits
def test_limit_servo_decides_binding_with_the_limits_not_rounding():
    """Regression: a free servo step inside both limits must stay as it is. Deciding by
    ``clipped != free`` called it binding when ``before + (free - before)`` differs from
    ``free`` in the last bit, and redid the plant step with another method."""
    setup = everything_setup(20)
    st = Stepper(setup)
    st.reset(0, range(3))
    nx = setup.plant.n_states
    before, free = 0.20134152990016446, -0.13087330358127472
    assert before + (free - before) != free  # the rounding case
    X = np.zeros((st._nrow, 3))
    Y = np.full((st._nrow, 3), 0.5)
    X[nx] = [before, 0.0, 0.0]
    lim, mc = setup.actuator.limit_rad, setup.actuator.rate_limit_rad_s * setup.dt
    Y[nx] = [free, 0.9 * mc, 1.5 * mc]  # inside, inside, beyond the rate limit
    st._max_change = np.full(3, 1.0)  # rate limit far away for run 0
    st._max_change[1:] = mc
    y_before = Y.copy()
    st._limit_servo(X, Y, np.arange(3))
    assert_array_equal(Y[:, :2], y_before[:, :2])  # untouched: neither limit binds
    assert Y[nx, 2] == pytest.approx(mc, rel=1e-15)  # clipped to the rate limit
    assert not np.array_equal(Y[:nx, 2], y_before[:nx, 2])  # plant redone with the mean servo
    assert lim > mc


# ------------------------------------------------------------------ recording levels and chunks
def _spec(setup):
    from rollrig.sim.metrics import MetricSpec, StepSegment

    return MetricSpec(
        steps=(StepSegment(0.3, setup.duration_s, 0.0, D(15)),),
        settle_band_frac=0.05,
        settle_band_rad=None,
        hold_band_rad=D(2),
        bank_limit_rad=D(60),
        aileron_limit_rad=D(20),
        aileron_rate_limit_rad_s=D(60),
    )


def test_metrics_level_and_chunks_give_the_full_levels_metrics_bit_for_bit():
    from rollrig.sim.driver import run_batch
    from rollrig.sim.metrics import evaluate

    setup = everything_setup(400)
    spec = _spec(setup)
    full = run_batch(setup, pid(), seed=4, run_indices=range(5), metric_spec=spec)
    want = evaluate(full.trace, spec)
    for chunk in (5, 2, 1):
        lean = run_batch(
            setup, pid(), seed=4, run_indices=range(5), record="metrics", metric_spec=spec, chunk_runs=chunk
        )
        assert lean.trace is None and lean.chunks == -(-5 // chunk)
        assert set(lean.metrics) == set(want)
        for k, v in want.items():
            assert_array_equal(lean.metrics[k], v, err_msg=k)
        assert_array_equal(lean.run_index, np.arange(5))


def test_chunks_cut_per_run_parameters_and_controllers():
    from rollrig.sim.driver import run_batch

    setup = everything_setup(200)
    setup = LoopSetup(
        **{**setup.__dict__, "camera": CameraConfig(noise_rad=np.array([0.0, 0.01, 0.02, 0.03]))}
    )
    ctrl = PIDController(PIDConfig(kp=np.array([0.3, 0.6, 0.9, 1.2]), ki_per_s=0.1, kd_s=0.05))
    spec = _spec(setup)
    one = run_batch(
        setup, ctrl, seed=1, run_indices=range(4), record="metrics", metric_spec=spec, chunk_runs=4
    )
    three = run_batch(
        setup, ctrl, seed=1, run_indices=range(4), record="metrics", metric_spec=spec, chunk_runs=3
    )
    for k in one.metrics:
        assert_array_equal(one.metrics[k], three.metrics[k], err_msg=k)


def test_perturbation_through_the_driver():
    from rollrig.sim.driver import Perturbation, run_batch

    ideal = ActuatorSpec(time_constant_s=0.0, limit_rad=1.0, rate_limit_rad_s=math.inf)
    setup = LoopSetup(
        **{**everything_setup(100).__dict__, "actuator": ideal, "disturbances": (), "gyro": None}
    )

    class Hold:
        def reset(self, batch):
            self.batch = batch

        def step(self, obs):
            return np.full(self.batch, 0.01)

    res = run_batch(
        setup, Hold(), seed=0, run_indices=[0, 0, 0], perturbation=Perturbation([1.0, 2.0, 1.0], [0, 0, 0.07])
    )
    ail = res.trace.aileron
    assert np.allclose(ail[0, 1:], 0.01, rtol=1e-12) and np.allclose(ail[1, 1:], 0.02, rtol=1e-12)
    assert np.all(ail[2, 1:8] == 0.0) and np.allclose(ail[2, 8:], 0.01, rtol=1e-12)
