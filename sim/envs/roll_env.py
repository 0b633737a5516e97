"""The roll-hold task as a gymnasium environment, over the stepping core.

One environment step is one controller tick of the scenario: the policy's
action is held as the aileron command while :class:`~rollrig.sim.core.Stepper`
advances the plant, servo, camera, gyro and disturbances — the same code
``rollrig run`` uses, so a policy is trained on exactly the loop the PID is
judged on.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from pathlib import Path

import gymnasium as gym
import numpy as np
from rollrig.controllers.base import Observation
from rollrig.controllers.policy import AGE_CLIP, RATE_CLIP, ObservationBuilder, ObservationLayout

from ..build import build_setup
from ..core import Stepper
from ..scenario import Scenario
from .episode import aged_observation, as_scenario, check_ranges, draw_episode, episode_setup

__all__ = ["RollHoldEnv", "RewardWeights", "observation_space", "step_reward"]


class RewardWeights:
    """Weights of the reward's terms (see :class:`RollHoldEnv`)."""

    effort = 0.02
    rate = 0.5
    near_limit = 5.0
    near_limit_from = 0.85  # fraction of the bank limit where the penalty starts
    termination = 2.0  # per remaining tick


def observation_space(layout: ObservationLayout) -> gym.spaces.Box:
    """Bounds of the observation vector, field by field.

    Readings lie within the camera's measuring range (at most 90°, 3 units);
    scenario commands are within ±90° and ``command_scale`` within ±2, so
    commands lie within ±180° (6 units) and the error within ±9.
    """
    h = layout.history
    hi = np.concatenate([np.full(h, 3.0), np.ones(h), np.full(h, AGE_CLIP)])
    lo = np.concatenate([np.full(h, -3.0), np.zeros(h), np.zeros(h)])
    if layout.gyro:
        lo, hi = np.append(lo, -RATE_CLIP), np.append(hi, RATE_CLIP)
    lo = np.concatenate([lo, [-6.0, -9.0, -1.0]])
    hi = np.concatenate([hi, [6.0, 9.0, 1.0]])
    return gym.spaces.Box(lo.astype(np.float32), hi.astype(np.float32), dtype=np.float32)


def step_reward(bank, cmd, a, a_prev, bank_limit_rad: float):
    """Reward of one tick (see :class:`RollHoldEnv`); arrays ``(batch,)`` or floats (same bits)."""
    w = RewardWeights
    err = (cmd - bank) / math.radians(30.0)
    near = np.maximum(np.abs(bank) / bank_limit_rad - w.near_limit_from, 0.0) / (1.0 - w.near_limit_from)
    da = a - a_prev
    return -(err * err + w.effort * a * a + w.rate * da * da + w.near_limit * near * near)


class RollHoldEnv(gym.Env):
    """Hold the scenario's bank command with the aileron, seeing only the camera (and gyro).

    Parameters
    ----------
    scenario : path, dict or Scenario
        The scenario (aircraft, servo, camera, gyro, disturbances, command,
        duration, controller rate, bank limit).
    randomize : mapping, optional
        Domain-randomisation ranges, name -> ``(low, high)`` or one value:
        ``initial_bank_deg``, ``command_scale`` (multiplies the scenario's
        bank command), ``latency_s``, ``dropout_prob``, ``noise_deg`` (camera)
        and ``turbulence_scale`` (multiplies every disturbance source). Drawn
        per episode from ``self.np_random`` (see :mod:`rollrig.sim.envs.episode`).
        ``reset(options={"randomize": {...}})`` replaces them for one episode
        and ``options={"run_index": i}`` fixes the run whose random streams
        are used (no randomisation and ``run_index = i`` is run ``i`` of
        ``rollrig run``).
    history : int
        Ticks of camera readings in the observation.
    render_mode : {"rgb_array", None}

    Observation
        float32 vector described field by field in
        :mod:`rollrig.controllers.policy` (camera readings, validity and age of
        the last ``history`` ticks, gyro if fitted, command, command − reading,
        previous action). Never the true bank.
    Action
        ``a`` in ``[−1, 1]`` (float32 box); aileron command ``a ·`` the
        servo's position limit (rad). Values outside are clipped.
    Reward (per tick)
        ``−(e² + 0.02 a² + 0.5 (a − a_prev)² + 5 n²)`` with ``e`` the true
        tracking error (command − bank) in units of 30° and ``n`` how far
        ``|bank|`` is into the last 15 % before the scenario's bank limit
        (0 below 85 % of it, 1 at the limit). Ending an episode early costs
        2 per tick left.
    Termination
        ``|bank|`` beyond the scenario's ``[criteria] bank_limit_deg``, or the
        core declaring divergence (non-finite command or ``|bank| > 180°``).
    Truncation
        At the scenario's duration.

    ``info`` holds ``t_s`` and, for analysis only, ``bank_true_rad``.
    """

    metadata = {"render_modes": ["rgb_array"], "render_fps": 25}

    def __init__(
        self,
        scenario: Scenario | Mapping | str | Path,
        randomize: Mapping | None = None,
        history: int = 3,
        render_mode: str | None = None,
    ) -> None:
        self.scenario = as_scenario(scenario)
        self.ranges = check_ranges(randomize)
        self.base = build_setup(self.scenario)
        self.layout = ObservationLayout(history=int(history), gyro=self.scenario.gyro is not None)
        self.builder = ObservationBuilder(self.layout)
        self.observation_space = observation_space(self.layout)
        self.action_space = gym.spaces.Box(-1.0, 1.0, shape=(1,), dtype=np.float32)
        if render_mode not in (None, "rgb_array"):
            raise ValueError(f"render_mode = {render_mode!r}; allowed: None, 'rgb_array'")
        self.render_mode = render_mode
        self.action_scale_rad = self.scenario.actuator.limit_rad
        self.bank_limit_rad = self.scenario.criteria.bank_limit_rad
        self.n_ticks = len(self.base.tick_steps)
        self.n_steps = self.base.n_steps
        self._every = self.base.ctrl_every
        self._stepper: Stepper | None = None

    # ------------------------------------------------------------------ API
    def reset(self, *, seed: int | None = None, options: dict | None = None):
        super().reset(seed=seed)
        options = options or {}
        ranges = check_ranges(options["randomize"], "options") if "randomize" in options else self.ranges
        self.draw = draw_episode(self.np_random, ranges, options.get("run_index"))
        setup = episode_setup(self.base, self.scenario, self.draw)
        self._stepper = Stepper(setup)
        obs = self._stepper.reset(self.scenario.run.seed, [self.draw.run_index], record="none")
        self.builder.reset(1)
        self._prev = 0.0
        self._tick = 0
        self._last = obs
        return self._vector(obs), self._info(0.0, float(self._stepper.bank[0]))

    def step(self, action):
        st = self._stepper
        a = min(max(float(np.asarray(action, dtype=float).reshape(1)[0]), -1.0), 1.0)  # NaN stays NaN
        obs = st.advance(np.array([a * self.action_scale_rad]))
        self._tick += 1
        k = min(self._tick * self._every, self.n_steps)  # the run's local step (never restarted)
        bank = float(st.bank[0])
        cmd = float(st.setup.bank_cmd[k])
        reward = float(step_reward(bank, cmd, a, self._prev, self.bank_limit_rad))
        terminated = bool(abs(bank) > self.bank_limit_rad or not st.alive[0])
        truncated = obs is None and not terminated
        if terminated:
            reward -= RewardWeights.termination * (self.n_ticks - self._tick)
        if obs is None:  # no next tick: the last reading, one tick older
            obs = aged_observation(self._last, k * st.setup.dt, cmd)
        self._prev = a
        self._last = obs
        return self._vector(obs), reward, terminated, truncated, self._info(k * st.setup.dt, bank)

    def render(self):
        if self.render_mode != "rgb_array":
            return None
        from .render import attitude_picture

        st = self._stepper
        k = int(st.episode_step[0])
        return attitude_picture(
            float(st.bank[0]),
            float(self._last.bank[0]),
            bool(self._last.valid[0]),
            float(st.setup.bank_cmd[k]),
            k * st.setup.dt,
        )

    # ------------------------------------------------------------- helpers
    def _vector(self, obs: Observation) -> np.ndarray:
        return self.builder(obs, self._prev)[0]

    def _info(self, t_s: float, bank: float) -> dict:
        return {"t_s": t_s, "bank_true_rad": bank}
