"""The Smith predictor's loop (:mod:`controllers.smith`; O. J. M. Smith, 1957).

The predictor feeds its PID the corrected bank ``y + ŷ − ŷ(t − τ_m)``, where
``ŷ`` is its model's bank driven by its own command. With ``C`` the PID at
``z = e^{jωT}``, ``G`` the aircraft + servo, ``G_m`` the controller's model,
``τ`` the camera's effective delay, ``τ_m`` the controller's delay estimate
and ``H`` the zero-order hold, two loops matter:

* **broken at the aileron command** (where the simulator's margin experiment
  perturbs the loop: the aircraft sees the perturbed aileron, the model the
  controller's own command)::

      L = −C·G·H·e^{−sτ} / (1 − C·G_m·H·(1 − e^{−sτ_m}))

  Its delay margin is the extra delay **in the aircraft's path** that the
  loop tolerates (an error in the plant's delay the model does not know
  about), and its gain margin an error in the aircraft's gain. These are the
  figures the comparison reports, beside the empirical ones.
* **as the PID sees it** (broken before the model taps the command)::

      L_p = −C·(G·e^{−sτ} + G_m·(1 − e^{−sτ_m}))·H

  With a perfect model (``G_m = G``, ``τ_m = τ``) this is ``−C·G·H``: the
  delay is gone, and its margins are those of the PID on the undelayed
  aircraft. Its delay margin is a delay of the whole loop, model included,
  which no physical fault produces; it is reported as ``extra`` figures
  (``predictor_*``) to show what the predictor buys. The aileron-break
  delay margin is checked against a second computation: the smallest ``Δ``
  at which ``L_p`` with ``τ → τ + Δ`` reaches −1 (``|B| = |1 + A|``, ``A`` the
  model path, ``B`` the aircraft path), ``plant_delay_margin_s``.

``C``, ``G_m`` and ``τ_m`` are taken from the controller built for the
scenario (:func:`rollrig.sim.build.make_controller`): its PID settings, its
model, and its fixed delay estimate (with ``delay_from_age`` the reading's
mean age at the ticks). The PID is the discrete law of
:mod:`controllers.pid` as the predictor drives it (a corrected reading at
every tick, so the derivative is a one-tick backward difference through the
first-order filter). Approximations: the model's delay is the controller's
linear interpolation in its stored history, taken as an exact delay here;
frame sampling is the camera's mean delay; limits do not bind.
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np

from ..scenario import Scenario
from .compare_loops import OMEGA, ControllerLoop, FrequencyMargins, frequency_margins

__all__ = ["pid_system", "smith_loop", "smith_margins", "path_delay_margin"]


def pid_system(pid, tick_s: float, gyro: bool):
    """The PID of :mod:`controllers.pid` at one reading per tick, as a discrete ``control.StateSpace``.

    Inputs ``[bank reading, gyro rate]``, output the aileron command (bank
    command zero). States: the integral, the previous reading and the
    filtered rate. ``gyro``: the derivative acts on the gyro rate.
    """
    import control

    t = tick_s
    kp, ki, kd = float(pid.kp), float(pid.ki_per_s), float(pid.kd_s)
    alpha = float(-np.expm1(-2.0 * np.pi * float(pid.derivative_filter_hz) * t))
    if gyro:
        a = [[1.0, 0.0, 0.0], [0.0, 0.0, 0.0], [0.0, 0.0, 1.0 - alpha]]
        b = [[-ki * t, 0.0], [1.0, 0.0], [0.0, alpha]]
        c = [[1.0, 0.0, -kd * (1.0 - alpha)]]
        d = [[-kp, -kd * alpha]]
    else:
        a = [[1.0, 0.0, 0.0], [0.0, 0.0, 0.0], [0.0, -alpha / t, 1.0 - alpha]]
        b = [[-ki * t, 0.0], [1.0, 0.0], [alpha / t, 0.0]]
        c = [[1.0, kd * alpha / t, -kd * (1.0 - alpha)]]
        d = [[-kp - kd * alpha / t, 0.0]]
    return control.ss(a, b, c, d, t)


def smith_loop(sc: Scenario, *, delay_s: float | None = None) -> ControllerLoop:
    """The Smith predictor's loop; ``delay_s`` overrides the controller's delay estimate."""
    from ..build import loop_model, make_controller
    from .compare_loops import _gyro_delay
    from .loop_from_scenario import camera_delay, schedule_stats

    cfg = make_controller(sc.controller, scenario=sc).cfg
    if delay_s is not None:
        tau_m = float(delay_s)
    elif cfg.delay_s is None:
        tau_m = schedule_stats(sc).mean_age_s
    else:
        tau_m = float(np.asarray(cfg.delay_s))
    tick = 1.0 / sc.controller.rate_hz
    gyro = cfg.pid.derivative_source == "gyro" and sc.gyro is not None
    m = loop_model(sc)
    mm = cfg.model
    scale = float(getattr(sc.camera, "scale", 1.0))
    rows = [m.phi_index, mm.phi_index, mm.phi_index]
    source = [0, 1, 1]
    inputs = [0, 0, 0]
    delays = [camera_delay(sc).total_s, 0.0, tau_m]
    weights = [scale, 1.0, -1.0]
    if gyro:
        rows.append(m.p_index)
        source.append(0)
        inputs.append(1)
        delays.append(_gyro_delay(sc))
        weights.append(1.0)
    return ControllerLoop(
        a=np.asarray(m.a, float),
        b=np.asarray(m.b, float),
        controller=pid_system(cfg.pid, tick, gyro),
        rows=tuple(rows),
        source=tuple(source),
        inputs=tuple(inputs),
        delays=tuple(delays),
        weights=tuple(weights),
        tick_s=tick,
        model_a=np.asarray(mm.a, float),
        model_b=np.asarray(mm.b, float),
    )


def _roots(fun, w: np.ndarray) -> list[float]:
    from scipy.optimize import brentq

    v = fun(w)
    idx = np.nonzero(np.sign(v[:-1]) * np.sign(v[1:]) < 0)[0]
    return [brentq(lambda x: float(fun(np.array([x]))[0]), w[i], w[i + 1], xtol=1e-12) for i in idx]


def path_delay_margin(loop: ControllerLoop, omega: np.ndarray = OMEGA) -> tuple[float, float]:
    """Smallest extra delay of the aircraft's path that puts ``L_p`` on −1, and its frequency.

    ``L_p(Δ) = A + B·e^{−jωΔ}`` with ``B`` the aircraft path and ``A`` the model
    path; it touches −1 where ``|B| = |1 + A|``, at
    ``Δ = ((∠B − ∠(−1 − A)) mod 2π)/ω``. Returns ``(inf, nan)`` if never.
    """
    w = omega[omega < loop.nyquist_rad_s]

    def parts(x):
        c = loop.controller_response(x)
        p_r, p_m = loop.paths(x)
        return -np.einsum("wi,wi->w", c, p_m), -np.einsum("wi,wi->w", c, p_r)

    def gap(x):
        a, b = parts(x)
        return np.log(np.maximum(np.abs(b), 1e-300)) - np.log(np.maximum(np.abs(1.0 + a), 1e-300))

    best, best_w = math.inf, math.nan
    for x in _roots(gap, w):
        a, b = parts(np.array([x]))
        d = ((np.angle(b[0]) - np.angle(-1.0 - a[0])) % (2.0 * math.pi)) / x
        if d < best:
            best, best_w = float(d), float(x)
    return best, best_w


def smith_margins(loop: ControllerLoop, omega: np.ndarray = OMEGA) -> FrequencyMargins:
    """Aileron-break margins of the Smith loop, with the predictor loop's and the path delay margin.

    ``extra`` holds ``predictor_gain_margin_db``, ``predictor_phase_margin_deg``,
    ``predictor_delay_margin_s`` (the loop as the PID sees it) and
    ``plant_delay_margin_s`` (the second computation of the aircraft-path
    delay margin, see module docstring).
    """
    from .compare_loops import loop_margins

    m = loop_margins(loop, omega)
    if not m.closed_loop_stable:
        return m
    w = omega[omega < loop.nyquist_rad_s]
    p = frequency_margins(loop.predictor_response(w), w)
    plant_dm, _ = path_delay_margin(loop, omega)
    extra = {
        "predictor_gain_margin_db": p.gain_margin_db,
        "predictor_phase_margin_deg": p.phase_margin_deg,
        "predictor_delay_margin_s": p.delay_margin_s,
        "plant_delay_margin_s": plant_dm,
    }
    return replace(m, extra=extra)
