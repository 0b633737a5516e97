"""Linear loops of the comparison's controllers, broken at the aileron command.

The PID's loop comes from :mod:`.loop_from_scenario` (exact delays). The
cascade is linear too while its rate and acceleration limits and the servo
limits do not bind; broken at the aileron command (negative feedback)::

    L(jω) = C_r(jω) · [C_b(jω) · e^{−jωτ_c} · G_φ(jω) + e^{−jωτ_g} · G_p(jω)] · e^{−jωT/2}

with ``C_b = k_bank + ki_bank/s``, ``C_r = k_rate + ki_rate/s``, ``G_φ``, ``G_p``
the aircraft + servo from the aileron command to bank and roll rate, ``τ_c``
the camera's effective delay (:func:`.loop_from_scenario.camera_delay`),
``τ_g`` half the gyro's sample period and ``T/2`` the controller's sample
hold: the same delay budget as the PID's analysis. Margins from its
frequency response with python-control (``control.frd`` and
``control.stability_margins``); closed-loop stability is not checked here.
The LQG (a time-varying filter whose gain follows each run's lost and late
frames) and the Smith predictor (its loop holds the model's own delay) get
their margins by experiment only.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..scenario import Scenario

__all__ = ["OMEGA", "FrequencyMargins", "cascade_response", "frequency_margins"]

#: Grid of the stored loop responses (rad/s).
OMEGA = np.logspace(-2, 2.5, 1500)


@dataclass(frozen=True)
class FrequencyMargins:
    """Classical margins of a loop known by its frequency response.

    Attributes
    ----------
    gain_margin_db : dB (``inf`` without a phase crossover)
    phase_margin_deg : deg
    gain_crossover_rad_s : rad/s
    delay_margin_s : s
        Phase margin over the gain crossover frequency.
    """

    gain_margin_db: float
    phase_margin_deg: float
    gain_crossover_rad_s: float
    delay_margin_s: float


def _plant(sc: Scenario, omega: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    from ..build import loop_model

    m = loop_model(sc)
    a, b = np.asarray(m.a, float), np.asarray(m.b, float)
    n = a.shape[0]
    x = np.linalg.solve(
        1j * omega[:, None, None] * np.eye(n) - a, np.broadcast_to(b, (omega.size, n))[..., None]
    )
    return x[:, m.phi_index, 0], x[:, m.p_index, 0]


def cascade_response(sc: Scenario, params: dict, rate_hz: float, omega: np.ndarray = OMEGA) -> np.ndarray:
    """``L(jω)`` of the cascade (see module docstring); ``params`` as in its ControllerSpec (SI)."""
    from .loop_from_scenario import camera_delay

    s = 1j * omega
    g_phi, g_p = _plant(sc, omega)
    c_b = params["k_bank_per_s"] + params["ki_bank_per_s2"] / s
    c_r = params["k_rate_s"] + params["ki_rate"] / s
    tau_c = camera_delay(sc).total_s
    tau_g = 0.5 / sc.gyro.rate_hz if sc.gyro is not None else 0.0
    hold = 0.5 / rate_hz
    return c_r * (c_b * np.exp(-s * tau_c) * g_phi + np.exp(-s * tau_g) * g_p) * np.exp(-s * hold)


def frequency_margins(response: np.ndarray, omega: np.ndarray = OMEGA) -> FrequencyMargins:
    """Gain and phase margins of a frequency response, by ``control.stability_margins``."""
    import control

    gm, pm, _, _, wc, _ = control.stability_margins(control.frd(response, omega))
    gm_db = 20 * np.log10(gm) if np.isfinite(gm) and gm > 0 else np.inf
    delay = np.radians(pm) / wc if np.isfinite(wc) and wc > 0 and np.isfinite(pm) else np.inf
    return FrequencyMargins(float(gm_db), float(pm), float(wc), float(delay))
