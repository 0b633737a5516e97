"""One key, one unit: how metrics are named in files and machine output.

Metrics are computed in SI (:mod:`rollrig.sim.metrics`). In every JSON and
CSV rollrig writes, a metric's key names its SI unit (``settling_time_s``,
``rms_error_rad``, ``overshoot_pct``); the one metric whose internal name
carries no unit (``itae``) is written ``itae_rad_s2``. Tables for people
show display units (degrees), with the unit in the column label.
"""

from __future__ import annotations

__all__ = ["file_key", "si_unit", "RENAMED"]

#: internal metric name -> key in files (the unit spelled out)
RENAMED = {"itae": "itae_rad_s2"}


def file_key(key: str) -> str:
    """The key a metric has in every JSON and CSV file (its SI unit in the name)."""
    return RENAMED.get(key, key)


def si_unit(key: str) -> str:
    """The SI unit of a metric's values in files (``""`` for flags and pure numbers)."""
    k = file_key(key)
    for suffix, unit in (
        ("_rad_s2", "rad s^2"),
        ("_rad_s", "rad/s"),
        ("_rad", "rad"),
        ("_pct", "%"),
        ("_s", "s"),
    ):
        if k.endswith(suffix):
            return unit
    if k.startswith("pct_"):
        return "%"
    return ""
