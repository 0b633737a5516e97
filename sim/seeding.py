"""Per-run, per-component random streams.

Each run of a batch and each random component (sensor noise, dropouts,
turbulence, ...) gets its own ``np.random.Generator``. The stream for
``(seed, run_index, component)`` depends on nothing else, so

* the same seed gives bit-identical draws,
* run ``i`` of a batch of N draws exactly what it draws when run alone
  (``--replay i``), and
* adding a new component never shifts another component's stream.

Component identifiers are stable CRC-32 values of the component's name.
"""

from __future__ import annotations

import zlib
from collections.abc import Sequence

import numpy as np

__all__ = ["component_id", "run_generators", "run_generator"]


def component_id(name: str) -> int:
    """Stable integer identifier of a random component, from its name."""
    return zlib.crc32(name.encode("utf-8"))


def run_generator(seed: int, run_index: int, component: str) -> np.random.Generator:
    """The generator for one run and one component."""
    ss = np.random.SeedSequence(entropy=int(seed), spawn_key=(int(run_index), component_id(component)))
    return np.random.Generator(np.random.PCG64(ss))


def run_generators(seed: int, run_indices: Sequence[int], component: str) -> list[np.random.Generator]:
    """One generator per run of the batch, for one component."""
    return [run_generator(seed, int(i), component) for i in run_indices]
