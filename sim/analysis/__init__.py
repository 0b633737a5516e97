"""Linear analysis: loop margins with camera delay, and handling-quality ratings.

* :mod:`sim.analysis.linear_loop` — frequency response of the bank-hold loop
  broken at the aileron command, with exact delays; classical, delay, disk and
  stability margins of that loop, of any python-control system or of measured
  frequency-response data (:mod:`sim.analysis.loop_sources`); closed-loop
  bandwidth; MIL-F-9490D margin check.
* :mod:`sim.analysis.handling` — roll, spiral and Dutch-roll modes and their
  MIL-F-8785C Levels; Class I roll performance.

Names are imported lazily: importing one analysis module does not import
python-control for the others.
"""

from __future__ import annotations

import importlib
from typing import Any

#: public name -> module (relative to this package)
_LAZY = {
    "LateralModes": "handling",
    "Level": "handling",
    "ModeRatings": "handling",
    "identify_modes": "handling",
    "rate_dutch_roll": "handling",
    "rate_modes": "handling",
    "rate_roll_mode": "handling",
    "rate_roll_performance": "handling",
    "rate_spiral": "handling",
    "roll_performance_bank_change_deg": "handling",
    "LoopMargins": "linear_loop",
    "LoopParts": "linear_loop",
    "closed_loop_response": "linear_loop",
    "margins": "linear_loop",
    "open_loop_response": "linear_loop",
    "rational_loop": "linear_loop",
    "FrequencyResponse": "loop_sources",
    "load_frequency_response": "frequency_response_file",
}

__all__ = list(_LAZY)


def __getattr__(name: str) -> Any:
    try:
        module = _LAZY[name]
    except KeyError:
        raise AttributeError(f"module {__name__!r} has no attribute {name!r}") from None
    value = getattr(importlib.import_module(f".{module}", __name__), name)
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return sorted(__all__)
