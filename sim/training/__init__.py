"""Training learned roll-hold policies on the stepping core (ARS in numpy; PPO/SAC with the ``rl`` extra)."""
