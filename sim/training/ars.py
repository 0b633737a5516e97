"""Augmented Random Search (ARS V2) for linear and small MLP policies, in numpy.

The method of Mania, Guy & Recht, "Simple random search of static linear
policies is competitive for reinforcement learning" (NeurIPS 2018), variant
V2-t: each iteration draws ``N`` directions ``δ_k`` in parameter space, runs
the policy perturbed by ``+ν δ_k`` and ``−ν δ_k`` on episodes with the *same*
seed (common random numbers: the pair sees the same camera noise, frame
losses and disturbances), keeps the ``b`` directions with the best
``max(r⁺, r⁻)``, and steps

    θ ← θ + α / (b σ_R) · Σ_top (r⁺_k − r⁻_k) δ_k,

with ``σ_R`` the standard deviation of the ``2b`` returns used. States are
normalised by the running mean and standard deviation of every state seen so
far (frozen during an iteration). The ``2N`` rollouts of an iteration are the
members of one :class:`~rollrig.sim.envs.vector.RollHoldVectorEnv`, so the
whole iteration is one batched core stepping through the episode.

Parameters ``θ`` are the flattened weights of a network with ``tanh`` hidden
layers and a clipped linear output (no hidden layer: the paper's linear
policy, plus a bias).
"""

from __future__ import annotations

import json
from collections.abc import Sequence
from dataclasses import asdict, dataclass, field

import numpy as np
from rollrig.controllers.policy import PolicyNet

from ..envs.vector import RollHoldVectorEnv

__all__ = ["ARSConfig", "ARS", "RunningStats"]


@dataclass(frozen=True)
class ARSConfig:
    """ARS settings (names as in the paper).

    Parameters
    ----------
    directions : int
        ``N``, directions per iteration (``2N`` rollouts).
    top : int
        ``b``, directions kept for the update (≤ ``N``).
    step_size : float
        ``α``.
    noise : float
        ``ν``, exploration noise in parameter space.
    hidden : tuple of int
        Hidden layer widths (empty: linear policy).
    """

    directions: int = 16
    top: int = 8
    step_size: float = 0.02
    noise: float = 0.03
    hidden: tuple[int, ...] = ()

    def __post_init__(self) -> None:
        if not 1 <= self.top <= self.directions:
            raise ValueError(f"top = {self.top}; allowed: 1 ≤ top ≤ directions ({self.directions})")


@dataclass
class RunningStats:
    """Running mean and variance of states (Chan et al. parallel update)."""

    n_obs: int
    count: float = 0.0
    mean: np.ndarray = field(default=None)
    m2: np.ndarray = field(default=None)

    def __post_init__(self) -> None:
        if self.mean is None:
            self.mean = np.zeros(self.n_obs)
            self.m2 = np.zeros(self.n_obs)

    def update(self, total: float, s1: np.ndarray, s2: np.ndarray) -> None:
        """Merge a batch given its count, sum and sum of squares."""
        if total == 0:
            return
        b_mean = s1 / total
        b_m2 = s2 - total * b_mean**2
        n = self.count + total
        delta = b_mean - self.mean
        self.mean = self.mean + delta * total / n
        self.m2 = self.m2 + b_m2 + delta**2 * self.count * total / n
        self.count = n

    @property
    def std(self) -> np.ndarray:
        if self.count < 2:
            return np.ones(self.n_obs)
        sd = np.sqrt(np.maximum(self.m2 / self.count, 0.0))
        return np.where(sd < 1e-8, 1.0, sd)  # constant fields pass unscaled (the paper's choice)


class ARS:
    """ARS V2-t on a scenario's roll-hold task.

    Parameters
    ----------
    env : RollHoldVectorEnv
        With ``2 · directions`` members.
    config : ARSConfig
    seed : int
        Seeds the directions and the episodes' seeds.
    """

    def __init__(self, env: RollHoldVectorEnv, config: ARSConfig, seed: int) -> None:
        if env.num_envs != 2 * config.directions:
            raise ValueError(
                f"env has {env.num_envs} members; needs 2 × directions = {2 * config.directions}"
            )
        self.env, self.config, self.seed = env, config, int(seed)
        n = env.layout.size
        widths = [n, *config.hidden, 1]
        self.shapes = [(widths[i + 1], widths[i]) for i in range(len(widths) - 1)]
        self.size = sum(o * i + o for o, i in self.shapes)
        self.theta = np.zeros(self.size)
        if config.hidden:  # hidden layers need random weights to break symmetry
            init = np.random.default_rng([self.seed, 1])
            parts = []
            for o, i in self.shapes[:-1]:
                parts += [init.standard_normal(o * i) / np.sqrt(i), np.zeros(o)]
            o, i = self.shapes[-1]
            parts += [np.zeros(o * i + o)]
            self.theta = np.concatenate(parts)
        self.stats = RunningStats(n)
        self.rng = np.random.default_rng([self.seed, 0])
        self.iteration = 0

    # ---------------------------------------------------------- parameters
    def unflatten(self, theta: np.ndarray) -> tuple[list[np.ndarray], list[np.ndarray]]:
        """Weights and biases of parameter vectors ``(..., size)``."""
        ws, bs, at = [], [], 0
        lead = theta.shape[:-1]
        for o, i in self.shapes:
            ws.append(theta[..., at : at + o * i].reshape(*lead, o, i))
            at += o * i
            bs.append(theta[..., at : at + o])
            at += o
        return ws, bs

    def policy(self) -> PolicyNet:
        """The current policy as a numpy network (with the state normalisation)."""
        ws, bs = self.unflatten(self.theta)
        return PolicyNet(ws, bs, self.stats.mean.copy(), self.stats.std.copy(), "clip")

    def _act(self, thetas: np.ndarray, x: np.ndarray, mean: np.ndarray, std: np.ndarray) -> np.ndarray:
        """Actions of member ``i`` with parameters ``thetas[i]`` on state ``x[i]``."""
        ws, bs = self.unflatten(thetas)
        h = (x.astype(np.float64) - mean) / std
        last = len(ws) - 1
        for j, (w, b) in enumerate(zip(ws, bs, strict=True)):
            h = np.einsum("moi,mi->mo", w, h) + b
            if j < last:
                h = np.tanh(h)
        return np.clip(h[:, 0], -1.0, 1.0)

    # ------------------------------------------------------------- rollouts
    def rollout(self, thetas: np.ndarray, seeds: Sequence[int]) -> tuple[np.ndarray, tuple]:
        """Return of one episode per member, and the states' count, sum and sum of squares."""
        env = self.env
        mean, std = self.stats.mean.copy(), self.stats.std.copy()
        obs, _ = env.reset(seed=[int(s) for s in seeds])
        m = env.num_envs
        ret = np.zeros(m)
        live = np.ones(m, dtype=bool)
        count, s1, s2 = 0.0, np.zeros(obs.shape[1]), np.zeros(obs.shape[1])
        while live.any():
            x = obs[live].astype(np.float64)
            count += x.shape[0]
            s1 += x.sum(axis=0)
            s2 += (x * x).sum(axis=0)
            a = self._act(thetas, obs, mean, std)
            obs, r, term, trunc, _ = env.step(a[:, None])
            ret += np.where(live, r, 0.0)
            live &= ~(term | trunc)
        return ret, (count, s1, s2)

    def step(self) -> dict:
        """One ARS iteration; returns its figures."""
        cfg = self.config
        deltas = self.rng.standard_normal((cfg.directions, self.size))
        seeds = self.rng.integers(2**31, size=cfg.directions)
        thetas = np.empty((2 * cfg.directions, self.size))
        thetas[0::2] = self.theta + cfg.noise * deltas
        thetas[1::2] = self.theta - cfg.noise * deltas
        returns, batch_stats = self.rollout(thetas, np.repeat(seeds, 2))
        r_plus, r_minus = returns[0::2], returns[1::2]
        order = np.argsort(-np.maximum(r_plus, r_minus), kind="stable")[: cfg.top]
        used = np.concatenate([r_plus[order], r_minus[order]])
        sigma = used.std()
        if sigma > 0:
            grad = (r_plus[order] - r_minus[order]) @ deltas[order]
            self.theta = self.theta + cfg.step_size / (cfg.top * sigma) * grad
        self.stats.update(*batch_stats)
        self.iteration += 1
        return {"iteration": self.iteration, "mean_return": float(returns.mean()), "sigma_r": float(sigma)}

    # ---------------------------------------------------------- checkpoint
    def state_arrays(self) -> dict[str, np.ndarray]:
        """Everything needed to resume, as arrays plus JSON bytes (no pickle)."""
        meta = {
            "iteration": self.iteration,
            "seed": self.seed,
            "config": asdict(self.config),
            "rng": self.rng.bit_generator.state,
            "stats_count": self.stats.count,
        }
        return {
            "theta": self.theta,
            "stats_mean": self.stats.mean,
            "stats_m2": self.stats.m2,
            "ars_meta": np.frombuffer(json.dumps(meta).encode(), dtype=np.uint8),
        }

    def load_state(self, arrays: dict[str, np.ndarray]) -> None:
        """Continue from :meth:`state_arrays` (config and seed must match)."""
        meta = json.loads(arrays["ars_meta"].tobytes())
        cfg = asdict(self.config)
        cfg["hidden"] = list(cfg["hidden"])
        if meta["config"] != cfg or meta["seed"] != self.seed:
            raise ValueError("checkpoint was made with other ARS settings or seed")
        if arrays["theta"].shape != (self.size,):
            raise ValueError("checkpoint parameters do not fit this policy's shape")
        self.theta = arrays["theta"].copy()
        self.stats.mean = arrays["stats_mean"].copy()
        self.stats.m2 = arrays["stats_m2"].copy()
        self.stats.count = float(meta["stats_count"])
        self.rng.bit_generator.state = meta["rng"]
        self.iteration = int(meta["iteration"])


def make_ars(scenario, config: ARSConfig, seed: int, randomize=None, history: int = 3) -> ARS:
    """ARS with its vector environment built from a scenario."""
    env = RollHoldVectorEnv(2 * config.directions, scenario, randomize=randomize, history=history)
    return ARS(env, config, seed)
