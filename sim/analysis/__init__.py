"""Linear analysis: loop margins with camera delay, and handling-quality ratings.

* :mod:`sim.analysis.linear_loop` — frequency response of the bank-hold loop
  broken at the aileron command, with exact delays; classical, delay and disk
  margins; closed-loop bandwidth; MIL-F-9490D margin check; Bode/Nichols/Nyquist
  plot.
* :mod:`sim.analysis.handling` — roll, spiral and Dutch-roll modes and their
  MIL-F-8785C Levels; Class I roll performance.
"""

from __future__ import annotations

from .handling import (
    LateralModes,
    Level,
    ModeRatings,
    identify_modes,
    rate_dutch_roll,
    rate_modes,
    rate_roll_mode,
    rate_roll_performance,
    rate_spiral,
    roll_performance_bank_change_deg,
)
from .linear_loop import (
    LoopMargins,
    LoopParts,
    closed_loop_response,
    margins,
    open_loop_response,
    plot_margins,
    rational_loop,
)

__all__ = [
    "LateralModes",
    "Level",
    "ModeRatings",
    "identify_modes",
    "rate_dutch_roll",
    "rate_modes",
    "rate_roll_mode",
    "rate_roll_performance",
    "rate_spiral",
    "roll_performance_bank_change_deg",
    "LoopMargins",
    "LoopParts",
    "closed_loop_response",
    "margins",
    "open_loop_response",
    "plot_margins",
    "rational_loop",
]
