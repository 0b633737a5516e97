"""A hand-made linear policy (a PD law on the camera error and the gyro) for policy tests."""

from __future__ import annotations

import math

import numpy as np
from rollrig.controllers.policy import ObservationLayout, PolicyNet

__all__ = ["pd_policy", "policy_meta"]


def pd_policy(layout: ObservationLayout, kp: float = 0.9, kd_s: float = 0.12, limit_deg: float = 20.0):
    """Aileron = kp·(command − reading) − kd·rate, as a one-layer policy in normalised units."""
    names = layout.names
    w = np.zeros((1, layout.size))
    # error field is ÷30°, action ×limit: a = kp·err·30/limit
    w[0, names.index("error")] = kp * 30.0 / limit_deg
    if layout.gyro:  # rate field is ÷60°/s
        w[0, names.index("rate")] = -kd_s * 60.0 / limit_deg
    n = layout.size
    return PolicyNet([w], [np.zeros(1)], np.zeros(n), np.ones(n), "clip")


def policy_meta(layout: ObservationLayout, limit_deg: float = 20.0, rate_hz: float = 50.0) -> dict:
    return {
        "observation": layout.to_json(),
        "action_scale_rad": math.radians(limit_deg),
        "controller_rate_hz": rate_hz,
        "algorithm": "hand",
        "seed": 0,
        "rollrig_version": "test",
        "scenario_sha256": "",
    }
