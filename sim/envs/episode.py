"""What changes from one training episode to the next, and how it is drawn.

Domain randomisation draws, per episode and from the environment's own
generator (``self.np_random``, seeded by ``reset(seed=...)``), in this fixed
order:

1. ``run_index``: which run of the scenario's Monte Carlo set supplies the
   random streams of the camera, gyro and turbulence (an integer in
   ``[0, 2**62)``; the stepping core's seed stays the scenario's ``[run]
   seed``), unless ``reset(options={"run_index": i})`` names one;
2. each randomised quantity below, uniform over its ``(low, high)`` range, in
   the order of :data:`RANGES`; a quantity with no range is not drawn.

So every random number of an episode traces back to the seed given to
``reset``, and an episode with ``run_index = i`` and no randomisation is run
``i`` of ``rollrig run`` bit for bit.
"""

from __future__ import annotations

import hashlib
import json
import math
from collections.abc import Mapping
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np
from rollrig.controllers.base import Observation

from ..core import LoopSetup
from ..errors import UserInputError
from ..scenario import Scenario, load_scenario, parse_scenario

__all__ = [
    "RANGES",
    "EpisodeDraw",
    "draw_episode",
    "check_ranges",
    "episode_setup",
    "aged_observation",
    "as_scenario",
]

#: randomised quantity -> (unit, allowed lowest, allowed highest)
RANGES: dict[str, tuple[str, float, float]] = {
    "initial_bank_deg": ("deg", -90.0, 90.0),
    "command_scale": ("1", -2.0, 2.0),
    "latency_s": ("s", 0.0, 5.0),
    "dropout_prob": ("1", 0.0, 0.99),
    "noise_deg": ("deg", 0.0, 30.0),
    "turbulence_scale": ("1", 0.0, 10.0),
}

RUN_INDEX_END = 2**62


def check_ranges(ranges: Mapping | None, where: str = "randomize") -> dict[str, tuple[float, float]]:
    """Validate randomisation ranges: name -> (low, high) or a single value."""
    out: dict[str, tuple[float, float]] = {}
    for key, value in (ranges or {}).items():
        if key not in RANGES:
            raise UserInputError(f"{where}: unknown key {key!r}; allowed: {', '.join(RANGES)}")
        unit, lo, hi = RANGES[key]
        pair = (value, value) if np.isscalar(value) else tuple(value)
        if len(pair) != 2 or not all(isinstance(v, int | float) and math.isfinite(v) for v in pair):
            raise UserInputError(f"{where}: {key} = {value!r}; allowed: a number or (low, high)")
        a, b = float(pair[0]), float(pair[1])
        if not lo <= a <= b <= hi:
            raise UserInputError(f"{where}: {key} = {value!r}; allowed: {lo:g} ≤ low ≤ high ≤ {hi:g} {unit}")
        out[key] = (a, b)
    return out


@dataclass(frozen=True)
class EpisodeDraw:
    """One episode's drawn values (``None``: the scenario's own)."""

    run_index: int
    initial_bank_deg: float | None = None
    command_scale: float | None = None
    latency_s: float | None = None
    dropout_prob: float | None = None
    noise_deg: float | None = None
    turbulence_scale: float | None = None


def draw_episode(
    rng: np.random.Generator, ranges: Mapping[str, tuple[float, float]], run_index: int | None = None
) -> EpisodeDraw:
    """Draw one episode's values from ``rng`` in the documented order."""
    idx = int(rng.integers(RUN_INDEX_END)) if run_index is None else int(run_index)
    values = {}
    for key in RANGES:
        if key in ranges:
            lo, hi = ranges[key]
            values[key] = float(rng.uniform(lo, hi))
    return EpisodeDraw(run_index=idx, **values)


#: intensity fields of each disturbance source that ``turbulence_scale`` multiplies
_INTENSITY = {
    "SteadyRollMoment": ("accel_rad_s2", "step_accel_rad_s2"),
    "OneMinusCosineGust": ("amplitude",),
}


def scale_disturbance(src, scale):
    """A disturbance source with its intensity multiplied by ``scale`` (float or ``(batch,)``).

    Scaling changes no random draw: the source keeps its stream name.
    """
    name = type(src).__name__
    if name == "DrydenTurbulence":
        p = src.params
        params = replace(p, sigma_v_mps=p.sigma_v_mps * scale, sigma_w_mps=p.sigma_w_mps * scale)
        return replace(src, params=params)
    if name not in _INTENSITY:
        raise UserInputError(f"turbulence_scale: disturbance {name} cannot be scaled")
    return replace(src, **{f: getattr(src, f) * scale for f in _INTENSITY[name]})


def episode_setup(base: LoopSetup, sc: Scenario, draw: EpisodeDraw) -> LoopSetup:
    """The stepping core's setup for one episode of a scalar environment."""
    changes = {}
    if draw.initial_bank_deg is not None:
        x0 = np.array(base.x0, dtype=float)
        x0[sc.plant.phi_index] = math.radians(draw.initial_bank_deg)
        changes["x0"] = x0
    if draw.command_scale is not None:
        changes["bank_cmd"] = base.bank_cmd * draw.command_scale
    cam = {}
    if draw.latency_s is not None:
        cam["latency_s"] = draw.latency_s
    if draw.dropout_prob is not None:
        cam["dropout_prob"] = draw.dropout_prob
    if draw.noise_deg is not None:
        cam["noise_rad"] = math.radians(draw.noise_deg)
    if cam:
        changes["camera"] = replace(base.camera, **cam)
    if draw.turbulence_scale is not None:
        changes["disturbances"] = tuple(
            scale_disturbance(s, draw.turbulence_scale) for s in base.disturbances
        )
    return replace(base, **changes) if changes else base


def aged_observation(last: Observation, t: float, bank_cmd) -> Observation:
    """The observation at ``t`` when the core has no next tick: the last reading, older by ``t − last.t``."""
    return Observation(
        t=t,
        dt=last.dt,
        bank=last.bank,
        valid=last.valid,
        age=last.age + (t - last.t),
        bank_cmd=np.broadcast_to(bank_cmd, (len(last.bank),)).copy(),
        rate=last.rate,
    )


def as_scenario(scenario: Scenario | Mapping | str | Path) -> Scenario:
    """A scenario from a file path, a parsed TOML dict, or a :class:`Scenario`."""
    if isinstance(scenario, Scenario):
        return scenario
    if isinstance(scenario, str | Path):
        return load_scenario(scenario)
    if isinstance(scenario, Mapping):
        digest = hashlib.sha256(json.dumps(scenario, sort_keys=True, default=str).encode()).hexdigest()
        return parse_scenario(dict(scenario), file="<scenario dict>", sha256=digest)
    raise UserInputError(f"scenario = {type(scenario).__name__}; allowed: a file path, a dict or a Scenario")
