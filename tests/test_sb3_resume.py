"""PPO/SAC checkpoints without pickle: exact resume, refusals, and an interrupted CLI run.

"Exact" is checked bit for bit: training ``N`` steps straight and training
``N/2``, checkpointing, then resuming a *new* model to ``N`` must give equal
arrays in the two final checkpoints — the policy's parameters, the optimisers'
moments and step counts, the random generators' states and, for SAC, the
replay buffer. The split falls in the middle of an episode, so the episode
tape (replaying the environment) is exercised too. Same machine, same library
versions, one torch thread: no tolerance is needed and none is allowed.

CI installs the ``rl`` extra (``.ci/run``); elsewhere these tests skip.
"""

from __future__ import annotations

import json
import os
import shutil
import signal
import subprocess
import sys
import time

import numpy as np
import pytest
from helpers import REPO, short_training_scenario
from rollrig.controllers.policy import load_policy

pytest.importorskip("torch")
pytest.importorskip("stable_baselines3")

from rollrig.sim.errors import UserInputError  # noqa: E402
from rollrig.sim.scenario import load_scenario  # noqa: E402
from rollrig.sim.training.session import load_checkpoint, save_checkpoint  # noqa: E402


def _train(sc, algo, steps, ckpt, resume=None, **kw):
    from rollrig.sim.training.sb3 import train_sb3_policy

    opts = dict(seed=1, ranges={}, hidden=(16, 16), history=3, eval_runs=1)
    opts.update(kw)
    return train_sb3_policy(sc, algo, steps=steps, checkpoint=ckpt, resume=resume, **opts)


def _assert_same_session(path_a, path_b):
    """Every array equal bit for bit; counters, generators and tape equal."""
    a, meta_a = load_checkpoint(path_a)
    b, meta_b = load_checkpoint(path_b)
    assert sorted(a) == sorted(b)
    differ = [k for k in a if a[k].dtype != b[k].dtype or not np.array_equal(a[k], b[k])]
    assert not differ, differ
    sa, sb = meta_a["state"], meta_b["state"]
    for key in ("params", "counters", "rng", "tape", "replay_buffer"):
        assert sa.get(key) == sb.get(key), key
    # the episode window's returns and lengths (its times are wall-clock)
    assert [(e["r"], e["l"]) for e in sa["episodes"]] == [(e["r"], e["l"]) for e in sb["episodes"]]
    rows = lambda m: [(r["iteration"], r["mean_return"]) for r in m["history"]]  # noqa: E731
    assert rows(meta_a) == rows(meta_b)


@pytest.fixture(scope="module")
def scenario(tmp_path_factory):
    return load_scenario(short_training_scenario(tmp_path_factory.mktemp("sc"), runs=2))


@pytest.mark.parametrize("steps, n_steps", [(256, 128), (128, 64)])
def test_ppo_resumed_in_a_new_model_is_bit_identical(scenario, tmp_path, steps, n_steps):
    """Split mid-episode (episodes are 100 ticks): at 128 the episode began by the generator's
    state; at 64 it is the first one, begun by the seed."""
    half_steps = steps // 2
    r_straight, _, straight = _train(scenario, "ppo", steps, tmp_path / "straight.npz", n_steps=n_steps)
    r_half, _, _ = _train(scenario, "ppo", half_steps, tmp_path / "half.npz", n_steps=n_steps)
    half, meta = load_checkpoint(tmp_path / "half.npz")
    assert r_half.checkpoint_step == half_steps == meta["state"]["counters"]["num_timesteps"]
    assert len(half["tape/actions"]) == half_steps % 100  # mid-episode: the environment is replayed
    assert (meta["state"]["tape"]["seed"] is not None) == (half_steps < 100)
    shutil.copy(tmp_path / "half.npz", tmp_path / "other-shuffle.npz")
    r, _, resumed = _train(scenario, "ppo", steps, tmp_path / "half.npz", resume=tmp_path / "half.npz")
    assert resumed["steps"] == straight["steps"] == steps
    _assert_same_session(tmp_path / "straight.npz", tmp_path / "half.npz")
    for wa, wb in zip(
        r_straight.net.weights + r_straight.net.biases, r.net.weights + r.net.biases, strict=True
    ):
        np.testing.assert_array_equal(wa, wb)
    # the comparison can fail: the same checkpoint with numpy's generator in another
    # state (it shuffles PPO's minibatches) ends elsewhere
    keys = np.random.RandomState(99).get_state()[1]
    _rewrite(tmp_path / "other-shuffle.npz", tmp_path / "other-shuffle.npz", add={"rng/numpy_keys": keys})
    _train(scenario, "ppo", steps, tmp_path / "other-shuffle.npz", resume=tmp_path / "other-shuffle.npz")
    with pytest.raises(AssertionError):
        _assert_same_session(tmp_path / "straight.npz", tmp_path / "other-shuffle.npz")


def test_sac_resumed_with_its_replay_buffer_is_bit_identical(scenario, tmp_path):
    # learning_starts = 200: the checkpoint at 250 holds 50 gradient steps of optimiser state
    _train(scenario, "sac", 500, tmp_path / "straight.npz", checkpoint_every=50)
    _train(scenario, "sac", 250, tmp_path / "half.npz", checkpoint_every=50)
    half, meta = load_checkpoint(tmp_path / "half.npz")
    assert meta["state"]["replay_buffer"]["pos"] == 250 and half["replay/observations"].shape[0] == 250
    assert len(half["tape/actions"]) == 50
    assert int(half["params/actor.optimizer/state/0/step"]) == 50
    _train(scenario, "sac", 500, tmp_path / "half.npz", resume=tmp_path / "half.npz", checkpoint_every=50)
    _assert_same_session(tmp_path / "straight.npz", tmp_path / "half.npz")


# ------------------------------------------------------------------ refusals
@pytest.fixture(scope="module")
def ppo_checkpoint(scenario, tmp_path_factory):
    path = tmp_path_factory.mktemp("ppo") / "good.npz"
    _train(scenario, "ppo", 128, path, n_steps=64)
    return path


def _rewrite(src, dst, drop=(), add=None, meta_changes=None):
    arrays, meta = load_checkpoint(src)
    for k in drop:
        del arrays[k]
    meta.update(meta_changes or {})
    save_checkpoint(dst, dict(arrays, **(add or {})), meta)
    return dst


@pytest.mark.parametrize(
    "case, algo, kw, message",
    [
        ("algo", "sac", {}, "another algorithm ('ppo', not 'sac')"),
        ("seed", "ppo", {"seed": 2}, "another seed"),
        ("network", "ppo", {"hidden": (8,)}, "another hidden layers ([16, 16], not [8])"),
        ("history", "ppo", {"history": 2}, "another observation layout;"),
        ("version", "ppo", {}, "checkpoint written by rollrig 0.0.0"),
        ("missing", "ppo", {}, "'params/policy/action_net.weight' is missing"),
        ("shapes", "ppo", {"hidden": (8, 8)}, "this network's (8, "),
        ("pickle", "ppo", {}, "is not a rollrig training checkpoint"),
        ("truncated", "ppo", {}, "is not a rollrig training checkpoint"),
        ("ars", "ppo", {}, "another algorithm ('ars', not 'ppo')"),
        ("scenario", "ppo", {}, "another scenario"),
    ],
)
def test_unusable_checkpoint_is_refused_naming_the_file(
    scenario, ppo_checkpoint, tmp_path, case, algo, kw, message
):
    bad = tmp_path / f"{case}.npz"
    if case == "version":
        _rewrite(ppo_checkpoint, bad, meta_changes={"rollrig_version": "0.0.0"})
    elif case == "missing":
        _rewrite(ppo_checkpoint, bad, drop=["params/policy/action_net.weight"])
    elif case == "shapes":  # metadata says 8,8 but the arrays are a 16,16 network's
        _rewrite(ppo_checkpoint, bad, meta_changes={"hidden": [8, 8]})
    elif case == "pickle":  # an object array can only be read by unpickling it
        arrays, meta = load_checkpoint(ppo_checkpoint)
        np.savez(
            bad,
            **arrays,
            train_meta=np.frombuffer(json.dumps(meta).encode(), np.uint8),
            extra=np.array([{"x": 1}], dtype=object),
        )
    elif case == "truncated":
        data = ppo_checkpoint.read_bytes()
        bad.write_bytes(data[: len(data) // 2])
    elif case == "ars":
        _rewrite(ppo_checkpoint, bad, meta_changes={"algorithm": "ars"})
    else:
        bad = ppo_checkpoint
    if case == "scenario":  # the same file with 3 Monte Carlo runs instead of 2
        scenario = load_scenario(short_training_scenario(tmp_path, runs=3))
    with pytest.raises(UserInputError) as err:
        _train(scenario, algo, 256, tmp_path / "new.npz", resume=bad, **kw)
    text = str(err.value)
    assert text.startswith(f"{bad}: ") and text.count(str(bad)) == 1 and message in text and "\n" not in text
    assert not (tmp_path / "new.npz").exists()


def test_cli_refuses_a_checkpoint_of_another_algorithm_with_one_line(cli, ppo_checkpoint, tmp_path):
    scen = short_training_scenario(tmp_path, runs=2)
    code, _, err = cli(["train", scen, "--algo", "sac", "--resume", ppo_checkpoint, "--out", tmp_path / "o"])
    assert code == 2 and str(ppo_checkpoint) in err and err.count("\n") == 1
    assert not (tmp_path / "o").exists()


# ------------------------------------------------- an interrupted command line
def test_interrupted_cli_run_keeps_its_checkpoint_and_resume_finishes(cli, tmp_path):
    """SIGTERM (what a batch system sends) after the first checkpoint; then ``--resume``."""
    scen = short_training_scenario(tmp_path, runs=2)
    out = tmp_path / "cut"
    ckpt = tmp_path / "cut.checkpoint.npz"
    args = ["train", str(scen), "--algo", "ppo", "--steps", "2048", "--hidden", "16", "--out", str(out)]
    env = dict(os.environ, PYTHONPATH=str(REPO) + os.pathsep + os.environ.get("PYTHONPATH", ""))
    proc = subprocess.Popen(
        [sys.executable, "-m", "rollrig.sim.cli.main", *args],
        cwd=tmp_path,
        env=env,
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
    )
    deadline = time.monotonic() + 120
    while not ckpt.exists() and proc.poll() is None and time.monotonic() < deadline:
        time.sleep(0.02)
    proc.send_signal(signal.SIGTERM)
    _, err = proc.communicate(timeout=60)
    assert proc.returncode == 128 + signal.SIGTERM, err
    assert f"checkpoint of step 1024 kept at {ckpt}" in err and "--resume" in err
    assert not out.exists()  # no half-written output folder
    arrays, meta = load_checkpoint(ckpt)  # loadable, pickles refused
    assert meta["state"]["counters"]["num_timesteps"] == 1024
    assert not list(tmp_path.glob(".*.tmp"))
    code, _, err = cli([*args[:-2], "--resume", ckpt, "--out", out])
    assert code == 0, err
    net, _, pmeta = load_policy(out / "policy.npz")
    assert pmeta["steps"] == 2048 and pmeta["algorithm"] == "ppo"
    assert load_checkpoint(ckpt)[1]["state"]["counters"]["num_timesteps"] == 2048


def test_cpu_budget_stops_at_a_rollout_start_with_a_checkpoint_that_resumes(scenario, tmp_path):
    ckpt = tmp_path / "budget.npz"
    r, _, extra = _train(scenario, "ppo", 4096, ckpt, n_steps=64, cpu_budget_s=0.3)
    assert not r.interrupted and 0 < extra["steps"] < 4096 and extra["steps"] % 64 == 0
    _, meta = load_checkpoint(ckpt)
    assert meta["state"]["counters"]["num_timesteps"] == extra["steps"] == r.checkpoint_step
    r2, _, extra2 = _train(scenario, "ppo", extra["steps"] + 64, ckpt, resume=ckpt)
    assert extra2["steps"] == extra["steps"] + 64 and r2.history[-1]["iteration"] == extra2["steps"]
