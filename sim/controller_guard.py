"""A controller wrapper that checks what a controller returns, and reports progress.

The stepping core takes whatever a controller returns and broadcasts it;
a user's controller returning the wrong shape would end in a numpy
traceback that never names the controller, and a NaN command would read as
a divergence at 0.00 s. :class:`CheckedController` wraps any controller at
the place the CLI hands it to the core and turns both into one line naming
the controller (a :class:`~rollrig.sim.errors.UserInputError`). It can also
call a progress callback with the simulated time at each tick.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
from rollrig.controllers.base import Controller, Observation

from .errors import UserInputError

__all__ = ["CheckedController", "controller_name"]


def controller_name(ctrl: object) -> str:
    cls = type(ctrl)
    return f"{cls.__module__}:{cls.__qualname__}"


class CheckedController:
    """``ctrl`` with its output checked: shape ``(batch,)`` and finite.

    Parameters
    ----------
    ctrl : Controller
        The controller to wrap.
    progress : callable(t_s) or None
        Called with the tick time (s) at every tick.
    """

    def __init__(self, ctrl: Controller, progress: Callable[[float], None] | None = None) -> None:
        self.ctrl = ctrl
        self.progress = progress
        self.batch = 0
        self.name = controller_name(ctrl)

    def reset(self, batch: int) -> None:
        self.batch = int(batch)
        self.ctrl.reset(batch)

    def step(self, obs: Observation) -> np.ndarray:
        if self.progress is not None:
            self.progress(obs.t)
        u = self.ctrl.step(obs)
        try:
            a = np.asarray(u, dtype=float)
        except (TypeError, ValueError):
            raise UserInputError(
                f"controller {self.name} returned {type(u).__name__}, expected a float array of shape "
                f"({self.batch},) (aileron, rad)"
            ) from None
        if a.shape != (self.batch,) and not (a.ndim == 0 and self.batch == 1):
            raise UserInputError(
                f"controller {self.name} returned shape {a.shape}, expected ({self.batch},) "
                f"(one aileron command per run, rad) at t = {obs.t:.2f} s"
            )
        bad = ~np.isfinite(a)
        if bad.any():
            i = int(np.flatnonzero(np.atleast_1d(bad))[0])
            raise UserInputError(
                f"controller {self.name} returned a non-finite aileron command "
                f"({np.atleast_1d(a)[i]}) at t = {obs.t:.2f} s for batch row {i}; allowed: finite radians"
            )
        return a
