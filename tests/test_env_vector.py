"""The natively vectorised environment equals SyncVectorEnv of the scalar one, step for step."""

from __future__ import annotations

import gymnasium as gym
import numpy as np
import pytest
from helpers import SCENARIO_DIR
from rollrig.sim.envs import ENV_ID, RollHoldEnv
from rollrig.sim.envs.vector import RollHoldVectorEnv

STEP = SCENARIO_DIR / "learned-bank-step.toml"
PER_RUN = {
    "command_scale": (-1.0, 1.2),
    "latency_s": (0.02, 0.1),
    "dropout_prob": (0.0, 0.1),
    "turbulence_scale": (0.5, 2.0),
}


@pytest.mark.parametrize("randomize", [PER_RUN, {**PER_RUN, "initial_bank_deg": (-40.0, 40.0)}])
def test_vector_env_equals_sync_vector_env_with_autoresets(randomize):
    n = 5
    sync = gym.vector.SyncVectorEnv([lambda: RollHoldEnv(STEP, randomize=randomize) for _ in range(n)])
    vec = RollHoldVectorEnv(n, STEP, randomize=randomize)
    o_sync, _ = sync.reset(seed=3)
    o_vec, _ = vec.reset(seed=3)
    np.testing.assert_array_equal(o_sync, o_vec)
    rng = np.random.default_rng(1)
    ends = np.zeros(n, int)
    for _ in range(850):  # two 400-tick episodes and then some
        a = rng.uniform(-0.8, 0.8, (n, 1)).astype(np.float32)
        a[0] = 1.0  # member 0 rolls past the bank limit: early terminations
        got_sync, got_vec = sync.step(a), vec.step(a)
        for x, y in zip(got_sync[:4], got_vec[:4], strict=True):
            np.testing.assert_array_equal(x, y)
        ends += got_vec[2] | got_vec[3]
    assert ends.min() >= 2 and ends[0] > ends[1:].max()  # autoresets happened, some early
    assert vec.metadata["autoreset_mode"] == gym.vector.AutoresetMode.NEXT_STEP


def test_make_vec_uses_the_native_vector_env_and_seeds_reproduce():
    v = gym.make_vec(ENV_ID, num_envs=4, vectorization_mode="vector_entry_point", scenario=STEP)
    assert isinstance(v.unwrapped, RollHoldVectorEnv)
    a = np.full((4, 1), 0.2, np.float32)
    first = [v.reset(seed=9)[0], *(v.step(a)[0] for _ in range(30))]
    again = [v.reset(seed=9)[0], *(v.step(a)[0] for _ in range(30))]
    np.testing.assert_array_equal(np.array(first), np.array(again))


def test_seed_lists_give_common_random_numbers_to_paired_members():
    vec = RollHoldVectorEnv(4, STEP, randomize=PER_RUN)
    obs, _ = vec.reset(seed=[7, 7, 8, 8])
    np.testing.assert_array_equal(obs[0], obs[1])
    a = np.zeros((4, 1), np.float32)
    for _ in range(40):
        obs, *_ = vec.step(a)
    np.testing.assert_array_equal(obs[0], obs[1])
    assert not np.array_equal(obs[0], obs[2])
