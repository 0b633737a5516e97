"""Disturbance sources and how they reach the plant.

Sources are immutable parameter objects (safe to share between steppers and
processes); the mutable part of a disturbance while a batch runs (random
streams, filter states) is owned by the stepping core. Every source feeds
some of the plant's disturbance inputs, in this channel order (SI):

====  =====================  ======  ==============================================
 ch    name                   unit    enters the plant through
====  =====================  ======  ==============================================
 0     ``v_gust``             m/s     side-gust velocity (air-relative sideslip)
 1     ``p_gust``             rad/s   gust roll rate (air-relative roll rate)
 2     ``r_gust``             rad/s   gust yaw rate (air-relative yaw rate)
 3     ``roll_accel``         rad/s²  rolling-moment disturbance / Ixx
====  =====================  ======  ==============================================

Two kinds of source exist:

* a **time signal** (:class:`TimeSignal`: steady moment, 1 − cos gusts) is a
  pure function of each run's own time: ``values(t)`` with ``t`` of shape
  ``(n, batch)`` returns ``{channel: (n, batch) array}``; per-run parameters
  are ``(batch,)`` arrays;
* a **shaped noise** (:class:`ShapedNoise`: Dryden turbulence) is white noise
  through a linear filter. It hands the core its exact discrete model
  (:class:`NoiseFilter`); the core carries the filter states inside its own
  state vector, so the gust reaches the plant through the same matrix product
  that advances the aircraft, and only the noise increments are drawn per
  block of steps.

:func:`disturbance_record` produces a source's signals on their own (checks,
plots); the stepping core does not use it.
"""

from __future__ import annotations

from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass
from typing import Protocol, runtime_checkable

import numpy as np

__all__ = [
    "CHANNELS",
    "N_CHANNELS",
    "DisturbanceSource",
    "TimeSignal",
    "ShapedNoise",
    "NoiseFilter",
    "SteadyRollMoment",
    "DisturbanceSet",
    "disturbance_record",
]

CHANNELS: tuple[str, ...] = ("v_gust", "p_gust", "r_gust", "roll_accel")
N_CHANNELS = len(CHANNELS)


@runtime_checkable
class DisturbanceSource(Protocol):
    """Any disturbance source: it has a component name (for its random streams)."""

    #: Name used to derive this source's random streams (see :mod:`sim.seeding`).
    component: str


@runtime_checkable
class TimeSignal(Protocol):
    """A deterministic disturbance: a function of each run's own time."""

    component: str

    def values(self, t: np.ndarray) -> dict[int, np.ndarray]:
        """Inputs at local times ``t`` (s, ``(n, batch)``): ``{channel: (n, batch)}``."""


@dataclass(frozen=True)
class NoiseFilter:
    """Exact discrete model of a shaped-noise source over one base step.

    ``x[k+1] = phi x[k] + noise_factor z[k]`` with ``z[k]`` standard normal
    ``(n_noise,)``; the first state is ``init_factor z₀`` (``z₀`` standard
    normal ``(n_states,)``, the stationary distribution); the channels are
    ``out @ x`` (``out`` is ``(N_CHANNELS, n_states)``), held over the step.
    ``scale`` (``(n_states, batch)``) multiplies each run's noise and initial
    state (the per-run intensity).
    """

    phi: np.ndarray
    noise_factor: np.ndarray
    init_factor: np.ndarray
    out: np.ndarray
    scale: np.ndarray

    @property
    def n_states(self) -> int:
        return int(self.phi.shape[0])


@runtime_checkable
class ShapedNoise(Protocol):
    """A random disturbance made by a linear filter driven by white noise."""

    component: str

    def noise_filter(self, dt: float, batch: int) -> NoiseFilter:
        """The filter's exact discrete model at base step ``dt`` for a batch."""


@dataclass(frozen=True)
class SteadyRollMoment:
    """A rolling-moment bias (mistrim, fuel imbalance), with an optional step.

    Parameters
    ----------
    accel_rad_s2 : rad/s², float or (batch,)
        Rolling moment divided by roll inertia, from ``t = 0``.
    step_time_s : s, float, (batch,) or None
        Time at which the bias changes by ``step_accel_rad_s2``.
    step_accel_rad_s2 : rad/s², float or (batch,)
        Size of the change.
    """

    accel_rad_s2: float | np.ndarray = 0.0
    step_time_s: float | np.ndarray | None = None
    step_accel_rad_s2: float | np.ndarray = 0.0
    component: str = "roll-moment"

    def values(self, t: np.ndarray) -> dict[int, np.ndarray]:
        level = np.broadcast_to(np.asarray(self.accel_rad_s2, dtype=float), t.shape[-1:]) + np.zeros_like(t)
        if self.step_time_s is not None:
            after = t >= np.asarray(self.step_time_s, dtype=float) - 1e-12
            level = level + np.where(after, np.asarray(self.step_accel_rad_s2, dtype=float), 0.0)
        return {3: level}


class DisturbanceSet:
    """An immutable collection of sources (summed); an empty set gives no disturbance."""

    def __init__(self, sources: Sequence[DisturbanceSource] = ()) -> None:
        self._sources = tuple(sources)

    @property
    def sources(self) -> tuple:
        return self._sources

    def __bool__(self) -> bool:
        return bool(self._sources)

    def __iter__(self) -> Iterator:
        return iter(self._sources)

    def __len__(self) -> int:
        return len(self._sources)


def disturbance_record(
    sources: Sequence[DisturbanceSource] | DisturbanceSource,
    dt: float,
    n: int,
    rng_for: Callable[[str], Sequence[np.random.Generator]],
    *,
    block: int = 4096,
) -> np.ndarray:
    """The summed inputs of sources for base steps ``0 .. n-1``, ``(n, batch, 4)``.

    ``rng_for(component)`` gives one generator per run. Shaped noise is drawn
    in blocks of ``block`` steps exactly as the stepping core draws it (the
    block length does not change the numbers).
    """
    from .core import matmul_cols  # the core imports this module

    if not isinstance(sources, (list, tuple, DisturbanceSet)):
        sources = (sources,)
    out = None
    for src in sources:
        if isinstance(src, ShapedNoise):
            rngs = rng_for(src.component)
            batch = len(rngs)
            f = src.noise_filter(dt, batch)
            x = initial_state(f, rngs)
            part = np.zeros((n, batch, N_CHANNELS))
            for k0 in range(0, n, block):
                m = min(block, n - k0)
                e = noise_block(f, rngs, m)  # (m, s, batch)
                for j in range(m):
                    part[k0 + j] = matmul_cols(f.out, x).T
                    x = matmul_cols(f.phi, x) + e[j]
        else:
            batch = len(rng_for(src.component))
            t = np.broadcast_to((np.arange(n) * dt)[:, None], (n, batch))
            part = np.zeros((n, batch, N_CHANNELS))
            for ch, v in src.values(np.ascontiguousarray(t)).items():
                part[:, :, ch] = v
        out = part if out is None else out + part
    if out is None:
        raise ValueError("disturbance_record: no sources")
    return out


# ----------------------------------------------------------- shaped-noise draws
def initial_state(f: NoiseFilter, rngs: Sequence[np.random.Generator]) -> np.ndarray:
    """First filter state of each run, ``(n_states, batch)``: its own stream's first draws."""
    s = f.n_states
    z = np.empty((s, len(rngs)))
    for i, g in enumerate(rngs):
        z[:, i] = g.standard_normal(s)
    return f.scale * _tri_apply(f.init_factor, z)


def noise_block(f: NoiseFilter, rngs: Sequence[np.random.Generator], n: int) -> np.ndarray:
    """Noise increments of ``n`` steps for each run, ``(n, n_states, batch)``.

    Each run draws ``n_noise`` normals per step, in time order, from its own
    stream; so blocks of any length give the same numbers.
    """
    q = f.noise_factor.shape[1]
    m = len(rngs)
    z = np.empty((m, n, q))
    for i, g in enumerate(rngs):
        g.standard_normal(out=z[i])
    zt = z.transpose(1, 2, 0)  # (n, q, batch) view
    e = np.zeros((n, f.n_states, m))
    nf = f.noise_factor
    for i in range(f.n_states):
        row = e[:, i]
        for j in range(q):
            if nf[i, j] != 0.0:
                row += nf[i, j] * zt[:, j]
    e *= f.scale
    return e


def _tri_apply(low: np.ndarray, z: np.ndarray) -> np.ndarray:
    """``low @ z`` written out elementwise in a fixed order (independent of batch size)."""
    out = np.zeros((low.shape[0], z.shape[1]))
    for i in range(low.shape[0]):
        for j in range(low.shape[1]):
            if low[i, j] != 0.0:
                out[i] += low[i, j] * z[j]
    return out
