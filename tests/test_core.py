"""The stepping core: exactness, timing, determinism, batching, divergence."""

from __future__ import annotations

import math

import numpy as np
import pytest
from numpy.testing import assert_allclose, assert_array_equal
from rollrig.controllers.base import Observation
from rollrig.controllers.pid import PIDConfig, PIDController
from rollrig.sensors.camera import CameraConfig
from rollrig.sim import presets
from rollrig.sim.actuator import ActuatorSpec
from rollrig.sim.core import LoopSetup, Stepper, simulate
from rollrig.sim.disturbance import SteadyRollMoment
from rollrig.sim.plant import continuous_response


class Constant:
    """Open-loop controller: a fixed aileron command (rad)."""

    def __init__(self, u: float) -> None:
        self.u = u
        self.seen: list[Observation] = []

    def reset(self, batch: int) -> None:
        self.batch = batch

    def step(self, obs: Observation) -> np.ndarray:
        self.seen.append(obs)
        return np.full(self.batch, self.u)


def _setup(plant=None, *, n=600, dt=0.01, every=2, act=None, cam=None, dist=(), cmd=0.0, x0=None):
    plant = plant or presets.light_single()
    return LoopSetup(
        plant=plant,
        dt=dt,
        n_steps=n,
        ctrl_every=every,
        actuator=act or ActuatorSpec(),
        camera=cam or CameraConfig(),
        bank_cmd=np.full(n + 1, cmd),
        x0=np.zeros(plant.n_states) if x0 is None else np.asarray(x0, float),
        disturbances=dist,
    )


@pytest.mark.parametrize("name", ["light-single", "small-uav", "roll-only"])
def test_open_loop_matches_solve_ivp(name):
    """Core with an ideal servo equals an independent ODE integration (SciPy DOP853)."""
    plant = presets.PRESETS[name]()
    ideal = ActuatorSpec(time_constant_s=0.0, limit_rad=1.0, rate_limit_rad_s=math.inf)
    u, accel = 0.02, 0.3
    x0 = np.zeros(plant.n_states)
    x0[plant.phi_index] = 0.1
    setup = _setup(plant, n=300, act=ideal, x0=x0, dist=(SteadyRollMoment(accel),))
    tr = simulate(setup, Constant(u), seed=0, record_states=True)
    t = tr.t
    u_c = np.tile([u, 0.0], (t.size, 1))
    u_d = np.tile([0.0, 0.0, 0.0, accel], (t.size, 1))
    ref = continuous_response(plant, t, u_c, u_d, x0)
    assert_allclose(tr.states[0], ref, rtol=1e-9, atol=1e-11)


def test_servo_lag_in_the_loop_matches_solve_ivp():
    """Unsaturated servo lag: core equals ODE integration of plant + servo as one system."""
    from rollrig.sim.plant import LinearPlant

    plant = presets.light_single()
    tau, u = 0.08, 0.03
    n = plant.n_states
    a = np.zeros((n + 1, n + 1))
    a[:n, :n] = plant.a
    a[:n, n] = plant.b_control[:, 0]
    a[n, n] = -1.0 / tau
    b = np.zeros((n + 1, 2))
    b[n, 0] = 1.0 / tau
    aug = LinearPlant("aug", a, b, np.zeros((n + 1, 4)), (*plant.state_names, "servo"), plant.airspeed_mps)
    setup = _setup(plant, n=200, act=ActuatorSpec(tau, 1.0, math.inf))
    tr = simulate(setup, Constant(u), seed=0, record_states=True)
    ref = continuous_response(
        aug, tr.t, np.tile([u, 0.0], (tr.t.size, 1)), np.zeros((tr.t.size, 4)), np.zeros(n + 1)
    )
    assert_allclose(tr.states[0], ref[:, :n], rtol=1e-9, atol=1e-12)
    assert_allclose(tr.aileron[0], ref[:, n], rtol=1e-9, atol=1e-12)


def test_servo_lag_and_limits_exact():
    """First-order lag sampled exactly: δ_k = u (1 − e^{−k dt/τ}); rate limit gives a ramp."""
    tau, dt = 0.1, 0.01
    setup = _setup(n=100, dt=dt, act=ActuatorSpec(tau, math.radians(20), math.inf))
    tr = simulate(setup, Constant(math.radians(5)), seed=0)
    k = np.arange(101)
    assert_allclose(tr.aileron[0], math.radians(5) * (1 - np.exp(-k * dt / tau)), rtol=1e-12, atol=1e-15)

    rate = math.radians(30)
    setup = _setup(n=100, dt=dt, act=ActuatorSpec(0.0, math.radians(20), rate))
    tr = simulate(setup, Constant(math.radians(10)), seed=0)
    expected = np.minimum(rate * k * dt, math.radians(10))
    assert_allclose(tr.aileron[0], expected, rtol=1e-12, atol=1e-15)

    setup = _setup(n=50, dt=dt, act=ActuatorSpec(0.0, math.radians(4), math.inf))
    tr = simulate(setup, Constant(math.radians(10)), seed=0)
    assert tr.aileron.max() == pytest.approx(math.radians(4), rel=0, abs=1e-15)


def test_reading_is_bank_at_capture_and_age_is_latency_plus_hold():
    """Noise-free camera: reading = true bank at capture time; age = latency + time since capture."""
    dt, latency = 0.01, 0.05
    cam = CameraConfig(frame_rate_hz=20.0, latency_s=latency)
    x0 = np.zeros(4)
    x0[3] = 0.2
    setup = _setup(n=200, dt=dt, cam=cam, x0=x0)
    ctrl = Constant(0.01)
    tr = simulate(setup, ctrl, seed=0)
    for obs in ctrl.seen[10:]:
        k_cap = int(round((obs.t - obs.age[0]) / dt))
        assert obs.bank[0] == pytest.approx(tr.bank[0, k_cap], abs=1e-15)
    ages = np.array([o.age[0] for o in ctrl.seen[10:]])
    # 20 Hz frames on a 50 Hz controller: ages run from the latency to latency + one frame
    assert ages.min() == pytest.approx(latency, abs=1e-9)
    assert ages.max() < latency + 0.05 + 1e-9
    # mean age = latency + half a frame period (sample-and-hold; textbook identity, docs/references.md
    # "Sensor statistics"), within the base grid's resolution
    assert ages.mean() == pytest.approx(latency + 0.025, abs=0.006)


def _noisy_setup(n=500):
    from rollrig.sim.turbulence import INTENSITY_W20_MPS, DrydenTurbulence, dryden_params

    cam = CameraConfig(
        frame_rate_hz=30,
        latency_s=0.05,
        noise_rad=math.radians(0.5),
        quantization_rad=math.radians(0.5),
        dropout_prob=0.1,
    )
    plant = presets.light_single()
    turb = DrydenTurbulence(
        dryden_params(200.0, INTENSITY_W20_MPS["moderate"], plant.airspeed_mps, plant.span_m)
    )
    return _setup(n=n, cam=cam, cmd=math.radians(10), dist=(SteadyRollMoment(0.2), turb))


def _pid():
    return PIDController(PIDConfig(kp=0.6, ki_per_s=0.15, kd_s=0.08))


def test_same_seed_bit_identical_and_seed_matters():
    a = simulate(_noisy_setup(), _pid(), seed=5, run_indices=range(3))
    b = simulate(_noisy_setup(), _pid(), seed=5, run_indices=range(3))
    c = simulate(_noisy_setup(), _pid(), seed=6, run_indices=range(3))
    assert_array_equal(a.bank, b.bank)
    assert_array_equal(a.bank_meas, b.bank_meas)
    assert not np.array_equal(a.bank_meas, c.bank_meas)


def test_batch_of_n_equals_n_single_runs():
    batch = simulate(_noisy_setup(), _pid(), seed=9, run_indices=range(5))
    for i in range(5):
        single = simulate(_noisy_setup(), _pid(), seed=9, run_indices=[i])
        assert_array_equal(single.bank[0], batch.bank[i])  # bit for bit (see core.matmul_cols)
        assert_array_equal(single.valid[0], batch.valid[i])


def test_controllers_see_identical_sensor_randomness():
    """Common random numbers: frame losses and noise draws do not depend on the controller."""
    a = simulate(_noisy_setup(), _pid(), seed=2, run_indices=range(4))
    b = simulate(
        _noisy_setup(), PIDController(PIDConfig(kp=0.3, ki_per_s=0.0, kd_s=0.0)), seed=2, run_indices=range(4)
    )
    assert_array_equal(a.valid, b.valid)
    assert not np.allclose(a.bank, b.bank)


def test_runs_in_a_batch_are_different():
    tr = simulate(_noisy_setup(), _pid(), seed=1, run_indices=range(4))
    assert not np.array_equal(tr.valid[0], tr.valid[1])


def test_divergence_reported_with_time_and_no_nan():
    """A destabilising controller (positive feedback) diverges; the trace holds no NaN."""

    class Wrong:
        def reset(self, batch):
            self.b = batch

        def step(self, obs):
            return 2.0 * obs.bank  # wrong sign: pushes bank further

    x0 = np.zeros(4)
    x0[3] = 0.05
    setup = _setup(n=3000, x0=x0, act=ActuatorSpec(0.05, 1.0, math.inf))
    tr = simulate(setup, Wrong(), seed=0)
    assert tr.diverged[0]
    assert 0 < tr.diverged_at[0] < 30
    assert np.all(np.isfinite(tr.bank))
    k = int(round(tr.diverged_at[0] / setup.dt))
    assert abs(tr.bank[0, k]) >= math.pi
    assert_array_equal(tr.bank[0, k:], tr.bank[0, k])  # frozen after divergence


def test_nonfinite_command_counts_as_diverged():
    class Broken(Constant):
        def step(self, obs):
            return np.full(self.batch, np.nan)

    tr = simulate(_setup(n=100), Broken(0.0), seed=0)
    assert tr.diverged[0] and tr.diverged_at[0] == 0.0
    assert np.all(np.isfinite(tr.bank))


def test_pid_holds_wings_level_against_a_rolling_moment():
    tr = simulate(_setup(n=3000, dist=(SteadyRollMoment(0.3),)), _pid(), seed=0)
    assert abs(tr.bank[0, -1]) < math.radians(0.2)  # integral action removes the bias


def test_stepper_manual_loop_equals_simulate():
    setup = _noisy_setup(200)
    ref = simulate(setup, _pid(), seed=4, run_indices=range(2))
    st = Stepper(setup)
    ctrl = _pid()
    obs = st.reset(4, range(2))
    ctrl.reset(2)
    while obs is not None:
        obs = st.advance(ctrl.step(obs))
    assert_array_equal(st.trace().bank, ref.bank)


def test_input_gain_and_delay_perturbation():
    """Margin perturbations at the aileron command: gain scales it, delay shifts it by whole steps."""
    ideal = ActuatorSpec(time_constant_s=0.0, limit_rad=1.0, rate_limit_rad_s=math.inf)
    setup = _setup(n=100, act=ideal)
    st = Stepper(setup)
    obs = st.reset(0, range(3), input_gain=[1.0, 2.0, 1.0], input_delay_s=[0.0, 0.0, 0.07])
    while obs is not None:
        obs = st.advance(np.full(3, 0.01))
    ail = st.trace().aileron
    assert_allclose(ail[0, 1:], 0.01, rtol=1e-12)
    assert_allclose(ail[1, 1:], 0.02, rtol=1e-12)
    assert_allclose(ail[2, 1:8], 0.0, atol=1e-15)  # the command arrives 7 steps late
    assert_allclose(ail[2, 8:], 0.01, rtol=1e-12)


def test_run_alone_equals_run_in_batch_with_every_sensor_stage():
    """Replay is exact with jitter, exposure, random latency, wander, outliers, a weighted
    classifier, bursty losses and a drifting gyro (each stage draws per run)."""
    from helpers import ALL_STAGES_CAMERA, DRIFTING_GYRO

    base = _setup(n=800, cam=ALL_STAGES_CAMERA, cmd=math.radians(15))
    setup = LoopSetup(**{**base.__dict__, "gyro": DRIFTING_GYRO})
    pid = lambda: PIDController(PIDConfig(kp=0.6, ki_per_s=0.15, kd_s=0.08, derivative_source="gyro"))  # noqa: E731
    batch = simulate(setup, pid(), seed=3, run_indices=range(4))
    assert not np.array_equal(batch.bank[1], batch.bank[2])
    for i in (0, 2):
        one = simulate(setup, pid(), seed=3, run_indices=[i])
        assert_array_equal(one.bank[0], batch.bank[i])
        assert_array_equal(one.bank_meas[0], batch.bank_meas[i])
