"""Frequency response of the camera-in-the-loop bank-hold loop, and its margins.

The loop is broken at the aileron command (the plant input). With the bank
command at zero, an aileron command ``u`` travels

    controller hold  e^{-s T/2}   (zero-order hold at period T: T/2 of effective delay)
    → servo          1/(τa s + 1)
    → plant          φ(s) = Gφ(s) u,  p(s) = Gp(s) u
    → camera         e^{-s τc} φ       (latency + half a frame + exposure mid-point)
    → gyro           e^{-s τg} p       (only when the gyro feeds the derivative)
    → PID            u = kp e + ki ∫e − kd·(rate),  e = −(camera bank)

so the loop transfer function (negative-feedback convention, ``1 + L = 0`` at
instability) is a sum of paths, each a rational part times its own exact delay:

* ``derivative_source = "measurement"``::

      L = (kp + ki/s + kd s/(1 + s/ωf)) · A(s) Gφ(s) · e^{-s(τc + T/2)}

* ``derivative_source = "gyro"``::

      L = (kp + ki/s) · A(s) Gφ(s) · e^{-s(τc + T/2)}
        + kd/(1 + s/ωf) · A(s) Gp(s) · e^{-s(τg + T/2)}

With ``derivative_delay_s = τd > 0`` (a rate taken as a backward difference of
successive camera frames) the measurement case splits into two paths::

      L = [(kp + ki/s) + kd s/(1 + s/ωf) · e^{-s τd}] · A(s) Gφ(s) · e^{-s(τc + T/2)}

(``A(s)`` is the servo lag, ``ωf = 2π·derivative_filter_hz``; the gyro reads the
body roll rate ``p`` and its derivative term uses the same first-order filter as
the controller in :mod:`controllers.pid`.)

Which figure uses which model
-----------------------------
* Exact delays ``e^{-jωτ}`` on a dense log grid (rational parts evaluated with
  :func:`control.frequency_response`), crossovers refined with
  :func:`scipy.optimize.brentq`: gain and phase margins and their crossovers,
  delay margin, disk margin, sensitivity peak, closed-loop bandwidth.
* Padé approximation (:func:`control.pade`, order ``pade_order`` per delay,
  default 6): only the closed-loop stability flag, from the eigenvalues of the
  rational closed loop — a frequency response alone cannot tell whether the
  loop it describes is stable. :func:`rational_loop` returns that model.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import control as ct
import numpy as np
from scipy.optimize import brentq, minimize_scalar

from .loop_sources import DataLoop, FrequencyResponse, SystemLoop, _poly_break_magnitudes, dc_value

__all__ = [
    "LoopParts",
    "LoopMargins",
    "DEFAULT_OMEGA",
    "MIL_F_9490D_GAIN_MARGIN_DB",
    "MIL_F_9490D_PHASE_MARGIN_DEG",
    "open_loop_response",
    "closed_loop_response",
    "rational_loop",
    "closed_loop_stable",
    "margins",
    "FrequencyResponse",
    "loop_evaluator",
    "auto_omega",
    "camera_delay_margin",
]

#: Default analysis grid, rad/s: 1e-3 … 1e3, 1000 points per decade.
DEFAULT_OMEGA: np.ndarray = np.logspace(-3.0, 3.0, 6001)
DEFAULT_OMEGA.setflags(write=False)

#: MIL-F-9490D (1975) §3.1.3.6: ±6 dB gain margin, ±45° phase margin.
MIL_F_9490D_GAIN_MARGIN_DB = 6.0
MIL_F_9490D_PHASE_MARGIN_DEG = 45.0

_DERIVATIVE_SOURCES = ("measurement", "gyro")
#: Frequency treated as DC for the closed-loop reference level, rad/s.
_OMEGA_DC = 1e-6


def _nonneg(name: str, value: float) -> float:
    value = float(value)
    if not math.isfinite(value) or value < 0.0:
        raise ValueError(f"LoopParts.{name} must be a finite number >= 0, got {value!r}")
    return value


@dataclass(frozen=True, eq=False)
class LoopParts:
    """Everything the linear loop analysis needs, as plain numbers and arrays.

    Parameters
    ----------
    plant_a : (n, n) array_like, 1/s
        Plant state matrix.
    plant_b : (n,) array_like
        Plant input column for the aileron (state rate per rad of aileron).
    phi_index, p_index : int
        Positions of bank angle φ (rad) and roll rate p (rad/s) in the state.
    actuator_tau_s : float, s
        First-order servo time constant (0 = no servo lag).
    camera_delay_s : float, s
        Total effective camera delay: processing latency + mean frame hold
        (half a frame period) + exposure mid-point.
    gyro_delay_s : float, s
        Effective gyro delay (half its sample period); used only when
        ``derivative_source == "gyro"``.
    controller_dt_s : float, s
        Controller sample period; its hold adds ``dt/2`` of effective delay.
    kp : float, rad/rad
        Proportional gain, aileron per bank error.
    ki_per_s : float, 1/s
        Integral gain.
    kd_s : float, s
        Derivative gain, aileron per bank rate (derivative on measurement).
    derivative_filter_hz : float, Hz
        Corner of the first-order filter on the rate, ``D(s) = s/(1 + s/ωf)``,
        ``ωf = 2π f``. ``inf`` (no filter) is allowed only for the gyro source.
    derivative_source : {"measurement", "gyro"}
        Rate from the delayed camera bank or from the gyro's roll rate.
    derivative_delay_s : float, s
        Extra effective delay of the derivative term when it differentiates
        the camera reading (``"measurement"`` source only): a backward
        difference of successive frames, ``(φ_k − φ_{k−1})/T``, is
        ``e^{-sT/2}·(2/T)·sinh(sT/2)`` ≈ ``s·e^{-sT/2}``, half a frame period
        later than the proportional term. Default 0.
    """

    plant_a: np.ndarray
    plant_b: np.ndarray
    phi_index: int
    p_index: int
    actuator_tau_s: float = 0.0
    camera_delay_s: float = 0.0
    gyro_delay_s: float = 0.0
    controller_dt_s: float = 0.0
    kp: float = 1.0
    ki_per_s: float = 0.0
    kd_s: float = 0.0
    derivative_filter_hz: float = 5.0
    derivative_source: str = "measurement"
    derivative_delay_s: float = 0.0

    def __post_init__(self) -> None:
        a = np.array(self.plant_a, dtype=float)
        b = np.array(self.plant_b, dtype=float).reshape(-1)
        if a.ndim != 2 or a.shape[0] != a.shape[1] or a.shape[0] == 0:
            raise ValueError(f"LoopParts.plant_a must be square (n, n), got shape {a.shape}")
        n = a.shape[0]
        if b.shape != (n,):
            raise ValueError(f"LoopParts.plant_b must have {n} entries, got shape {b.shape}")
        if not (np.all(np.isfinite(a)) and np.all(np.isfinite(b))):
            raise ValueError("LoopParts.plant_a and plant_b must be finite")
        a.setflags(write=False)
        b.setflags(write=False)
        object.__setattr__(self, "plant_a", a)
        object.__setattr__(self, "plant_b", b)
        for name in ("phi_index", "p_index"):
            idx = getattr(self, name)
            if int(idx) != idx or not 0 <= int(idx) < n:
                raise ValueError(f"LoopParts.{name} must be an integer in [0, {n - 1}], got {idx!r}")
            object.__setattr__(self, name, int(idx))
        for name in (
            "actuator_tau_s",
            "camera_delay_s",
            "gyro_delay_s",
            "controller_dt_s",
            "derivative_delay_s",
        ):
            object.__setattr__(self, name, _nonneg(name, getattr(self, name)))
        for name in ("kp", "ki_per_s", "kd_s"):
            value = float(getattr(self, name))
            if not math.isfinite(value):
                raise ValueError(f"LoopParts.{name} must be finite, got {value!r}")
            object.__setattr__(self, name, value)
        if self.derivative_source not in _DERIVATIVE_SOURCES:
            raise ValueError(
                f"LoopParts.derivative_source must be one of {_DERIVATIVE_SOURCES}, "
                f"got {self.derivative_source!r}"
            )
        f = float(self.derivative_filter_hz)
        if not f > 0.0 or (math.isinf(f) and self.derivative_source != "gyro"):
            raise ValueError(
                "LoopParts.derivative_filter_hz must be > 0 and finite "
                f"(inf allowed only for the gyro source), got {f!r}"
            )
        object.__setattr__(self, "derivative_filter_hz", f)

    @classmethod
    def from_plant(cls, plant: Any, **kwargs: Any) -> LoopParts:
        """Build from any object with ``a``, ``b_control`` (aileron in column 0),
        ``phi_index`` and ``p_index`` (e.g. :class:`sim.plant.LinearPlant`)."""
        b = np.asarray(plant.b_control, dtype=float)
        b_ail = b[:, 0] if b.ndim == 2 else b
        return cls(
            plant_a=plant.a,
            plant_b=b_ail,
            phi_index=plant.phi_index,
            p_index=plant.p_index,
            **kwargs,
        )


# ---------------------------------------------------------------------------
# Model assembly
# ---------------------------------------------------------------------------


@dataclass(frozen=True)
class _Path:
    rational: ct.TransferFunction  # SISO, aileron command → controller output
    delay_s: float
    camera: bool = True  # through the camera reading (False: the gyro path)


def _plant_output(parts: LoopParts, index: int) -> ct.StateSpace:
    n = parts.plant_a.shape[0]
    c = np.zeros((1, n))
    c[0, index] = 1.0
    return ct.ss(parts.plant_a, parts.plant_b.reshape(n, 1), c, 0.0)


def _actuator(parts: LoopParts) -> ct.TransferFunction:
    if parts.actuator_tau_s > 0.0:
        return ct.tf([1.0], [parts.actuator_tau_s, 1.0])
    return ct.tf([1.0], [1.0])


def _split_derivative(parts: LoopParts) -> bool:
    """Whether the camera-derivative term needs its own path (its own delay)."""
    return parts.derivative_source == "measurement" and parts.kd_s != 0.0 and parts.derivative_delay_s > 0.0


def _camera_derivative(parts: LoopParts) -> ct.TransferFunction:
    wf = 2.0 * math.pi * parts.derivative_filter_hz
    return ct.tf([parts.kd_s, 0.0], [1.0 / wf, 1.0])


def _controller_blocks(parts: LoopParts) -> tuple[ct.TransferFunction, ct.TransferFunction]:
    """(controller acting on the camera bank, controller acting on the gyro rate).

    When the camera-derivative term has its own delay (:func:`_split_derivative`)
    it is left out of the first block; :func:`_camera_derivative` gives it.
    """
    wf = 2.0 * math.pi * parts.derivative_filter_hz
    lowpass = ct.tf([1.0], [1.0]) if math.isinf(wf) else ct.tf([1.0], [1.0 / wf, 1.0])
    cam = ct.tf([parts.kp], [1.0])
    if parts.ki_per_s != 0.0:
        cam = cam + ct.tf([parts.ki_per_s], [1.0, 0.0])
    gyro = ct.tf([0.0], [1.0])
    if parts.kd_s != 0.0:
        if parts.derivative_source == "measurement":
            if not _split_derivative(parts):
                cam = cam + _camera_derivative(parts)
        else:
            gyro = parts.kd_s * lowpass
    return cam, gyro


class _Evaluator:
    """Rational parts of the loop, built once, evaluated with exact delays.

    The rational parts are low-order transfer functions (plant ≤ a few states,
    servo, PID), so :class:`control.TransferFunction` evaluation (vectorised
    polynomial evaluation) is accurate and far faster than a per-frequency
    state-space solve.
    """

    def __init__(self, parts: LoopParts) -> None:
        self.parts = parts
        cam_c, gyro_c = _controller_blocks(parts)
        act = _actuator(parts)
        hold = 0.5 * parts.controller_dt_s
        g_phi = ct.tf(_plant_output(parts, parts.phi_index))
        self.paths = [_Path(cam_c * act * g_phi, parts.camera_delay_s + hold)]
        if _split_derivative(parts):
            self.paths.append(
                _Path(
                    _camera_derivative(parts) * act * g_phi,
                    parts.camera_delay_s + parts.derivative_delay_s + hold,
                )
            )
        if parts.derivative_source == "gyro" and parts.kd_s != 0.0:
            g_p = ct.tf(_plant_output(parts, parts.p_index))
            self.paths.append(_Path(gyro_c * act * g_p, parts.gyro_delay_s + hold, camera=False))
        ref = ct.tf([parts.kp], [1.0])
        if parts.ki_per_s != 0.0:
            ref = ref + ct.tf([parts.ki_per_s], [1.0, 0.0])
        self.forward = _Path(ref * act * g_phi, hold)

    def loop(self, w: np.ndarray) -> np.ndarray:
        cam, other = self.split(w)
        return cam + other

    def split(self, w: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """``L`` as (paths through the camera, other paths), exact delays."""
        cam = np.zeros(w.shape, dtype=complex)
        other = np.zeros(w.shape, dtype=complex)
        for path in self.paths:
            term = _freq(path.rational, w) * np.exp(-1j * w * path.delay_s)
            if path.camera:
                cam += term
            else:
                other += term
        return cam, other

    def closed(self, w: np.ndarray, big_l: np.ndarray | None = None) -> np.ndarray:
        if big_l is None:
            big_l = self.loop(w)
        fwd = _freq(self.forward.rational, w) * np.exp(-1j * w * self.forward.delay_s)
        return fwd / (1.0 + big_l)

    kind = "model with exact delays"

    def dc(self) -> complex | None:
        """``L(0)`` (every delay is 1 at DC), ``None`` with an integrator in the loop."""
        total = 0.0 + 0.0j
        for path in self.paths:
            v = dc_value(path.rational)
            if v is None:
                return None
            total += v
        return total

    def stable(self, pade_order: int = 6) -> bool:
        """Closed-loop stability from the eigenvalues of the Padé closed loop."""
        return closed_loop_stable(self.parts, pade_order)

    def closed_dc(self) -> float:
        return abs(complex(self.closed(np.array([_OMEGA_DC]))[0]))

    def breaks(self) -> np.ndarray:
        """Magnitudes of the non-zero poles and zeros of the rational parts, rad/s."""
        return np.concatenate([_poly_break_magnitudes(p.rational) for p in self.paths] or [np.array([])])

    @property
    def camera_delay_s(self) -> float:
        return self.parts.camera_delay_s


def _freq(sys: ct.TransferFunction, omega: np.ndarray) -> np.ndarray:
    return np.asarray(ct.frequency_response(sys, omega).complex, dtype=complex).reshape(-1)


def _as_omega(omega: Any) -> np.ndarray:
    w = np.atleast_1d(np.asarray(omega, dtype=float))
    if w.ndim != 1 or not np.all(np.isfinite(w)) or np.any(w <= 0.0):
        raise ValueError("omega must be a 1-D array of finite frequencies > 0 (rad/s)")
    return w


def open_loop_response(parts: LoopParts, omega: Any) -> np.ndarray:
    """Loop transfer function ``L(jω)`` broken at the aileron command, exact delays.

    Parameters
    ----------
    parts : LoopParts
        The loop.
    omega : array_like, rad/s
        Frequencies (> 0).

    Returns
    -------
    ndarray of complex
        ``L(jω)``, same length as ``omega``, negative-feedback convention.
    """
    return _Evaluator(parts).loop(_as_omega(omega))


def closed_loop_response(parts: LoopParts, omega: Any) -> np.ndarray:
    """Bank-command-to-true-bank frequency response, exact delays.

    The command enters the proportional and integral terms only (the derivative
    acts on the measurement), so ``T(jω) = (kp + ki/jω)·e^{-jωT/2}·A·Gφ / (1 + L)``.

    Parameters
    ----------
    parts : LoopParts
        The loop.
    omega : array_like, rad/s
        Frequencies (> 0).

    Returns
    -------
    ndarray of complex
        ``φ/φ_cmd (jω)``. Meaningful only if the closed loop is stable.
    """
    return _Evaluator(parts).closed(_as_omega(omega))


def rational_loop(parts: LoopParts, pade_order: int = 6) -> ct.StateSpace:
    """Rational model of ``L(s)``: every delay replaced by a Padé approximant.

    Parameters
    ----------
    parts : LoopParts
        The loop.
    pade_order : int
        Order of :func:`control.pade` used for each delay (numerator and
        denominator degree).

    Returns
    -------
    control.StateSpace
        SISO loop, aileron command → controller output (negative feedback).
        Built as one chain (hold, servo, plant, sensors, controller), so the
        plant dynamics appear once even when two sensor paths are summed.
    """

    def delay(tau: float) -> ct.StateSpace:
        # Below 1 µs a delay is invisible at any frequency analysed, and its scaled
        # realisation (poles ~ n/τ) would swamp the eigenvalues.
        if tau < 1e-6:
            return ct.ss([], [], [], [[1.0]])
        # Realise the Padé approximant of a 1 s delay, then scale time: G(sτ) has the
        # realisation (A/τ, B/τ, C, D). Realising ct.pade(τ, n) directly gives
        # coefficients up to ~(n/τ)^n and a badly conditioned model for small τ.
        unit = ct.ss(ct.tf(*ct.pade(1.0, pade_order)))
        return ct.ss(unit.A / tau, unit.B / tau, unit.C, unit.D)

    cam_c, gyro_c = _controller_blocks(parts)
    hold = delay(0.5 * parts.controller_dt_s)
    front = ct.ss(_actuator(parts)) * hold
    n = parts.plant_a.shape[0]
    if parts.derivative_source == "gyro" and parts.kd_s != 0.0:
        c = np.zeros((2, n))
        c[0, parts.phi_index] = 1.0
        c[1, parts.p_index] = 1.0
        plant = ct.ss(parts.plant_a, parts.plant_b.reshape(n, 1), c, np.zeros((2, 1)))
        sensors = ct.append(delay(parts.camera_delay_s), delay(parts.gyro_delay_s))
        ctrl = ct.append(ct.ss(cam_c), ct.ss(gyro_c))
        summer = ct.ss([], [], [], [[1.0, 1.0]])
        return summer * ctrl * sensors * plant * front
    g_phi = _plant_output(parts, parts.phi_index)
    ctrl_cam = ct.ss(cam_c)
    if _split_derivative(parts):
        ctrl_cam = ctrl_cam + ct.ss(_camera_derivative(parts)) * delay(parts.derivative_delay_s)
    return ctrl_cam * delay(parts.camera_delay_s) * g_phi * front


def closed_loop_stable(parts: LoopParts, pade_order: int = 6) -> bool:
    """Closed-loop stability (unit negative feedback) from the eigenvalues of :func:`rational_loop`."""
    closed = ct.feedback(rational_loop(parts, pade_order), 1.0, sign=-1)
    poles = np.linalg.eigvals(closed.A) if closed.A.size else np.array([])
    return bool(np.all(poles.real < 0.0))


# ---------------------------------------------------------------------------
# Margins
# ---------------------------------------------------------------------------


@dataclass(frozen=True)
class LoopMargins:
    """Stability margins of the loop broken at the aileron command (or any plant input).

    Attributes
    ----------
    gain_margin_db : float, dB
        Classical gain margin at the phase crossover whose margin is smallest
        in magnitude (python-control's choice); negative means a gain
        *reduction* reaches instability. ``inf`` if the phase never crosses −180°.
    phase_crossover_rad_s : float, rad/s
        Frequency of that crossover (``nan`` if none; 0 when ``L(0)`` is real
        and negative: an odd number of unstable poles and no integrator).
    upper_gain_margin_db, lower_gain_margin_db : float, dB
        Smallest gain increase (≥ 0 dB, ``inf`` if none) and smallest gain
        reduction (≤ 0 dB, ``-inf`` if none) that put ``L`` through −1,
        the crossover at ω = 0 included.
    phase_margin_deg : float, deg
        Phase margin at the gain crossover whose margin is smallest in
        magnitude, in (−180, 180]. ``inf`` if ``|L|`` never crosses 1.
    gain_crossover_rad_s : float, rad/s
        Frequency of that crossover (``nan`` if none).
    delay_margin_s : float, s
        Smallest extra pure delay that makes ``L`` touch −1: min over gain
        crossovers of (phase margin wrapped to [0, 2π)) / ωc (``inf`` if no
        crossover, 0 if the loop is already unstable).
    delay_margin_camera_multiple : float
        ``delay_margin_s / camera_delay_s`` (``inf`` if no camera delay).
    disk_alpha : float
        Balanced (σ = 0) disk margin α = 1 / ‖(S − T)/2‖∞.
    disk_gain_margin_db : float, dB
        Gain variation allowed by the disk, ``20 log10((2 + α)/(2 − α))``
        (the same in dB downwards); ``inf`` if α ≥ 2.
    disk_phase_margin_deg : float, deg
        Phase variation allowed by the disk, ``2 atan(α/2)``.
    disk_frequency_rad_s : float, rad/s
        Frequency where ``|S − T|/2`` peaks.
    sensitivity_peak_db : float, dB
        ``max |S(jω)|`` on the grid (refined).
    bandwidth_rad_s : float, rad/s
        Lowest frequency where the command-to-output response falls 3 dB below
        its DC level (``inf`` if it never does on the grid).
    closed_loop_stable : bool or None
        From the closed-loop poles (Padé closed loop for delays); ``None``
        when the loop is given as frequency-response data (data cannot tell).
    pade_order : int
        Padé order used for the stability flag.
    phase_crossovers_rad_s, gain_crossovers_rad_s : tuple of float, rad/s
        Every crossover found (ω = 0 first when it is a phase crossover).
    phase_crossover_margins_db : tuple of float, dB
        Gain margin at each phase crossover (same order).
    gain_crossover_margins_deg, gain_crossover_delay_margins_s : tuple of float
        Phase margin (deg) and delay margin (s) at each gain crossover.
    stability_margin : float
        Smallest distance from ``L(jω)`` to −1, ``min |1 + L|`` (= 1/‖S‖∞).
    stability_margin_rad_s : float, rad/s
        Frequency where it is reached.
    omega_range_rad_s : (float, float), rad/s
        Frequency range searched.
    source : str
        Kind of loop analysed (model with exact delays, python-control system,
        frequency-response data).
    notes : tuple of str
        Cautions about this result (e.g. a crossover may lie outside the data).
    camera_delay_margin_s : float, s
        Smallest extra delay of the camera reading alone that makes ``L``
        touch −1 (:func:`camera_delay_margin`); larger than the delay margin
        at the aileron command when the derivative comes from the gyro, equal
        otherwise. ``nan`` for loops not given as :class:`LoopParts`.
    camera_delay_margin_rad_s : float, rad/s
        Frequency where it is reached.
    """

    gain_margin_db: float
    phase_crossover_rad_s: float
    upper_gain_margin_db: float
    lower_gain_margin_db: float
    phase_margin_deg: float
    gain_crossover_rad_s: float
    delay_margin_s: float
    delay_margin_camera_multiple: float
    disk_alpha: float
    disk_gain_margin_db: float
    disk_phase_margin_deg: float
    disk_frequency_rad_s: float
    sensitivity_peak_db: float
    bandwidth_rad_s: float
    closed_loop_stable: bool | None
    pade_order: int
    phase_crossovers_rad_s: tuple[float, ...] = field(default=())
    gain_crossovers_rad_s: tuple[float, ...] = field(default=())
    phase_crossover_margins_db: tuple[float, ...] = field(default=())
    gain_crossover_margins_deg: tuple[float, ...] = field(default=())
    gain_crossover_delay_margins_s: tuple[float, ...] = field(default=())
    stability_margin: float = math.nan
    stability_margin_rad_s: float = math.nan
    omega_range_rad_s: tuple[float, float] = (math.nan, math.nan)
    source: str = "model with exact delays"
    notes: tuple[str, ...] = field(default=())
    camera_delay_margin_s: float = math.nan
    camera_delay_margin_rad_s: float = math.nan

    @property
    def gain_margin_ok(self) -> bool:
        """MIL-F-9490D §3.1.3.6: at least 6 dB of gain margin both ways.

        With frequency-response data (stability unknown) this judges the
        margins alone, assuming the nominal closed loop is stable.
        """
        return (
            self.closed_loop_stable is not False
            and self.upper_gain_margin_db >= MIL_F_9490D_GAIN_MARGIN_DB
            and self.lower_gain_margin_db <= -MIL_F_9490D_GAIN_MARGIN_DB
        )

    @property
    def phase_margin_ok(self) -> bool:
        """MIL-F-9490D §3.1.3.6: at least 45° of phase margin."""
        return self.closed_loop_stable is not False and self.phase_margin_deg >= MIL_F_9490D_PHASE_MARGIN_DEG

    @property
    def meets_mil_f_9490d(self) -> bool:
        """Both MIL-F-9490D §3.1.3.6 margin requirements met."""
        return self.gain_margin_ok and self.phase_margin_ok


def _brackets(values: np.ndarray) -> np.ndarray:
    """Indices i with a sign change (or exact zero) between values[i] and values[i+1]."""
    s = np.sign(values)
    return np.nonzero((s[:-1] * s[1:] < 0) | (s[:-1] == 0))[0]


def _roots(fun: Any, w: np.ndarray, values: np.ndarray) -> list[float]:
    out = []
    for i in _brackets(values):
        if values[i] == 0.0:
            out.append(float(w[i]))
        else:
            out.append(float(brentq(fun, w[i], w[i + 1], xtol=1e-14, rtol=1e-13)))
    return out


def _refine_max(fun: Any, w: np.ndarray, values: np.ndarray) -> tuple[float, float]:
    """Maximum of ``fun`` (scalar ω → float), refined around the grid maximum."""
    k = int(np.argmax(values))
    lo, hi = w[max(k - 1, 0)], w[min(k + 1, w.size - 1)]
    best_w, best_v = float(w[k]), float(values[k])
    if hi > lo:
        res = minimize_scalar(
            lambda x: -fun(math.exp(x)),
            bounds=(math.log(lo), math.log(hi)),
            method="bounded",
            options={"xatol": 1e-10},
        )
        if -res.fun > best_v:
            best_w, best_v = math.exp(res.x), float(-res.fun)
    return best_w, best_v


def loop_evaluator(loop: Any) -> Any:
    """The evaluator of a loop: :class:`LoopParts`, python-control system or data.

    Parameters
    ----------
    loop : LoopParts, control.TransferFunction, control.StateSpace,
        control.FrequencyResponseData or FrequencyResponse

    Raises
    ------
    ValueError
        For a MIMO, discrete-time, improper or ill-posed system.
    TypeError
        For anything else.
    """
    if isinstance(loop, LoopParts):
        return _Evaluator(loop)
    if isinstance(loop, FrequencyResponse):
        return DataLoop(loop)
    if isinstance(loop, ct.FrequencyResponseData):
        return DataLoop(FrequencyResponse.from_frd(loop))
    if isinstance(loop, (ct.TransferFunction, ct.StateSpace)):
        return SystemLoop(loop)
    raise TypeError(
        "margins() takes LoopParts, a python-control TransferFunction/StateSpace/"
        f"FrequencyResponseData or a FrequencyResponse, got {type(loop).__name__}"
    )


#: Frequency grid density, points per decade.
_PER_DECADE = 1000
#: Widest automatic grid, rad/s.
_GRID_LIMITS = (1e-9, 1e9)


def _power_law_crossover(ev: Any, w0: float, w1: float) -> float | None:
    """Where ``|L|`` reaches 1 extrapolating its power law through ``w0``, ``w1`` (rad/s)."""
    m0, m1 = np.abs(ev.loop(np.array([w0, w1])))
    if not (m0 > 0.0 and m1 > 0.0):
        return None
    k = math.log(m1 / m0) / math.log(w1 / w0)
    if abs(k) < 0.5:  # flat: |L| does not pass 1 out there
        return None
    return math.exp(math.log(w1) - math.log(m1) / k)


def auto_omega(ev: Any) -> np.ndarray:
    """Frequency grid for a rational loop (with or without delays), rad/s.

    From ``min(1e-3, 0.1·|slowest pole or zero|)`` to ``max(1e3, 10·|fastest|)``,
    widened while ``|L|``'s low- or high-frequency power law (the slope it has
    beyond every pole and zero) still predicts a gain crossover outside
    (issue: a crossover below the old fixed 1e-3 rad/s vanished silently);
    1000 points per decade.
    """
    br = np.asarray(ev.breaks())
    br = br[np.isfinite(br) & (br > 0)]
    lo = min(1e-3, 0.1 * float(br.min())) if br.size else 1e-3
    hi = max(1e3, 10.0 * float(br.max())) if br.size else 1e3
    lo, hi = max(lo, _GRID_LIMITS[0]), min(hi, _GRID_LIMITS[1])
    for _ in range(4):
        x = _power_law_crossover(ev, lo * 10.0**-0.5, lo)
        if x is None or x >= lo or lo <= _GRID_LIMITS[0]:
            break
        lo = max(0.1 * x, _GRID_LIMITS[0])
    for _ in range(4):
        if abs(ev.loop(np.array([hi]))[0]) < 1.0:
            break
        x = _power_law_crossover(ev, hi, hi * 10.0**0.5)
        if x is None or x <= hi or hi >= _GRID_LIMITS[1]:
            break
        hi = min(10.0 * x, _GRID_LIMITS[1])
    n = int(math.ceil(math.log10(hi / lo) * _PER_DECADE)) + 1
    return np.logspace(math.log10(lo), math.log10(hi), n)


def camera_delay_margin(parts: LoopParts, omega: Any = None) -> tuple[float, float]:
    """Smallest extra camera delay that makes the loop touch −1, and its frequency.

    With the loop split into the camera paths ``C(jω)`` and the rest ``G(jω)``
    (the gyro derivative), an extra camera delay ``τ`` gives
    ``L = C e^{-jωτ} + G``; it passes through −1 where ``|C| = |1 + G|`` and
    ``τ = (∠C − ∠(−1 − G)) / ω`` (wrapped to [0, 2π/ω)). Without a gyro path
    this is the delay margin at the aileron command.

    Parameters
    ----------
    parts : LoopParts
    omega : array_like, rad/s, optional
        Grid (default :func:`auto_omega`).

    Returns
    -------
    (float, float)
        Margin (s; ``inf`` if ``|C|`` never equals ``|1 + G|``) and the frequency
        where it is reached (rad/s; ``nan`` if none). Meaningful for a stable
        nominal loop.
    """
    ev = _Evaluator(parts)
    w = auto_omega(ev) if omega is None else np.unique(_as_omega(omega))

    def gap(x: float) -> float:
        c, g = ev.split(np.array([x]))
        return math.log(max(abs(c[0]), 1e-300)) - math.log(max(abs(1.0 + g[0]), 1e-300))

    c, g = ev.split(w)
    vals = np.log(np.maximum(np.abs(c), 1e-300)) - np.log(np.maximum(np.abs(1.0 + g), 1e-300))
    best, best_w = math.inf, math.nan
    for x in _roots(gap, w, vals):
        cx, gx = ev.split(np.array([x]))
        ang = (np.angle(cx[0]) - np.angle(-1.0 - gx[0])) % (2.0 * math.pi)
        if ang / x < best:
            best, best_w = float(ang / x), float(x)
    return best, best_w


def margins(loop: Any, omega: Any = None, pade_order: int = 6) -> LoopMargins:
    """Classical, delay, disk and stability margins, every crossover, and the bandwidth.

    Parameters
    ----------
    loop : LoopParts, python-control system, or frequency-response data
        The loop broken at the plant input (negative feedback): a
        :class:`LoopParts` (exact delays), a continuous-time SISO
        ``TransferFunction``/``StateSpace`` (biproper allowed), or
        ``FrequencyResponseData``/:class:`FrequencyResponse` (margins from the
        data, interpolated in ``log ω``; closed-loop stability unknown).
    omega : array_like, rad/s, optional
        Analysis grid. Default for models: :func:`auto_omega` (from the loop's
        own poles and zeros); for data: the data's frequencies. Crossovers are
        bracketed on the grid and refined with :func:`scipy.optimize.brentq`.
    pade_order : int
        Padé order per delay for the closed-loop stability flag only.

    Returns
    -------
    LoopMargins

    Raises
    ------
    ValueError
        If the loop has no gain (``L ≡ 0``), or if ``|L|`` is still ≥ 1 at the
        top of a given ``omega`` (a crossover may lie beyond it).
    """
    ev = loop_evaluator(loop)
    data = isinstance(ev, DataLoop)
    notes: list[str] = []
    if omega is None:
        w = ev.omega if data else auto_omega(ev)
    else:
        w = np.unique(_as_omega(omega))
        if data:
            w = w[(w >= ev.omega[0]) & (w <= ev.omega[-1])]
    if w.size < 3:
        raise ValueError("omega needs at least 3 distinct frequencies")

    def loop1(x: float) -> complex:
        return complex(ev.loop(np.array([x]))[0])

    big_l = ev.loop(w)
    mag = np.abs(big_l)
    if not np.any(mag > 0.0):
        raise ValueError("the loop has no gain: L(jω) = 0 at every frequency")
    if abs(big_l[-1]) >= 1.0:
        tail = _power_law_crossover(ev, w[-2], w[-1]) if not data else None
        if data:
            notes.append(
                f"|L| is still ≥ 1 at the highest frequency of the data ({w[-1]:.3g} rad/s): "
                "a gain crossover may lie above it; measure to higher frequency."
            )
        elif tail is not None and tail > w[-1]:
            raise ValueError(
                f"|L| is still >= 1 at the top of the frequency grid ({w[-1]:.3g} rad/s): "
                "a gain crossover lies above it; widen the frequency range analysed"
            )
    if data and abs(big_l[0]) < 1.0:
        notes.append(
            f"|L| is below 1 at the lowest frequency of the data ({w[0]:.3g} rad/s): "
            "a gain crossover may lie below it."
        )
    mag_db = np.log(np.where(mag > 0.0, mag, np.finfo(float).tiny))

    # Phase crossovers: L real and negative (Im L changes sign with Re L < 0) …
    wpc_all = [x for x in _roots(lambda x: loop1(x).imag, w, big_l.imag) if loop1(x).real < 0.0]
    gm_all = [-20.0 * math.log10(abs(loop1(x))) for x in wpc_all]
    # … and at ω = 0 when L(0) is finite, real and negative: Im L need not change sign
    # near 0, so the grid cannot see it (python-control's phase_crossover_frequencies
    # lists ω = 0 the same way).
    l0 = ev.dc()
    if l0 is not None and l0.real < 0.0 and abs(l0.imag) <= 1e-9 * abs(l0):
        wpc_all.insert(0, 0.0)
        gm_all.insert(0, -20.0 * math.log10(abs(l0)))
    if gm_all:
        k = int(np.argmin(np.abs(gm_all)))
        gain_margin_db, wpc = gm_all[k], wpc_all[k]
    else:
        gain_margin_db, wpc = math.inf, math.nan
    upper = min([g for g in gm_all if g >= 0.0], default=math.inf)
    lower = max([g for g in gm_all if g < 0.0], default=-math.inf)

    # Gain crossovers: |L| = 1.
    wgc_all = _roots(lambda x: math.log(max(abs(loop1(x)), np.finfo(float).tiny)), w, mag_db)
    pm_all = []
    dm_all = []
    for x in wgc_all:
        ang = math.degrees(np.angle(-loop1(x)))  # = ∠L + 180°, wrapped to (−180, 180]
        pm_all.append(ang)
        dm_all.append(math.radians(ang % 360.0) / x)
    if pm_all:
        k = int(np.argmin(np.abs(pm_all)))
        phase_margin_deg, wgc = pm_all[k], wgc_all[k]
    else:
        phase_margin_deg, wgc = math.inf, math.nan

    stable = ev.stable(pade_order)
    if stable is False:
        delay_margin = 0.0
    else:
        delay_margin = min(dm_all, default=math.inf)
    cam = ev.camera_delay_s
    dm_multiple = delay_margin / cam if cam > 0.0 else math.inf

    # Balanced disk margin.
    def half_s_minus_t(x: float) -> float:
        lx = loop1(x)
        return abs((1.0 - lx) / (2.0 * (1.0 + lx)))

    wdm, peak = _refine_max(half_s_minus_t, w, np.abs((1.0 - big_l) / (2.0 * (1.0 + big_l))))
    alpha = 1.0 / peak
    disk_gm = 20.0 * math.log10((2.0 + alpha) / (2.0 - alpha)) if alpha < 2.0 else math.inf
    disk_pm = math.degrees(2.0 * math.atan(alpha / 2.0))

    # Stability margin: smallest |1 + L| (the sensitivity peak's reciprocal).
    wsm, ms = _refine_max(lambda x: abs(1.0 / (1.0 + loop1(x))), w, np.abs(1.0 / (1.0 + big_l)))

    # Closed-loop bandwidth.
    t_dc = ev.closed_dc()
    t_mag = np.abs(ev.closed(w, big_l))
    level = t_dc / math.sqrt(2.0)
    below = np.nonzero(t_mag < level)[0]
    if t_dc == 0.0 or not math.isfinite(t_dc) or below.size == 0:
        bandwidth = math.inf if t_dc > 0.0 else math.nan
    elif below[0] == 0:
        bandwidth = float(w[0])
    else:
        i = int(below[0])
        bandwidth = float(
            brentq(
                lambda x: abs(complex(ev.closed(np.array([x]))[0])) - level,
                w[i - 1],
                w[i],
                xtol=1e-14,
                rtol=1e-13,
            )
        )
    cam_dm = cam_w = math.nan
    if isinstance(ev, _Evaluator):
        cam_dm, cam_w = camera_delay_margin(ev.parts, w) if stable else (0.0, math.nan)
    if data:
        notes.append(
            "Frequency-response data: closed-loop stability cannot be read from the data; "
            "the margins assume the nominal closed loop is stable."
        )

    return LoopMargins(
        gain_margin_db=float(gain_margin_db),
        phase_crossover_rad_s=float(wpc),
        upper_gain_margin_db=float(upper),
        lower_gain_margin_db=float(lower),
        phase_margin_deg=float(phase_margin_deg),
        gain_crossover_rad_s=float(wgc),
        delay_margin_s=float(delay_margin),
        delay_margin_camera_multiple=float(dm_multiple),
        disk_alpha=float(alpha),
        disk_gain_margin_db=float(disk_gm),
        disk_phase_margin_deg=float(disk_pm),
        disk_frequency_rad_s=float(wdm),
        sensitivity_peak_db=float(20.0 * math.log10(ms)),
        bandwidth_rad_s=float(bandwidth),
        closed_loop_stable=stable,
        pade_order=int(pade_order),
        phase_crossovers_rad_s=tuple(float(x) for x in wpc_all),
        gain_crossovers_rad_s=tuple(float(x) for x in wgc_all),
        phase_crossover_margins_db=tuple(float(g) for g in gm_all),
        gain_crossover_margins_deg=tuple(float(p) for p in pm_all),
        gain_crossover_delay_margins_s=tuple(float(d) for d in dm_all),
        stability_margin=float(1.0 / ms),
        stability_margin_rad_s=float(wsm),
        omega_range_rad_s=(float(w[0]), float(w[-1])),
        source=ev.kind,
        notes=tuple(notes),
        camera_delay_margin_s=float(cam_dm),
        camera_delay_margin_rad_s=float(cam_w),
    )
