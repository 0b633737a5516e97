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

Restarting members. Each member is one row of the batched core, with its
own clock. A member whose episode ended is restarted on its own with
:meth:`Stepper.restart <rollrig.sim.core.Stepper.restart>`, given a setup
that holds its newly drawn per-run values (initial bank, command scale,
camera latency, noise and frame losses, disturbance intensity); the other
members go on untouched.
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
from .episode import aged_observation, as_scenario, check_ranges, draw_episode, scale_disturbance
from .roll_env import RewardWeights, observation_space, step_reward

__all__ = ["RollHoldVectorEnv"]


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
        self._builder = ObservationBuilder(self.layout)
        self._ended = np.zeros(self.num_envs, dtype=bool)
        self._ranges = self.ranges
        self._run_index = None
        self._cmd_scale = None

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
        self._draws = [draw_episode(self._rngs[i], self._ranges, self._run_index) for i in range(n)]
        self._cmd_scale = self._column("command_scale")
        self._stepper = Stepper(self._setup())
        obs = self._stepper.reset(self.scenario.run.seed, [d.run_index for d in self._draws], record="none")
        self._builder.reset(n)
        self._prev = np.zeros(n)
        self._tick = np.zeros(n, dtype=np.int64)
        self._ended = np.zeros(n, dtype=bool)
        self._last = obs
        return self._builder(obs, self._prev), {}

    def step(self, actions):
        n, st = self.num_envs, self._stepper
        a = np.minimum(np.maximum(np.asarray(actions, dtype=float).reshape(n), -1.0), 1.0)  # as np.clip
        ended = self._ended
        any_ended = bool(ended.any())
        if any_ended:  # their action is ignored; they restart after this advance
            a = np.where(ended, 0.0, a)
        nxt = st.advance(a * self.action_scale_rad)
        self._tick += 1
        k = st.episode_step
        bank = st.bank.copy()
        cmd = self._command_at(k)
        reward = step_reward(bank, cmd, a, self._prev, self.bank_limit_rad)
        term = (np.abs(bank) > self.bank_limit_rad) | ~st.alive
        reward = np.where(term, reward - RewardWeights.termination * (self.n_ticks - self._tick), reward)
        finished = st.finished
        trunc = finished & ~term
        self._prev = a
        if any_ended:
            rows = ended.nonzero()[0]
            for i in rows:
                self._draws[i] = draw_episode(self._rngs[i], self._ranges, self._run_index)
            self._cmd_scale = self._column("command_scale")
            nxt = st.restart(rows, [self._draws[i].run_index for i in rows], setup=self._setup())
            self._builder.restart(rows)
            self._prev[rows] = 0.0
            self._tick[rows] = 0
            reward[rows] = 0.0
            term[rows] = False
            trunc[rows] = False
        # members at the end of their episode see their last reading, one tick older
        over = finished & ~ended  # (a restarted member is not at its end)
        if over.any():
            aged = aged_observation(self._last, k * st.setup.dt, cmd)
            nxt = aged if nxt is None else _merge(over, aged, nxt)
        self._last = nxt
        self._ended = term | trunc
        return self._builder(nxt, self._prev), reward, term, trunc, {}

    # ------------------------------------------------------------- helpers
    def _column(self, key: str) -> np.ndarray | None:
        """Every member's current draw of ``key`` (``None``: not randomised)."""
        if getattr(self._draws[0], key) is None:
            return None
        return np.array([getattr(d, key) for d in self._draws])

    def _setup(self):
        """The core's setup with every member's current draws as per-run values."""
        base, col = self.base, self._column
        changes = {}
        if (bank0 := col("initial_bank_deg")) is not None:
            x0 = np.tile(np.asarray(base.x0, dtype=float), (len(self._draws), 1))
            x0[:, self.scenario.plant.phi_index] = np.radians(bank0)
            changes["x0"] = x0
        if (scale := col("command_scale")) is not None:
            changes["bank_cmd"] = np.asarray(base.bank_cmd)[None, :] * scale[:, None]
        cam = {}
        if (noise := col("noise_deg")) is not None:
            cam["noise_rad"] = np.radians(noise)
        if (latency := col("latency_s")) is not None:
            cam["latency_s"] = latency
        if (dropout := col("dropout_prob")) is not None:
            cam["dropout_prob"] = dropout
        if cam:
            changes["camera"] = replace(base.camera, **cam)
        if (turbulence := col("turbulence_scale")) is not None:
            changes["disturbances"] = tuple(scale_disturbance(s, turbulence) for s in base.disturbances)
        return replace(base, **changes) if changes else base

    def _command_at(self, k: np.ndarray) -> np.ndarray:
        """Each member's bank command at its local step ``k`` (rad)."""
        cmd = np.asarray(self.base.bank_cmd)[k]
        return cmd if self._cmd_scale is None else cmd * self._cmd_scale


def _merge(rows: np.ndarray, a: Observation, b: Observation) -> Observation:
    """Observation taking ``a``'s values where ``rows`` is set and ``b``'s elsewhere."""

    def pick(x, y):
        return None if x is None else np.where(rows, x, y)

    return Observation(
        t=np.where(rows, a.t, b.t),
        dt=b.dt,
        bank=pick(a.bank, b.bank),
        valid=pick(a.valid, b.valid),
        age=pick(a.age, b.age),
        bank_cmd=pick(a.bank_cmd, b.bank_cmd),
        rate=pick(a.rate, b.rate),
    )
