"""PPO/SAC through stable-baselines3 (the ``rl`` extra): smoke test and the numpy export's exactness.

CI installs the extra (``.ci/run``); elsewhere these tests skip when it is absent.
"""

from __future__ import annotations

import numpy as np
import pytest
from helpers import SCENARIO_DIR, short_training_scenario
from rollrig.controllers.policy import load_policy

torch = pytest.importorskip("torch")
pytest.importorskip("stable_baselines3")
STEP = SCENARIO_DIR / "learned-bank-step.toml"


def short_scenario(tmp_path):
    return short_training_scenario(tmp_path, runs=3)


def test_ppo_smoke_trains_writes_and_flies_a_policy(cli, tmp_path):
    out = tmp_path / "ppo"
    code, _, err = cli(["train", short_scenario(tmp_path), "--algo", "ppo", "--steps", "2048", "--out", out])
    assert code == 0, err
    net, layout, meta = load_policy(out / "policy.npz")
    assert meta["algorithm"] == "ppo" and meta["steps"] >= 2048 and net.output == "clip"
    code, _, err = cli(["run", out / "policy-scenario.toml", "--no-files"])
    assert code == 0, err


@pytest.mark.parametrize("algo", ["ppo", "sac"])
def test_numpy_forward_pass_matches_torch_within_1e_6(algo):
    from rollrig.sim.envs import RollHoldEnv
    from rollrig.sim.training.sb3 import export_policy, make_model
    from stable_baselines3.common.env_util import make_vec_env

    env = make_vec_env(RollHoldEnv, n_envs=1, seed=0, env_kwargs=dict(scenario=STEP))
    model = make_model(env, algo, (32, 32), seed=3)
    with torch.no_grad():  # move the weights off their initial values
        for p in model.policy.parameters():
            p.add_(0.3 * torch.randn_like(p))
    net = export_policy(model, algo)
    x = np.random.default_rng(1).uniform(-2, 2, size=(256, env.observation_space.shape[0])).astype(np.float32)
    xt = torch.as_tensor(x)
    with torch.no_grad():
        if algo == "ppo":
            ref = model.policy.get_distribution(xt).distribution.mean.numpy()[:, 0]
            got = net.raw(x)
        else:
            ref = model.actor(xt, deterministic=True).numpy()[:, 0]
            got = net(x)
    assert np.max(np.abs(got - ref)) < 1e-6
    assert np.std(ref) > 0.05  # a non-trivial network, not a constant


def test_missing_extra_is_one_line(cli, tmp_path, monkeypatch):
    import builtins

    real = builtins.__import__

    def no_sb3(name, *a, **k):
        if name.startswith("stable_baselines3"):
            raise ImportError(name)
        return real(name, *a, **k)

    monkeypatch.setattr(builtins, "__import__", no_sb3)
    code, _, err = cli(["train", STEP, "--algo", "sac", "--out", tmp_path / "x"])
    assert code == 2 and "rl extra" in err and err.count("\n") == 1
