"""Policy files and the policy controller: round trip, refusals, and env ≡ ``rollrig run``."""

from __future__ import annotations

import json
import math
import pickle

import numpy as np
import pytest
from helpers import SCENARIO_DIR
from policy_helpers import pd_policy, policy_meta
from rollrig.controllers.policy import (
    ObservationLayout,
    PolicyController,
    PolicyFileError,
    load_policy,
    save_policy,
)

STEP = SCENARIO_DIR / "learned-bank-step.toml"
LAYOUT = ObservationLayout(history=3, gyro=True)


@pytest.fixture
def policy_file(tmp_path):
    path = tmp_path / "pd.npz"
    save_policy(path, pd_policy(LAYOUT), policy_meta(LAYOUT))
    return path


def policy_scenario(tmp_path, policy_path, **controller):
    text = STEP.read_text()
    block = text[text.index("[controller]") : text.index("[command]")]
    extra = "".join(f"{k} = {v!r}\n".replace("'", '"') for k, v in controller.items())
    new = f'[controller]\nkind = "policy"\nrate_hz = 50.0\nfile = "{policy_path}"\n{extra}\n'
    path = tmp_path / "policy.toml"
    path.write_text(text.replace(block, new))
    return path


def test_round_trip_keeps_weights_and_metadata(policy_file):
    net, layout, meta = load_policy(policy_file)
    ref = pd_policy(LAYOUT)
    assert layout == LAYOUT
    np.testing.assert_array_equal(net.weights[0], ref.weights[0])
    assert meta["algorithm"] == "hand" and meta["action_scale_rad"] == pytest.approx(math.radians(20))
    x = np.random.default_rng(0).normal(size=(7, LAYOUT.size)).astype(np.float32)
    np.testing.assert_array_equal(net(x), ref(x))


def test_policy_through_env_equals_policy_through_rollrig_run(policy_file, tmp_path):
    """Same physics, same observation builder: the trajectories are identical bit for bit."""
    from rollrig.sim.envs import RollHoldEnv
    from rollrig.sim.runner import run_scenario
    from rollrig.sim.scenario import load_scenario

    sc = load_scenario(policy_scenario(tmp_path, policy_file))
    outcome = run_scenario(sc, run_indices=[2])
    tr = outcome.trace
    net, _, _ = load_policy(policy_file)
    env = RollHoldEnv(STEP)
    obs, info = env.reset(seed=0, options={"run_index": 2})
    banks, done = [info["bank_true_rad"]], False
    while not done:
        a = net(obs[None])
        obs, _, term, trunc, info = env.step(a)
        banks.append(info["bank_true_rad"])
        done = term or trunc
    every = sc.run.n_steps // (len(banks) - 1)
    np.testing.assert_array_equal(np.array(banks), tr.bank[0, ::every])
    assert outcome.all_passed.all()  # the PD law as a policy meets the criteria too


def test_cli_runs_a_policy_scenario(cli, policy_file, tmp_path):
    code, out, err = cli(["run", policy_scenario(tmp_path, policy_file), "--no-files", "--runs", "3"])
    assert code == 0, err
    assert "all criteria" in out


def _rewrite(path, tmp_path, edit):
    with np.load(path, allow_pickle=False) as z:
        arrays = {k: z[k] for k in z.files}
    edit(arrays)
    out = tmp_path / "edited.npz"
    np.savez(out, **arrays)
    return out


def _meta_edit(change):
    def edit(arrays):
        meta = json.loads(arrays["meta"].tobytes())
        change(meta)
        arrays["meta"] = np.frombuffer(json.dumps(meta).encode(), dtype=np.uint8)

    return edit


BAD_FILES = {
    "wrong observation size": (
        lambda a: a.update(w0=np.zeros((1, 5)), obs_mean=np.zeros(5), obs_std=np.ones(5)),
        "array w0 has shape",
    ),
    "missing array": (lambda a: a.pop("b0"), "missing array 'b0'"),
    "wrong version": (_meta_edit(lambda m: m.update(format_version=99)), "format_version = 99; allowed: 1"),
    "no metadata": (lambda a: a.pop("meta"), "has no 'meta' array"),
    "non-finite weight": (lambda a: a.update(w0=np.full_like(a["w0"], np.nan)), "finite"),
    "pickle inside": (lambda a: a.update(extra=np.array([{"x": 1}], dtype=object)), "no pickle"),
}


@pytest.mark.parametrize("case", sorted(BAD_FILES))
def test_malformed_policy_files_are_refused_with_one_line_and_exit_2(case, policy_file, tmp_path, cli):
    edit, message = BAD_FILES[case]
    bad = _rewrite(policy_file, tmp_path, edit) if case != "pickle inside" else None
    if bad is None:  # np.savez writes object arrays by pickling them
        bad = tmp_path / "pickled.npz"
        with np.load(policy_file) as z:
            arrays = {k: z[k] for k in z.files}
        np.savez(bad, extra=np.array([{"x": 1}], dtype=object), **arrays)
    with pytest.raises(PolicyFileError, match=message):
        load_policy(bad)
    code, out, err = cli(["run", policy_scenario(tmp_path, bad), "--no-files"])
    assert code == 2 and out == ""
    assert err.count("\n") == 1 and message.split()[0] in err and "Traceback" not in err


def test_a_plain_pickle_file_is_refused(tmp_path):
    path = tmp_path / "p.npz"
    path.write_bytes(pickle.dumps({"w0": np.zeros(3)}))
    with pytest.raises(PolicyFileError, match="no pickle"):
        load_policy(path)


def test_mismatched_rate_and_missing_gyro_are_refused(policy_file, tmp_path, cli):
    scen = policy_scenario(tmp_path, policy_file)
    text = scen.read_text().replace("rate_hz = 50.0\nfile", "rate_hz = 25.0\nfile")
    scen.write_text(text)
    code, _, err = cli(["run", scen, "--no-files"])
    assert code == 2 and "trained at 50 Hz" in err
    scen = policy_scenario(tmp_path, policy_file)
    text = scen.read_text()
    scen.write_text(text[: text.index("[sensor.gyro]")] + text[text.index("[controller]") :])
    code, _, err = cli(["run", scen, "--no-files"])
    assert code == 2 and "trained with a rate gyro" in err and err.count("\n") == 1


def test_policy_controller_clips_to_the_trained_action_range():
    from rollrig.controllers.base import Observation

    ctrl = PolicyController(pd_policy(LAYOUT), LAYOUT, math.radians(20.0))
    ctrl.reset(2)
    obs = Observation(
        t=0.0,
        dt=0.02,
        bank=np.zeros(2),
        valid=np.ones(2, bool),
        age=np.zeros(2),
        bank_cmd=np.array([math.radians(80), math.radians(-1)]),
        rate=np.zeros(2),
    )
    u = ctrl.step(obs)
    assert u[0] == pytest.approx(math.radians(20.0))  # saturated at a = 1
    assert u[1] == pytest.approx(-0.9 * math.radians(1.0))  # kp·error inside the range


def test_a_policy_scenario_writes_back_and_hashes(policy_file, tmp_path):
    from rollrig.sim.scenario import load_scenario, parse_scenario
    from rollrig.sim.scenario_writer import canonical_hash, scenario_to_doc

    sc = load_scenario(policy_scenario(tmp_path, policy_file))
    doc = scenario_to_doc(sc)
    assert doc["controller"]["kind"] == "policy"
    again = parse_scenario(doc, file=str(tmp_path / "again.toml"))
    assert canonical_hash(again) == canonical_hash(sc)
