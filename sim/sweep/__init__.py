"""Parameter sweeps: degradation maps over scenario keys, resumable, local or on Dask.

``plan_sweep`` checks the ``--set`` options and lays out points and chunks;
``run_sweep`` runs what a folder does not hold yet and writes the tidy
table, plots and manifest. See :mod:`rollrig.sim.sweep.chunk` for what one
point computes.
"""

from __future__ import annotations

from .axes import Axis, design_points, parse_set
from .chunk import run_chunk
from .driver import SweepResult, run_sweep
from .plan import SweepPlan, load_doc, plan_sweep

__all__ = [
    "Axis",
    "parse_set",
    "design_points",
    "run_chunk",
    "SweepPlan",
    "plan_sweep",
    "load_doc",
    "SweepResult",
    "run_sweep",
]
