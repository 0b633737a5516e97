"""PPO and SAC through stable-baselines3 (the optional ``rl`` extra), exported to numpy.

Training uses the scalar environment (:class:`~rollrig.sim.envs.RollHoldEnv`)
in SB3's own vector wrapper, CPU only. The trained actor is exported to the
same numpy network as ARS policies, so evaluating it needs no torch:

* PPO: ``mlp_extractor.policy_net`` (``tanh`` layers) then ``action_net``;
  the deterministic action is the Gaussian's mean, clipped to ``[−1, 1]``
  (what SB3's ``predict`` does);
* SAC: ``actor.latent_pi`` (``tanh`` layers, set at construction so the
  export is exact) then ``actor.mu``, squashed by ``tanh``.

Sessions are checkpointed and resumed bit for bit without pickle
(:mod:`rollrig.sim.training.sb3_checkpoint`).

References: Schulman et al., "Proximal Policy Optimization Algorithms"
(2017); Haarnoja et al., "Soft Actor-Critic" (ICML 2018); Raffin et al.,
"Stable-Baselines3: Reliable Reinforcement Learning Implementations" (JMLR 2021).
"""

from __future__ import annotations

import time
from pathlib import Path

import numpy as np
from rollrig.controllers.policy import ObservationLayout, PolicyNet

from ..errors import UserInputError
from ..scenario import Scenario
from .session import TrainResult, load_checkpoint, policy_meta, save_checkpoint

__all__ = ["train_sb3_policy", "export_policy", "make_model"]

RL_HINT = "pip install -e '.[rl]' (stable-baselines3 with a CPU-only torch)"


def _import():
    try:
        import stable_baselines3
        import torch
    except ImportError:
        raise UserInputError(f"--algo ppo/sac needs the optional rl extra: {RL_HINT}") from None
    return stable_baselines3, torch


def make_model(env, algo: str, hidden: tuple[int, ...], seed: int, n_steps: int = 1024):
    """An SB3 PPO or SAC model with ``tanh`` hidden layers on the CPU."""
    sb3, torch = _import()
    torch.set_num_threads(1)
    kwargs = dict(policy_kwargs=dict(net_arch=list(hidden), activation_fn=torch.nn.Tanh), seed=seed)
    if algo == "ppo":
        return sb3.PPO("MlpPolicy", env, n_steps=n_steps, batch_size=64, device="cpu", verbose=0, **kwargs)
    return sb3.SAC("MlpPolicy", env, learning_starts=200, device="cpu", verbose=0, **kwargs)


def _linears(seq) -> list:
    import torch

    return [m for m in seq if isinstance(m, torch.nn.Linear)]


def export_policy(model, algo: str) -> PolicyNet:
    """The trained actor as a numpy :class:`PolicyNet` (weights copied as float64)."""
    if algo == "ppo":
        layers = [*_linears(model.policy.mlp_extractor.policy_net), model.policy.action_net]
        output = "clip"
    else:
        layers = [*_linears(model.actor.latent_pi), model.actor.mu]
        output = "tanh"
    ws = [lin.weight.detach().cpu().numpy().astype(np.float64) for lin in layers]
    bs = [lin.bias.detach().cpu().numpy().astype(np.float64) for lin in layers]
    n = ws[0].shape[1]
    return PolicyNet(ws, bs, np.zeros(n), np.ones(n), output)


def train_sb3_policy(
    sc: Scenario,
    algo: str,
    *,
    steps: int,
    seed: int,
    ranges: dict,
    hidden: tuple[int, ...],
    history: int,
    eval_runs: int | None = None,
    checkpoint: Path | None = None,
    resume: Path | None = None,
    checkpoint_every: int | None = None,
    n_steps: int | None = None,
    cpu_budget_s: float | None = None,
) -> tuple[TrainResult, ObservationLayout, dict]:
    """Train with SB3 up to ``steps`` environment steps, with checkpoints; Ctrl-C stops early.

    Parameters
    ----------
    checkpoint : path, optional
        Written (atomically) at the start of a rollout whenever
        ``checkpoint_every`` steps have passed since the last one, and at the
        end; an interruption leaves the last one in place
        (:mod:`rollrig.sim.training.sb3_checkpoint`).
    resume : path, optional
        A checkpoint of the same algorithm, scenario, seed, network,
        randomisation and rollrig version to continue from (up to ``steps``
        in all); anything else is refused with one line naming the file.
    checkpoint_every : int, optional
        Steps between checkpoints (default: every PPO rollout; 1000 SAC steps).
        History rows are recorded on the same rhythm (every PPO rollout).
    n_steps : int, optional
        PPO's rollout length (default ``min(1024, max(64, steps))``); a
        resumed session keeps its checkpoint's.
    cpu_budget_s : float, optional
        Stop at the first rollout start after this much CPU time (s), with a
        checkpoint there; the result is complete (not interrupted) and
        ``--resume`` can continue it.
    """
    sb3, torch = _import()
    from stable_baselines3.common.callbacks import BaseCallback
    from stable_baselines3.common.env_util import make_vec_env

    from ..envs import RollHoldEnv
    from .evaluate import judge_policy, pass_rate
    from .sb3_checkpoint import FORMAT, EpisodeTape, capture_state, check_compatible, restore_state

    env = make_vec_env(
        RollHoldEnv,
        n_envs=1,
        seed=seed,
        env_kwargs=dict(scenario=sc, randomize=ranges, history=history),
        wrapper_class=EpisodeTape,
    )
    layout = env.get_attr("layout")[0]
    extra = {"hidden": list(hidden), "sb3_version": sb3.__version__, "torch_version": torch.__version__}
    meta = policy_meta(sc, layout, algo, seed, dict(extra, randomize={k: list(v) for k, v in ranges.items()}))
    meta["format"] = FORMAT
    n_steps = n_steps or min(1024, max(64, steps))
    history_rows: list[dict] = []
    if resume is not None:
        arrays, saved = load_checkpoint(resume)
        check_compatible(resume, saved, meta)
        try:
            n_steps, history_rows, state = int(saved["n_steps"]), list(saved["history"]), saved["state"]
        except (KeyError, TypeError, ValueError):
            raise UserInputError(f"{resume}: is not a complete PPO/SAC checkpoint") from None
    model = make_model(env, algo, hidden, seed, n_steps=n_steps)
    if resume is not None:
        restore_state(model, arrays, state, resume)
    every = checkpoint_every or (n_steps if algo == "ppo" else 1000)
    row_every = n_steps if algo == "ppo" else every
    t0 = time.process_time()
    status = {
        "saved_at": model.num_timesteps,
        # the checkpoint on disk is the one resumed when the session writes back to it (the CLI's rule)
        "checkpoint_step": model.num_timesteps
        if resume and checkpoint and Path(resume) == Path(checkpoint)
        else None,
        "out_of_time": False,
    }

    def save() -> None:
        if checkpoint is None:
            return
        arrays, state = capture_state(model)
        doc = dict(meta, n_steps=n_steps, history=history_rows, state=state)
        save_checkpoint(checkpoint, arrays, doc)
        status["saved_at"] = status["checkpoint_step"] = int(model.num_timesteps)

    class Session(BaseCallback):
        def _on_step(self) -> bool:
            return not status["out_of_time"]  # False ends learn() before anything is learned

        def _on_rollout_start(self) -> None:  # a boundary: the last update is complete
            if cpu_budget_s is not None and time.process_time() - t0 >= cpu_budget_s:
                save()
                status["out_of_time"], status["stopped_at"] = True, int(self.model.num_timesteps)
            elif self.model.num_timesteps - status["saved_at"] >= every:
                save()

        def _on_rollout_end(self) -> None:
            n = int(self.model.num_timesteps)
            last = history_rows[-1]["iteration"] if history_rows else 0
            eps = [e["r"] for e in self.model.ep_info_buffer]
            if eps and n - last >= row_every:
                row = {"iteration": n, "mean_return": float(np.mean(eps)), "cpu_s": time.process_time() - t0}
                history_rows.append(row)

    interrupted, signum = False, 2
    try:
        if steps > model.num_timesteps:
            # counted from the checkpoint's steps, so the schedules see the same total
            model.learn(
                total_timesteps=steps - model.num_timesteps, callback=Session(), reset_num_timesteps=False
            )
            if not status["out_of_time"]:  # (out of time: one step past the checkpoint, not saved)
                save()
    except KeyboardInterrupt as exc:  # Ctrl-C, or SIGTERM/SIGHUP raised as the CLI's Stopped
        interrupted, signum = True, getattr(exc, "signum", 2)
    net = export_policy(model, algo)
    if history_rows and not interrupted:
        history_rows[-1]["pass_rate"] = pass_rate(judge_policy(sc, net, layout, eval_runs))
    result = TrainResult(
        net=net,
        history=history_rows,
        interrupted=interrupted,
        cpu_s=time.process_time() - t0,
        checkpoint_step=status["checkpoint_step"],
        signum=signum,
    )
    extra["steps"] = int(status["stopped_at"] if status["out_of_time"] else model.num_timesteps)
    return result, layout, extra
