"""The gymnasium environment over the stepping core: API checks, seeding, observation contents."""

from __future__ import annotations

import math

import gymnasium as gym
import numpy as np
import pytest
from gymnasium.utils.env_checker import check_env
from helpers import SCENARIO_DIR
from rollrig.controllers.policy import ObservationLayout
from rollrig.sim.envs import ENV_ID, RollHoldEnv
from rollrig.sim.errors import UserInputError

STEP = SCENARIO_DIR / "learned-bank-step.toml"
RANDOM = {
    "initial_bank_deg": (-10.0, 10.0),
    "command_scale": (-1.0, 1.0),
    "latency_s": (0.02, 0.1),
    "dropout_prob": (0.0, 0.1),
    "noise_deg": (0.1, 0.5),
    "turbulence_scale": (0.5, 2.0),
}


def rollout(env, seed, n=120, actions=None):
    obs, _ = env.reset(seed=seed)
    rng = np.random.default_rng(0)
    out = [obs]
    rewards = []
    for i in range(n):
        a = env.action_space.sample() if actions is None else actions[i]
        if actions is None:
            a = rng.uniform(-1, 1, size=1).astype(np.float32)
        obs, r, term, trunc, _ = env.step(a)
        out.append(obs)
        rewards.append(r)
        if term or trunc:
            obs, _ = env.reset()
            out.append(obs)
    return np.array(out), np.array(rewards)


def test_gymnasium_check_env_passes():
    env = gym.make(ENV_ID, scenario=STEP, randomize=RANDOM, render_mode="rgb_array")
    check_env(env.unwrapped)
    frame = env.reset(seed=0) and env.render()
    assert frame.shape == (240, 240, 3) and frame.dtype == np.uint8


def test_stable_baselines3_check_env_passes():
    sb3 = pytest.importorskip("stable_baselines3.common.env_checker")
    sb3.check_env(RollHoldEnv(STEP, randomize=RANDOM), warn=True)


def test_same_seed_same_rollout_other_seed_differs():
    a = rollout(RollHoldEnv(STEP, randomize=RANDOM), 11)
    b = rollout(RollHoldEnv(STEP, randomize=RANDOM), 11)
    c = rollout(RollHoldEnv(STEP, randomize=RANDOM), 12)
    np.testing.assert_array_equal(a[0], b[0])
    np.testing.assert_array_equal(a[1], b[1])
    assert not np.array_equal(a[0], c[0])


def test_observation_is_float32_and_never_the_true_bank():
    env = RollHoldEnv(STEP)
    layout = ObservationLayout(history=3, gyro=True)
    assert env.observation_space.shape == (layout.size,)
    obs, info = env.reset(seed=3, options={"randomize": {"initial_bank_deg": 12.0}})
    assert obs.dtype == np.float32
    assert info["bank_true_rad"] == pytest.approx(math.radians(12.0), abs=1e-12)
    # no frame has arrived yet (40 ms latency): reading 0, invalid, age clipped
    assert obs[layout.names.index("reading[0]")] == 0.0
    assert obs[layout.names.index("age[0]")] == 2.0
    for _ in range(5):
        obs, _, _, _, info = env.step(np.array([0.0], np.float32))
    # the camera's view of the ~12° bank (0.3° noise, 0.5° rounding): near, not equal
    reading = obs[layout.names.index("reading[0]")] * 30.0
    assert abs(reading - math.degrees(info["bank_true_rad"])) < 2.0
    assert obs[layout.names.index("valid[0]")] in (0.0, 1.0)
    for _ in range(100):
        obs, _, _, _, info = env.step(np.array([0.3], np.float32))
    truth = info["bank_true_rad"] / math.radians(30.0)
    assert not np.any(obs == np.float32(truth))


def test_episode_truncates_at_duration_and_terminates_at_bank_limit():
    env = RollHoldEnv(STEP)
    env.reset(seed=0)
    n = 0
    while True:
        _, _, term, trunc, info = env.step(np.array([0.0], np.float32))
        n += 1
        if term or trunc:
            break
    assert trunc and not term and n == 400  # 8 s at 50 Hz
    assert info["t_s"] == pytest.approx(8.0)
    env.reset(seed=0)
    ticks, term, trunc = 0, False, False
    while not (term or trunc):  # full aileron: the 45° limit comes in a few seconds
        _, r, term, trunc, info = env.step(np.array([1.0], np.float32))
        ticks += 1
    assert term and not trunc and abs(info["bank_true_rad"]) > math.radians(45.0)
    assert r < -2.0 * (400 - ticks)  # the termination penalty: 2 per tick left


def test_randomised_values_trace_back_to_the_reset_seed():
    env = RollHoldEnv(STEP, randomize=RANDOM)
    env.reset(seed=5)
    first = env.draw
    env.reset(seed=5)
    assert env.draw == first
    env.reset()
    assert env.draw != first
    for key, (lo, hi) in RANDOM.items():
        assert lo <= getattr(first, key) <= hi


def test_bad_randomisation_ranges_are_refused_with_one_line():
    with pytest.raises(UserInputError, match="latency_s .* allowed: 0 ≤ low ≤ high ≤ 5 s"):
        RollHoldEnv(STEP, randomize={"latency_s": (0.2, 0.1)})
    with pytest.raises(UserInputError, match="unknown key 'wind'"):
        RollHoldEnv(STEP, randomize={"wind": 1.0})


def test_env_built_from_a_dict_and_from_a_scenario_object_agree():
    import tomllib

    from rollrig.sim.scenario import load_scenario

    doc = tomllib.loads(STEP.read_text())
    a = rollout(RollHoldEnv(doc), 4, n=50)
    b = rollout(RollHoldEnv(load_scenario(STEP)), 4, n=50)
    np.testing.assert_array_equal(a[0], b[0])
