"""The ``[controller]`` section: a bundled PID, or the user's own class.

A user class (``kind = "custom"``, ``class = "package.module:Name"``) runs
the user's code, so loading it needs the command line's explicit permission
(``--allow-code``); a scenario file alone never makes rollrig import code.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

from rollrig.controllers.pid import PIDConfig

from .section import Section

__all__ = ["ControllerSpec", "parse_controller", "make_controller"]

KINDS = ("pid", "custom")


@dataclass(frozen=True)
class ControllerSpec:
    """Which controller to build, and at what rate.

    Parameters
    ----------
    kind : {"pid", "custom"}
    rate_hz : Hz
        Controller rate (a whole number of base steps per tick).
    pid : PIDConfig or None
        Gains for ``kind = "pid"``.
    class_path : str or None
        ``module:Class`` for ``kind = "custom"``.
    params : dict
        Keyword arguments for the custom class.
    """

    kind: str
    rate_hz: float
    pid: PIDConfig | None = None
    class_path: str | None = None
    params: dict[str, Any] = field(default_factory=dict)
    file: str = "<scenario>"


def parse_controller(sec: Section, *, base_step_s: float, aileron_limit_rad: float) -> ControllerSpec:
    kind = sec.string("kind", "pid", choices=KINDS)
    rate = sec.number("rate_hz", 50.0, lo=0.1, hi=1.0 / base_step_s)
    ratio = 1.0 / (rate * base_step_s)
    if abs(ratio - round(ratio)) > 1e-6:
        raise sec.error(
            "rate_hz",
            f"= {rate:g} is not a whole fraction of the base rate {1 / base_step_s:g} Hz; "
            f"allowed: {1 / base_step_s:g}/n Hz for whole n",
        )
    if kind == "pid":
        lim_deg = math.degrees(aileron_limit_rad)
        deriv = sec.string("derivative", "measurement", choices=("measurement", "gyro"))
        pid = PIDConfig(
            kp=sec.number("kp", lo=0.0, hi=100.0),
            ki_per_s=sec.number("ki_per_s", 0.0, lo=0.0, hi=100.0),
            kd_s=sec.number("kd_s", 0.0, lo=0.0, hi=100.0),
            derivative_source=deriv,
            derivative_filter_hz=sec.number("derivative_filter_hz", 5.0, lo=0.01, hi=0.5 * rate),
            output_limit_rad=math.radians(
                sec.number("output_limit_deg", lim_deg, lo=0.0, hi=90.0, lo_open=True)
            ),
            integrator_limit_rad=math.radians(
                sec.number("integrator_limit_deg", min(10.0, lim_deg), lo=0.0, hi=90.0)
            ),
            stale_after_s=sec.number("stale_after_s", 0.25, lo=0.0, hi=60.0, lo_open=True),
            hold_s=sec.number("hold_s", 0.5, lo=0.0, hi=60.0),
            fade_s=sec.number("fade_s", 1.0, lo=0.0, hi=60.0),
        )
        sec.finish()
        return ControllerSpec(kind=kind, rate_hz=rate, pid=pid, file=sec.file)
    path = sec.string("class")
    if path.count(":") != 1 or not all(path.split(":")):
        raise sec.error("class", f'= {path!r}; allowed: "package.module:ClassName"')
    params = sec.mapping("params")
    sec.finish()
    return ControllerSpec(kind=kind, rate_hz=rate, class_path=path, params=params, file=sec.file)


# Built here before sim.build existed; kept importable from here.
from .build import make_controller  # noqa: E402
