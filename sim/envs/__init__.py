"""Gymnasium environments over the stepping core.

Importing this package registers, with :func:`gymnasium.register`:

``rollrig/RollHold-v0``
    :class:`RollHoldEnv` (one aircraft), with the natively vectorised
    :class:`RollHoldVectorEnv` as its vector entry point, so
    ``gymnasium.make_vec("rollrig/RollHold-v0", num_envs=64,
    vectorization_mode="vector_entry_point", scenario=...)`` steps one
    batched core.
"""

from __future__ import annotations

import gymnasium

from .roll_env import RollHoldEnv

__all__ = ["RollHoldEnv", "ENV_ID"]

ENV_ID = "rollrig/RollHold-v0"

if ENV_ID not in gymnasium.registry:
    gymnasium.register(
        id=ENV_ID,
        entry_point="rollrig.sim.envs.roll_env:RollHoldEnv",
        vector_entry_point="rollrig.sim.envs.vector:RollHoldVectorEnv",
    )
