"""Loops given from outside: a python-control system, or measured frequency-response data.

:func:`sim.analysis.linear_loop.margins` analyses three kinds of loop (all
broken at the plant input, negative-feedback convention ``1 + L = 0`` at
instability):

* :class:`~sim.analysis.linear_loop.LoopParts` — the camera-in-the-loop
  bank hold with exact delays (built from a scenario);
* a continuous-time SISO python-control system (``TransferFunction`` or
  ``StateSpace``), proper or biproper (a controller with direct feed-through,
  a plant with a D term) — evaluated by :class:`SystemLoop`;
* frequency-response data ``(ω, L(jω))`` — :class:`FrequencyResponse`, e.g.
  identified from flight data or read from a CSV file
  (:mod:`sim.analysis.frequency_response_file`) — evaluated by
  :class:`DataLoop`.

Each evaluator offers the same small interface the margin search needs:
``loop(ω)``, ``dc()`` (``L(0)`` when finite), ``stable()`` (closed-loop
stability, ``None`` when the data cannot tell), ``closed(ω)`` and
``closed_dc()`` (the response whose −3 dB point is the bandwidth) and
``breaks()`` (magnitudes of poles and zeros, to size the frequency grid).

What data cannot tell
---------------------
A frequency response alone does not show whether the closed loop is stable
(that needs the open loop's unstable poles and the whole Nyquist contour), nor
what happens outside the measured band. :class:`DataLoop` therefore reports
stability as unknown and the margin search flags crossovers that may lie
beyond the data. Between data points the response is interpolated by cubic
splines (:class:`scipy.interpolate.CubicSpline`, not-a-knot) in ``log ω`` of
the log-magnitude and the unwrapped phase; it passes through every data point.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import control as ct
import numpy as np

__all__ = ["FrequencyResponse", "SystemLoop", "DataLoop", "as_system", "dc_value"]


@dataclass(frozen=True, eq=False)
class FrequencyResponse:
    """Open-loop frequency response data ``L(jω)`` of a SISO loop.

    Parameters
    ----------
    omega_rad_s : (n,) array_like, rad/s
        Strictly increasing frequencies > 0 (n ≥ 3).
    response : (n,) array_like of complex
        ``L(jω)`` at those frequencies (negative-feedback convention).
    name : str
        Where the data came from (a file name), for reports.
    """

    omega_rad_s: np.ndarray
    response: np.ndarray
    name: str = "frequency response"

    def __post_init__(self) -> None:
        w = np.asarray(self.omega_rad_s, dtype=float).reshape(-1)
        r = np.asarray(self.response, dtype=complex).reshape(-1)
        if w.size < 3 or r.shape != w.shape:
            raise ValueError(
                f"need at least 3 frequencies and one response per frequency, got {w.size}, {r.size}"
            )
        if not (np.all(np.isfinite(w)) and np.all(w > 0.0) and np.all(np.diff(w) > 0.0)):
            raise ValueError("omega_rad_s must be finite, > 0 and strictly increasing")
        if not np.all(np.isfinite(r)) or np.any(r == 0.0):
            raise ValueError("response must be finite and non-zero")
        w.setflags(write=False)
        r.setflags(write=False)
        object.__setattr__(self, "omega_rad_s", w)
        object.__setattr__(self, "response", r)

    @classmethod
    def from_frd(cls, sys: ct.FrequencyResponseData, name: str = "python-control FRD") -> FrequencyResponse:
        """From a SISO :class:`control.FrequencyResponseData` (sorted by frequency)."""
        if sys.ninputs != 1 or sys.noutputs != 1:
            raise ValueError("only SISO frequency-response data can be analysed")
        w = np.asarray(sys.omega, dtype=float)
        r = np.asarray(sys.frdata, dtype=complex)[0, 0]
        order = np.argsort(w)
        return cls(w[order], r[order], name)


def as_system(loop: Any) -> ct.TransferFunction:
    """A continuous-time SISO python-control system as a transfer function.

    Raises
    ------
    ValueError
        For a MIMO, discrete-time or improper system.
    """
    if loop.ninputs != 1 or loop.noutputs != 1:
        raise ValueError(f"the loop must be SISO, got {loop.noutputs} outputs × {loop.ninputs} inputs")
    if not loop.isctime():
        raise ValueError("the loop must be continuous-time (dt = 0); sample-time loops are not analysed here")
    tf = ct.tf(loop)
    num, den = np.atleast_1d(tf.num[0][0]), np.atleast_1d(tf.den[0][0])
    num = np.trim_zeros(num, "f") if np.any(num) else np.zeros(1)
    den = np.trim_zeros(den, "f")
    if num.size > den.size:
        raise ValueError("the loop is improper (more zeros than poles); a physical loop is proper")
    return tf


def dc_value(tf: ct.TransferFunction) -> complex | None:
    """``L(0)`` of a SISO transfer function, or ``None`` if it has a pole at 0.

    Pole-zero pairs at the origin cancel first (:meth:`control.TransferFunction.minreal`).
    """
    t = tf.minreal()
    num, den = np.atleast_1d(t.num[0][0]), np.atleast_1d(t.den[0][0])
    n0, d0 = float(num[-1]), float(den[-1])
    scale = float(np.max(np.abs(den)))
    if abs(d0) <= 1e-12 * scale:
        return None if n0 != 0.0 else 0.0
    return complex(n0 / d0)


def _trimmed(c: Any) -> np.ndarray:
    """Polynomial coefficients without leading round-off terms (|c| ≤ 1e-12·max|c|)."""
    c = np.atleast_1d(np.asarray(c, dtype=float))
    big = np.nonzero(np.abs(c) > 1e-12 * np.max(np.abs(c)))[0] if np.any(c) else np.array([], int)
    return c[big[0] :] if big.size else np.zeros(1)


def _poly_break_magnitudes(tf: ct.TransferFunction) -> np.ndarray:
    num = _trimmed(tf.num[0][0])
    z = np.roots(num) if np.any(num) else np.array([])
    p = np.roots(_trimmed(tf.den[0][0]))
    m = np.abs(np.concatenate([z, p]))
    return m[m > 1e-12]


class SystemLoop:
    """Evaluator of a continuous-time SISO python-control system (proper or biproper)."""

    kind = "python-control system"

    def __init__(self, loop: Any) -> None:
        self.tf = as_system(loop)
        self.num = np.atleast_1d(np.asarray(self.tf.num[0][0], dtype=float))
        self.den = np.atleast_1d(np.asarray(self.tf.den[0][0], dtype=float))
        n = max(self.num.size, self.den.size)
        closed_den = np.pad(self.den, (n - self.den.size, 0)) + np.pad(self.num, (n - self.num.size, 0))
        closed_den = np.trim_zeros(closed_den, "f")
        if closed_den.size < self.den.size:
            # 1 + L(∞) = 0: the feedback loop is ill-posed (algebraic loop of gain -1)
            raise ValueError("1 + L(s) vanishes at infinite frequency: the feedback loop is ill-posed")
        self._closed_den = closed_den
        self._dc = dc_value(self.tf)

    def loop(self, w: np.ndarray) -> np.ndarray:
        s = 1j * np.asarray(w, dtype=float)
        return np.polyval(self.num, s) / np.polyval(self.den, s)

    def dc(self) -> complex | None:
        return self._dc

    def stable(self, pade_order: int = 6) -> bool | None:
        roots = np.roots(self._closed_den) if self._closed_den.size > 1 else np.array([])
        return bool(np.all(roots.real < 0.0))

    def closed(self, w: np.ndarray, big_l: np.ndarray | None = None) -> np.ndarray:
        big_l = self.loop(w) if big_l is None else big_l
        return big_l / (1.0 + big_l)

    def closed_dc(self) -> float:
        if self._dc is None:
            return 1.0
        return abs(self._dc / (1.0 + self._dc)) if self._dc != -1.0 else math.inf

    def breaks(self) -> np.ndarray:
        return _poly_break_magnitudes(self.tf)

    @property
    def camera_delay_s(self) -> float:
        return 0.0


class DataLoop:
    """Evaluator of measured data: cubic splines in ``log ω`` of log-magnitude and unwrapped phase."""

    kind = "frequency-response data"

    def __init__(self, data: FrequencyResponse) -> None:
        self.data = data
        from scipy.interpolate import CubicSpline

        lw = np.log(data.omega_rad_s)
        self._lm = CubicSpline(lw, np.log(np.abs(data.response)))
        self._ph = CubicSpline(lw, np.unwrap(np.angle(data.response)))

    @property
    def omega(self) -> np.ndarray:
        return self.data.omega_rad_s

    def loop(self, w: np.ndarray) -> np.ndarray:
        w = np.asarray(w, dtype=float)
        lw = np.log(np.clip(w, self.omega[0], self.omega[-1]))
        out = np.exp(self._lm(lw) + 1j * self._ph(lw))
        # at the data points themselves, the data exactly
        return out

    def dc(self) -> complex | None:
        return None

    def stable(self, pade_order: int = 6) -> bool | None:
        return None

    def closed(self, w: np.ndarray, big_l: np.ndarray | None = None) -> np.ndarray:
        big_l = self.loop(w) if big_l is None else big_l
        return big_l / (1.0 + big_l)

    def closed_dc(self) -> float:
        first = self.data.response[0]
        return abs(first / (1.0 + first))

    def breaks(self) -> np.ndarray:
        return np.array([])

    @property
    def camera_delay_s(self) -> float:
        return 0.0
