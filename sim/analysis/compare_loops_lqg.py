"""The LQG controller's loop (:mod:`controllers.lqg`) as a linear time-invariant controller.

What the controller does at each tick ``k`` (period ``T``), with the bank
command at zero and no limit binding::

    z⁻_k = F ẑ_{k−1} + g u_{k−1}                    predict (filter_matrices)
    ẑ_k  = z⁻_k + M (y_k − H z⁻_k)                 gyro, then camera update
    u_k  = −K_x x̂_k − K_i ξ_k,   ξ_{k+1} = ξ_k + T φ̂_k

``F``, ``g`` and the process noise come from the controller's own
:func:`controllers.lqg.filter_matrices`, ``K = [K_x, K_i]`` from its own
:func:`controllers.lqg.regulator_gain`, the noise figures from the
controller built for the scenario (:func:`rollrig.sim.build.make_controller`).
This is a discrete state-space system from ``y = [camera bank, gyro rate]``
to ``u`` with state ``[ẑ_{k−1}; ξ_k]``; its response at ``z = e^{jωT}``
closes the loop (:class:`.compare_loops.ControllerLoop`).

Approximations (the controller itself is time-varying):

* **Stationary gain.** ``M = P Hᵀ (H P Hᵀ + R)⁻¹`` with ``P`` the stationary
  a-priori covariance from the discrete Riccati equation
  (``control.dlqe``): the gain the filter settles to once its start-up
  uncertainty has gone, with no lost frames. Gyro and camera updated one
  after the other with independent noise equal one joint update.
* **Frames at the tick rate.** With frames slower than the ticks, the real
  filter applies a reading only on the ticks that bring a new one (a
  periodic gain). Here a reading is applied at every tick, as a measurement
  of the bank ``round(ā/h)`` delay-line steps back (``ā`` the mean reading age
  at the ticks, :func:`.loop_from_scenario.schedule_stats`), with its noise
  variance multiplied by the mean number of ticks per new reading — the
  same information per second. In the loop the reading is the bank
  delayed by the camera's effective delay (the cascade's and the PID's
  budget), so frame sampling is a mean delay here as it is for them.
* Limits, the loss rule and the integrator clamp are assumed not to act.
"""

from __future__ import annotations

import numpy as np

from ..scenario import Scenario
from .compare_loops import ControllerLoop

__all__ = ["lqg_camera_delay", "lqg_controller_system", "lqg_loop", "stationary_filter"]


def _built(sc: Scenario):
    from ..build import make_controller

    return make_controller(sc.controller, scenario=sc)


def stationary_filter(kf, cam_index: int | None, gyro: bool, r_cam: float, r_gyro: float, q: float):
    """Stationary a-priori covariance ``P`` and update gain ``M`` of the delay-line filter.

    Parameters
    ----------
    kf : controllers.lqg.DelayLineKalman
    cam_index : int or None
        State index the camera reading measures (``None``: no camera).
    gyro : bool
        Whether the gyro measures the roll rate at every tick.
    r_cam, r_gyro : rad², (rad/s)²
        Measurement noise variances.
    q : rad²/s³
        Roll-acceleration noise intensity.

    Returns
    -------
    (P, M, H) : ndarrays
    """
    import control
    from rollrig.controllers.lqg import filter_matrices

    big_f, _, q1 = filter_matrices(kf)
    rows, noise = [], []
    if gyro:
        rows.append(kf.cfg.model.p_index)
        noise.append(r_gyro)
    if cam_index is not None:
        rows.append(cam_index)
        noise.append(r_cam)
    h = np.zeros((len(rows), kf.N))
    h[np.arange(len(rows)), rows] = 1.0
    r = np.diag(noise)
    _, p, _ = control.dlqe(big_f, np.eye(kf.N), h, q * q1, r)
    p = 0.5 * (p + p.T)
    m = np.linalg.solve(h @ p @ h.T + r, h @ p).T
    return p, m, h


def lqg_controller_system(sc: Scenario):
    """The LQG controller of ``sc`` as a discrete ``control.StateSpace`` (inputs camera[, gyro]).

    Returns
    -------
    (control.StateSpace, dict)
        The system and what it was built from (``K``, ``M``, ``P``, ``H``,
        ``cam_index``, ``camera_noise_scale``, ``kf``).
    """
    import control
    from rollrig.controllers.lqg import DelayLineKalman, filter_matrices, regulator_gain

    from .loop_from_scenario import schedule_stats

    ctrl = _built(sc)
    cfg = ctrl.cfg
    tick = 1.0 / sc.controller.rate_hz
    kf = DelayLineKalman(cfg, tick)
    kf.reset(1)
    model = cfg.model
    n, big_n = model.n, kf.N
    limits = [
        float(np.asarray(v))
        for v in (cfg.max_bank_error_rad, cfg.max_rate_rad_s, cfg.max_aileron_rad, cfg.max_integral_rad_s)
    ]
    k = regulator_gain(model, kf.E, kf.f, tick, *limits)
    st = schedule_stats(sc)
    j = int(np.rint(st.new_reading_age_s / kf.h))
    if j > kf.L:
        raise ValueError(f"reading age {st.new_reading_age_s:.3f} s is beyond the filter's delay line")
    cam_index = model.phi_index if j == 0 else n + j - 1
    ticks_per_reading = max(st.new_reading_interval_s / st.tick_s, 1.0)
    gyro = bool(cfg.use_gyro and sc.gyro is not None)
    p, m, h = stationary_filter(
        kf, cam_index, gyro, float(kf.r_cam[0]) * ticks_per_reading, float(kf.r_gyro[0]), float(kf.q[0])
    )
    big_f, g, _ = filter_matrices(kf)
    kx, ki = k[:n], k[n]
    # state w = [ẑ_{k−1}; ξ_k]; u_{k−1} = −Kw w
    sel_x = np.zeros((n, big_n))
    sel_x[:, :n] = np.eye(n)
    e_phi = np.zeros(big_n)
    e_phi[model.phi_index] = 1.0
    kw = np.append(kx @ sel_x - ki * tick * e_phi, ki)
    a_pred = np.hstack([big_f, np.zeros((big_n, 1))]) - np.outer(g, kw)
    upd = np.eye(big_n) - m @ h
    jmap = upd @ a_pred  # ẑ_k = J w_k + M y_k
    e_xi = np.zeros(big_n + 1)
    e_xi[-1] = 1.0
    a_c = np.vstack([jmap, e_xi + tick * (e_phi @ jmap)])
    b_c = np.vstack([m, tick * (e_phi @ m)[None, :]])
    c_c = -(kx @ sel_x) @ jmap - ki * e_xi
    d_c = -(kx @ sel_x) @ m
    # inputs in the order [camera, gyro]
    order = [1, 0] if gyro else [0]
    sys = control.ss(a_c, b_c[:, order], c_c[None, :], d_c[None, order], tick)
    info = dict(K=k, M=m, P=p, H=h, cam_index=cam_index, camera_noise_scale=ticks_per_reading, kf=kf)
    return sys, info


def lqg_camera_delay(sc: Scenario) -> float:
    """Effective delay of the camera path as the LQG uses it (s): age at arrival + exposure mid-point."""
    from .loop_from_scenario import camera_delay, schedule_stats

    return schedule_stats(sc).new_reading_age_s + camera_delay(sc).exposure_mid_s


def lqg_loop(sc: Scenario) -> ControllerLoop:
    """The LQG's loop for :mod:`.compare_loops` (camera scale on the camera path)."""
    from ..build import loop_model
    from .compare_loops import _gyro_delay

    sys, _ = lqg_controller_system(sc)
    m = loop_model(sc)
    scale = float(getattr(sc.camera, "scale", 1.0))
    gyro = sys.ninputs == 2
    return ControllerLoop(
        a=np.asarray(m.a, float),
        b=np.asarray(m.b, float),
        controller=sys,
        rows=(m.phi_index, m.p_index) if gyro else (m.phi_index,),
        source=(0, 0) if gyro else (0,),
        inputs=(0, 1) if gyro else (0,),
        delays=(lqg_camera_delay(sc), _gyro_delay(sc)) if gyro else (lqg_camera_delay(sc),),
        weights=(scale, 1.0) if gyro else (scale,),
        tick_s=1.0 / sc.controller.rate_hz,
    )
