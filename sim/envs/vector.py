"""The roll-hold task, natively vectorised: one batched core steps every member.

:class:`RollHoldVectorEnv` gives the same observations, rewards,
terminations and truncations, step for step, as
``gymnasium.vector.SyncVectorEnv`` over :class:`~rollrig.sim.envs.RollHoldEnv`
with the same seeds — autoresets included — but advances all members with
one :class:`~rollrig.sim.core.Stepper` call per tick instead of one per
member.

Autoreset follows gymnasium 1.x's ``NEXT_STEP`` mode (declared in
``metadata["autoreset_mode"]``): the step after a member's episode ends
returns that member's first observation of a new episode, with reward 0 and
neither flag set, and ignores its action.

Restarting members. Members that start a new episode at the same step
form a *cohort*: one batched core whose per-run parameters (initial bank,
camera latency, noise and frame losses, disturbance intensity) are that
cohort's draws; the command is scaled here. Cohorts are stepped one after
another and dropped when their last member ends. With episodes of equal
length (truncation at the scenario's duration) every member stays in one
cohort; early terminations split them. (The core's own per-row
``restart`` keeps a row's parameters, so it cannot start an episode with
newly drawn ones; a cohort can.)
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import replace
from pathlib import Path

import gymnasium as gym
import numpy as np
from gymnasium.utils import seeding
from gymnasium.vector.utils import batch_space
from rollrig.controllers.base import Observation
from rollrig.controllers.policy import ObservationBuilder, ObservationLayout

from ..build import build_setup
from ..core import Stepper
from ..scenario import Scenario
from .episode import EpisodeDraw, aged_observation, as_scenario, check_ranges, draw_episode, scale_disturbance
from .roll_env import RewardWeights, observation_space, step_reward

__all__ = ["RollHoldVectorEnv"]


class _Cohort:
    """Members that started their episodes together, on one batched core with per-run parameters."""

    def __init__(self, env: RollHoldVectorEnv, members: np.ndarray, draws: list[EpisodeDraw]) -> None:
        self.members = members
        self.active = np.ones(members.size, dtype=bool)
        base, d0 = env.base, draws[0]

        def col(key: str) -> np.ndarray:
            return np.array([getattr(d, key) for d in draws])

        changes = {}
        if d0.initial_bank_deg is not None:
            x0 = np.tile(np.asarray(base.x0, dtype=float), (len(draws), 1))
            x0[:, env.scenario.plant.phi_index] = np.radians(col("initial_bank_deg"))
            changes["x0"] = x0
        cam = {}
        if d0.noise_deg is not None:
            cam["noise_rad"] = np.radians(col("noise_deg"))
        if d0.latency_s is not None:
            cam["latency_s"] = col("latency_s")
        if d0.dropout_prob is not None:
            cam["dropout_prob"] = col("dropout_prob")
        if cam:
            changes["camera"] = replace(base.camera, **cam)
        if d0.turbulence_scale is not None:
            scale = col("turbulence_scale")
            changes["disturbances"] = tuple(scale_disturbance(s, scale) for s in base.disturbances)
        setup = replace(base, **changes) if changes else base
        self.cmd_scale = None if d0.command_scale is None else col("command_scale")
        self.stepper = Stepper(setup)
        obs = self.stepper.reset(env.scenario.run.seed, [d.run_index for d in draws], record="none")
        self.builder = ObservationBuilder(env.layout)
        self.builder.reset(members.size)
        self.prev = np.zeros(members.size)
        self.tick = 0
        self.last = self._commanded(obs)

    def _commanded(self, obs: Observation) -> Observation:
        if self.cmd_scale is None:
            return obs
        k = int(self.stepper.episode_step[0])  # members of a cohort share one clock
        return replace(obs, bank_cmd=self.stepper.setup.bank_cmd[k] * self.cmd_scale)

    def vectors(self, obs: Observation) -> np.ndarray:
        return self.builder(obs, self.prev)


class RollHoldVectorEnv(gym.vector.VectorEnv):
    """``num_envs`` roll-hold environments stepped by one batched core.

    Parameters are those of :class:`~rollrig.sim.envs.RollHoldEnv`, plus
    ``num_envs``. ``reset(seed=s)`` seeds member ``i`` with ``s + i`` (a list
    gives each member's seed), as ``SyncVectorEnv`` does. ``infos`` are empty.
    """

    metadata = {"autoreset_mode": gym.vector.AutoresetMode.NEXT_STEP, "render_modes": []}

    def __init__(
        self,
        num_envs: int,
        scenario: Scenario | Mapping | str | Path,
        randomize: Mapping | None = None,
        history: int = 3,
        render_mode: str | None = None,
    ) -> None:
        if render_mode is not None:
            raise ValueError("the vector environment does not render; use RollHoldEnv")
        self.num_envs = int(num_envs)
        self.scenario = as_scenario(scenario)
        self.ranges = check_ranges(randomize)
        self.base = build_setup(self.scenario)
        self.layout = ObservationLayout(history=int(history), gyro=self.scenario.gyro is not None)
        self.single_observation_space = observation_space(self.layout)
        self.single_action_space = gym.spaces.Box(-1.0, 1.0, shape=(1,), dtype=np.float32)
        self.observation_space = batch_space(self.single_observation_space, self.num_envs)
        self.action_space = batch_space(self.single_action_space, self.num_envs)
        self.action_scale_rad = self.scenario.actuator.limit_rad
        self.bank_limit_rad = self.scenario.criteria.bank_limit_rad
        self.n_ticks = len(self.base.tick_steps)
        self._rngs: list[np.random.Generator | None] = [None] * self.num_envs
        self._cohorts: list[_Cohort] = []
        self._ended = np.zeros(self.num_envs, dtype=bool)
        self._ranges = self.ranges
        self._run_index = None

    # ------------------------------------------------------------------ API
    def reset(self, *, seed: int | list[int | None] | None = None, options: dict | None = None):
        n = self.num_envs
        if seed is None:
            seeds = [None] * n
        elif isinstance(seed, int | np.integer):
            seeds = [int(seed) + i for i in range(n)]
        else:
            seeds = list(seed)
            if len(seeds) != n:
                raise ValueError(f"seed list has {len(seeds)} entries; allowed: {n} (one per member)")
        for i, s in enumerate(seeds):
            if s is not None or self._rngs[i] is None:
                self._rngs[i], _ = seeding.np_random(s)
        options = options or {}
        self._ranges = (
            check_ranges(options["randomize"], "options") if "randomize" in options else self.ranges
        )
        self._run_index = options.get("run_index")
        self._cohorts = []
        self._ended[:] = False
        obs = np.empty((n, self.layout.size), dtype=np.float32)
        self._start(np.arange(n), obs)
        return obs, {}

    def step(self, actions):
        n = self.num_envs
        a_all = np.clip(np.asarray(actions, dtype=float).reshape(n), -1.0, 1.0)
        obs = np.empty((n, self.layout.size), dtype=np.float32)
        reward = np.zeros(n)
        term = np.zeros(n, dtype=bool)
        trunc = np.zeros(n, dtype=bool)
        restart = np.flatnonzero(self._ended)
        for c in self._cohorts:
            self._advance(c, a_all, obs, reward, term, trunc)
        self._cohorts = [c for c in self._cohorts if c.active.any()]
        if restart.size:
            self._start(restart, obs)
        self._ended = term | trunc
        return obs, reward, term, trunc, {}

    # ------------------------------------------------------------- helpers
    def _start(self, members: np.ndarray, obs: np.ndarray) -> None:
        draws = [draw_episode(self._rngs[i], self._ranges, self._run_index) for i in members]
        c = _Cohort(self, members, draws)
        obs[c.members] = c.vectors(c.last)
        self._cohorts.append(c)

    def _advance(self, c: _Cohort, a_all, obs, reward, term, trunc) -> None:
        st = c.stepper
        a = np.where(c.active, a_all[c.members], 0.0)
        nxt = st.advance(a * self.action_scale_rad)
        c.tick += 1
        k = int(st.episode_step[0])
        bank = st.bank.copy()
        cmd = st.setup.bank_cmd[k]
        if c.cmd_scale is not None:
            cmd = cmd * c.cmd_scale
        r = step_reward(bank, cmd, a, c.prev, self.bank_limit_rad)
        t_end = (np.abs(bank) > self.bank_limit_rad) | ~st.alive
        r = np.where(t_end, r - RewardWeights.termination * (self.n_ticks - c.tick), r)
        if nxt is None:
            nxt = aged_observation(c.last, k * st.setup.dt, cmd)
            tr_end = ~t_end
        else:
            nxt = c._commanded(nxt)
            tr_end = np.zeros(a.size, dtype=bool)
        c.prev = a
        c.last = nxt
        vec = c.vectors(nxt)
        live = c.active
        m = c.members[live]
        obs[m] = vec[live]
        reward[m] = r[live]
        term[m] = t_end[live]
        trunc[m] = tr_end[live]
        c.active = live & ~(t_end | tr_end)
