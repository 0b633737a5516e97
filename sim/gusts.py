"""Discrete gusts: the MIL-F-8785C "1 − cosine" shape.

MIL-F-8785C (5 Nov 1980, discrete gust model) defines, as a function of the
distance x flown into the gust,

    v(x) = 0                               for x < 0
    v(x) = (v_m / 2) (1 − cos(π x / d_m))  for 0 ≤ x ≤ d_m
    v(x) = v_m                             for x > d_m

i.e. a *ramp* that builds up over the gust length d_m and then holds its
full amplitude; the standard uses it singly or in multiples. (Public
descriptions of the standard call d_m "the length over which the gust builds
up"; that it then holds at v_m is as we recall the standard's figure.)
``hold_after=True`` gives exactly that ramp. ``hold_after=False`` (the default)
gives the usual isolated gust: the same rise over d_m followed by the mirror-
image fall, i.e. (v_m/2)(1 − cos(π x/d_m)) for 0 ≤ x ≤ 2 d_m and zero after
the gust has passed — two 8785C ramps, up then down.

``length_m`` is always d_m, the build-up distance (onset to peak); the
isolated gust is 2 d_m long in total. The distance is ``x = V (t − onset)``,
a frozen gust field flown through at the airspeed V.

The gust is uniform over the airframe: a side gust feeds only the ``v_gust``
channel (no gust yaw rate from its gradient), a roll gust only ``p_gust``.
Steady rolling-moment bias and its step are
:class:`sim.disturbance.SteadyRollMoment`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .disturbance import CHANNELS

__all__ = ["GUST_CHANNELS", "one_minus_cosine", "OneMinusCosineGust"]

#: Channels a discrete gust may drive.
GUST_CHANNELS: tuple[str, ...] = ("v_gust", "p_gust")


def one_minus_cosine(
    x_m: np.ndarray, length_m: float, amplitude: float, *, hold_after: bool = False
) -> np.ndarray:
    """The 1 − cos gust at distances ``x_m`` (m) into it.

    Parameters
    ----------
    x_m : m
        Distance flown since the gust onset (negative before it).
    length_m : m
        Build-up length d_m (onset to peak), > 0.
    amplitude : m/s or rad/s
        Peak value v_m.
    hold_after : bool
        True: hold ``amplitude`` for x > d_m (MIL-F-8785C ramp). False: fall
        back over a second d_m and stay at zero for x > 2 d_m.

    Returns
    -------
    ndarray
        Gust value, same shape as ``x_m``.
    """
    x = np.asarray(x_m, dtype=float)
    shape = 0.5 * amplitude * (1.0 - np.cos(np.pi * x / length_m))
    if hold_after:
        return np.where(x < 0.0, 0.0, np.where(x <= length_m, shape, amplitude))
    return np.where((x >= 0.0) & (x <= 2.0 * length_m), shape, 0.0)


@dataclass(frozen=True)
class OneMinusCosineGust:
    """A deterministic 1 − cos gust as a time-signal disturbance source.

    Parameters
    ----------
    onset_s : s, float or (batch,)
        Time at which the aircraft enters the gust (≥ 0).
    length_m : m
        Build-up length d_m, onset to peak (> 0); see the module doc.
    amplitude : m/s for ``"v_gust"``, rad/s for ``"p_gust"``; float or (batch,)
        Peak value (either sign).
    channel : {"v_gust", "p_gust"}
        Which plant disturbance input it drives.
    airspeed_mps : m/s
        Airspeed V converting time into distance (> 0).
    hold_after : bool
        Hold the peak after d_m (MIL-F-8785C ramp) instead of falling back.
    """

    onset_s: float | np.ndarray
    length_m: float
    amplitude: float | np.ndarray
    channel: str
    airspeed_mps: float
    hold_after: bool = False
    component: str = "gust"

    def __post_init__(self) -> None:
        if self.channel not in GUST_CHANNELS:
            raise ValueError(
                f"OneMinusCosineGust.channel must be one of {GUST_CHANNELS}, got {self.channel!r}"
            )
        for name in ("length_m", "airspeed_mps"):
            value = getattr(self, name)
            if not (math.isfinite(value) and value > 0.0):
                raise ValueError(f"OneMinusCosineGust.{name} must be finite and > 0, got {value!r}")
        onset = np.asarray(self.onset_s, dtype=float)
        if not (np.all(np.isfinite(onset)) and np.all(onset >= 0.0)):
            raise ValueError(f"OneMinusCosineGust.onset_s must be finite and >= 0, got {self.onset_s!r}")
        if not np.all(np.isfinite(np.asarray(self.amplitude, dtype=float))):
            raise ValueError(f"OneMinusCosineGust.amplitude must be finite, got {self.amplitude!r}")

    @property
    def duration_s(self) -> float:
        """Time from onset to the end of the gust (s); to the peak if held."""
        factor = 1.0 if self.hold_after else 2.0
        return factor * self.length_m / self.airspeed_mps

    def values(self, t_s: np.ndarray) -> dict[int, np.ndarray]:
        """Gust input at each run's times ``t_s`` (s, ``(n, batch)``): ``{channel: (n, batch)}``."""
        return {CHANNELS.index(self.channel): self.signal(t_s)}

    def signal(self, t_s: np.ndarray) -> np.ndarray:
        """Gust value at times ``t_s`` (s); per-run parameters broadcast along the last axis."""
        x = self.airspeed_mps * (np.asarray(t_s, dtype=float) - np.asarray(self.onset_s, dtype=float))
        return one_minus_cosine(
            x, self.length_m, np.asarray(self.amplitude, dtype=float), hold_after=self.hold_after
        )
