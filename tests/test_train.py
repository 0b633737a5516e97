"""``rollrig train --algo ars``: learning, checkpoints, resume, Ctrl-C and refusals."""

from __future__ import annotations

import json

import numpy as np
import pytest
from helpers import SCENARIO_DIR, short_training_scenario
from rollrig.controllers.policy import load_policy

STEP = SCENARIO_DIR / "learned-bank-step.toml"


def short_scenario(tmp_path):
    return short_training_scenario(tmp_path, runs=4)


SMALL = ["--directions", "2", "--top", "1", "--eval-every", "2"]


def test_ars_learns_to_settle_the_30_degree_step(cli, tmp_path):
    """CI's shorter version of the 60-s target: 20 iterations (a few CPU seconds), bar 80 %.

    The bench (``bench/env_speed.py --train``) runs the full version; the
    policy is judged on all 50 Monte Carlo runs of the scenario with its
    criteria (settling within 4 s in a 5 % band, overshoot ≤ 15 %, |bank| ≤ 45°).
    """
    out = tmp_path / "ars"
    args = ["train", STEP, "--iterations", "20", "--eval-every", "20", "--out", out, "--format", "md"]
    code, stdout, err = cli(args)
    assert code == 0, err
    manifest = json.loads((out / "manifest.json").read_text())
    assert manifest["criteria_pass_rate"] >= 0.8
    assert "all criteria" in stdout and "no analytic stability margins" in stdout
    net, layout, meta = load_policy(out / "policy.npz")
    assert meta["algorithm"] == "ars" and meta["seed"] == 0 and meta["iterations"] == 20
    assert len(meta["scenario_sha256"]) == 64 and layout.gyro
    # the written scenario flies the policy through rollrig run with the same verdict
    code, stdout, err = cli(["run", out / "policy-scenario.toml", "--no-files", "--format", "md"])
    assert code == 0, err
    passed = round(manifest["criteria_pass_rate"] * 50)
    assert "all criteria" in stdout and f"{passed}/50" in stdout


def test_resume_continues_exactly_where_training_stopped(cli, tmp_path):
    scen = short_scenario(tmp_path)
    code, _, err = cli(["train", scen, *SMALL, "--iterations", "4", "--out", tmp_path / "straight"])
    assert code == 0, err
    code, _, err = cli(["train", scen, *SMALL, "--iterations", "2", "--out", tmp_path / "first"])
    assert code == 0, err
    ckpt = tmp_path / "first.checkpoint.npz"
    args = ["train", scen, *SMALL, "--iterations", "4", "--resume", ckpt, "--out", tmp_path / "resumed"]
    code, _, err = cli(args)
    assert code == 0, err
    a, _, meta_a = load_policy(tmp_path / "straight" / "policy.npz")
    b, _, meta_b = load_policy(tmp_path / "resumed" / "policy.npz")
    for wa, wb in zip(a.weights + [a.obs_mean, a.obs_std], b.weights + [b.obs_mean, b.obs_std], strict=True):
        np.testing.assert_array_equal(wa, wb)
    assert meta_b["iterations"] == 4


def test_ctrl_c_keeps_the_last_checkpoint_and_resume_finishes(cli, tmp_path, monkeypatch):
    from rollrig.sim.training.ars import ARS

    scen = short_scenario(tmp_path)
    real_step = ARS.step
    calls = {"n": 0}

    def interrupted_step(self):
        calls["n"] += 1
        if calls["n"] == 4:  # Ctrl-C in the middle of the 4th iteration
            self.rng.standard_normal(10)  # its random draws already half used
            raise KeyboardInterrupt
        return real_step(self)

    monkeypatch.setattr(ARS, "step", interrupted_step)
    out = tmp_path / "cut"
    code, _, err = cli(["train", scen, *SMALL, "--iterations", "6", "--out", out])
    assert code == 130 and "interrupted after iteration 3" in err and "--resume" in err
    assert not out.exists()  # no half-written output folder
    monkeypatch.setattr(ARS, "step", real_step)
    ckpt = tmp_path / "cut.checkpoint.npz"
    code, _, err = cli(["train", scen, *SMALL, "--iterations", "6", "--resume", ckpt, "--out", out])
    assert code == 0, err
    code, _, err = cli(["train", scen, *SMALL, "--iterations", "6", "--out", tmp_path / "whole"])
    a, _, _ = load_policy(out / "policy.npz")
    b, _, _ = load_policy(tmp_path / "whole" / "policy.npz")
    np.testing.assert_array_equal(a.weights[0], b.weights[0])


@pytest.mark.parametrize(
    "extra, message",
    [
        (["--hidden", "abc"], "--hidden 'abc': allowed"),
        (["--randomize", "wind=1:2"], "unknown key 'wind'"),
        (["--randomize", "latency_s=x"], "KEY=LOW:HIGH"),
        (["--directions", "2", "--top", "3"], "--top 3: allowed: 1 ≤ value ≤ 2"),
        (["--resume", "missing.npz"], "no such checkpoint"),
    ],
)
def test_bad_training_options_are_refused_with_one_line(cli, tmp_path, extra, message):
    code, out, err = cli(["train", STEP, "--out", tmp_path / "o", *extra])
    assert code == 2 and message in err and err.count("\n") == 1 and not (tmp_path / "o").exists()


def test_resume_with_other_settings_is_refused(cli, tmp_path):
    scen = short_scenario(tmp_path)
    code, _, err = cli(["train", scen, *SMALL, "--iterations", "2", "--out", tmp_path / "a"])
    assert code == 0, err
    ckpt = tmp_path / "a.checkpoint.npz"
    code, _, err = cli(["train", scen, *SMALL, "--noise", "0.05", "--resume", ckpt, "--out", tmp_path / "b"])
    assert code == 2 and "another ars" in err


def test_sigterm_during_training_exits_143_and_keeps_the_checkpoint(cli, tmp_path, monkeypatch):
    """The CLI's documented exit status for SIGTERM (128 + 15), also when training catches it."""
    import signal

    from rollrig.sim.cli.main import Stopped
    from rollrig.sim.training.ars import ARS

    real_step = ARS.step

    def stopped_step(self):
        if self.iteration == 2:
            raise Stopped(signal.SIGTERM)
        return real_step(self)

    monkeypatch.setattr(ARS, "step", stopped_step)
    scen = short_scenario(tmp_path)
    code, _, err = cli(["train", scen, *SMALL, "--iterations", "4", "--out", tmp_path / "t"])
    assert code == 143 and "interrupted after iteration 2" in err
    assert (tmp_path / "t.checkpoint.npz").exists() and not (tmp_path / "t").exists()


def test_sigterm_while_writing_the_results_names_the_kept_checkpoint(cli, tmp_path, monkeypatch):
    """A signal after training (while judging and writing the folder) still says where the checkpoint is."""
    import signal

    import rollrig.sim.training.runs as runs
    from rollrig.sim.cli.main import Stopped

    def stopped_finish(*args, **kwargs):
        raise Stopped(signal.SIGTERM)

    monkeypatch.setattr(runs, "finish", stopped_finish)
    scen = short_scenario(tmp_path)
    code, _, err = cli(["train", scen, *SMALL, "--iterations", "2", "--out", tmp_path / "t"])
    ckpt = tmp_path / "t.checkpoint.npz"
    assert code == 143 and f"checkpoint kept at {ckpt}" in err and "no output folder" in err
    assert ckpt.exists() and not (tmp_path / "t").exists()
