"""LQG bank hold: a Kalman filter that takes late camera readings at their capture time, and LQR.

Estimator
---------
The filter's model is the aircraft + servo (:class:`controllers.model.LoopModel`)
driven by the known aileron command and by white roll-acceleration noise
of intensity ``accel_psd`` (rad²/s³). Its state is augmented with a
**delay line** of past bank angles, ``d_j = φ(t − j·h)`` for
``j = 1 … L``, at resolution ``h`` (the simulator sets the base step) and
length ``L·h`` (the longest reading age expected at delivery). A camera
reading captured ``τ`` ago (``τ`` = the reading's reported age) is a
measurement of ``d_j`` with ``j = round(τ/h)`` (of the current bank when
``j = 0``), so it is applied at its capture time and its information reaches
the current state through the filter's cross-covariances: the exact
treatment of out-of-sequence (late) measurements by state augmentation
(Bar-Shalom, Li & Kirubarajan, *Estimation with Applications to Tracking and
Navigation*, Wiley 2001; the same answer as re-filtering from a stored
history, at a fixed cost per tick). Readings older than the line are
dropped (counted in :attr:`LQGController.too_old`); a lost or repeated frame
means predict only. The rate gyro, when fitted and ``use_gyro`` is set, is
a measurement of the current roll rate at every tick.

Propagation over one controller tick ``T = S·h`` is exact: the tick's ``S``
sub-steps of the zero-order-hold model and their process noise (Van Loan's
integral, ``scipy.linalg.expm``) are stacked once into one linear map and
one noise covariance for the state and the ``S`` newest delay entries; the
rest of the line shifts. The filter is the time-varying Kalman filter (the
covariance follows each run's own pattern of late and lost readings).

Regulator
---------
LQR gains from SciPy's discrete algebraic Riccati solver
(``scipy.linalg.solve_discrete_are``; the tests check them against
python-control's ``dlqr``, which costs seconds to import) on the tick-discretised model augmented with
the integral of the bank error (so a steady roll moment or servo offset
leaves no steady error), with Bryson's rule weights (Bryson & Ho, *Applied
Optimal Control*, 1975: each weight is one over the square of the largest
acceptable value). The command enters through the model's steady state at
the commanded bank (``x_ss``, ``u_ss``)::

    u = u_ss − K_x (x̂ − x_ss) − K_i ξ,   ξ ← ξ + T (φ̂ − φ_cmd)

clipped to ±``output_limit_rad``; ξ freezes while the output is pushing a
limit or the reading is stale, and is clamped so ``|K_i ξ|`` stays within
``integrator_limit_rad``.

Stale signal: the same rule as the PID (hold the output ``hold_s`` once the
newest reading is older than ``stale_after_s``, then fade to zero over
``fade_s``); the filter keeps predicting (and fusing the gyro) meanwhile.

Per-run parameters: the Bryson limits, ``accel_psd``, ``camera_noise_rad``
and ``gyro_noise_rad_s`` may be ``(batch,)`` arrays (one LQR solve per
distinct set of limits, at reset).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import scipy.linalg

from .base import Observation
from .model import LoopModel, SignalLoss, discrete, per_run

__all__ = [
    "LQGConfig",
    "DelayLineKalman",
    "LQGController",
    "tick_maps",
    "lqr_gain",
    "regulator_gain",
    "steady_state",
    "filter_matrices",
]


@dataclass(frozen=True, eq=False)
class LQGConfig:
    """LQG settings (physical parameters may be per run).

    Parameters
    ----------
    model : LoopModel
        Aircraft + servo model from the aileron command.
    delay_step_s : s
        Resolution ``h`` of the delay line (a whole fraction of the tick).
    max_delay_s : s
        Length of the delay line (oldest reading age that can be applied).
    accel_psd : rad²/s³
        Intensity of the white roll-acceleration noise in the filter's model.
    camera_noise_rad : rad
        Standard deviation of a camera reading's error.
    gyro_noise_rad_s : rad/s
        Standard deviation of a gyro reading's error.
    use_gyro : bool
        Fuse the rate gyro when the observation has one.
    initial_bank_std_rad, initial_rate_std_rad_s : rad, rad/s
        Prior uncertainty of bank and roll rate (other states start near zero).
    max_bank_error_rad, max_rate_rad_s, max_aileron_rad, max_integral_rad_s : Bryson limits
        Largest acceptable bank error, roll rate, aileron and bank-error integral.
    output_limit_rad, integrator_limit_rad : rad
    stale_after_s, hold_s, fade_s : s
        Signal-loss rule.
    """

    model: LoopModel
    delay_step_s: float = 0.01
    max_delay_s: float = 0.3
    accel_psd: float | np.ndarray = 0.5
    camera_noise_rad: float | np.ndarray = math.radians(0.5)
    gyro_noise_rad_s: float | np.ndarray = math.radians(0.5)
    use_gyro: bool = True
    initial_bank_std_rad: float = math.radians(30.0)
    initial_rate_std_rad_s: float = math.radians(10.0)
    max_bank_error_rad: float | np.ndarray = math.radians(5.0)
    max_rate_rad_s: float | np.ndarray = math.radians(30.0)
    max_aileron_rad: float | np.ndarray = math.radians(10.0)
    max_integral_rad_s: float | np.ndarray = math.radians(10.0)
    output_limit_rad: float = math.radians(20.0)
    integrator_limit_rad: float = math.radians(10.0)
    stale_after_s: float | np.ndarray = 0.5
    hold_s: float | np.ndarray = 0.5
    fade_s: float | np.ndarray = 1.0


def _van_loan(a: np.ndarray, g: np.ndarray, h: float) -> tuple[np.ndarray, np.ndarray]:
    """``(Φ, Q)`` over ``h`` for ``x' = a x + g w``, unit-intensity white ``w`` (Van Loan 1978)."""
    n = a.shape[0]
    m = np.zeros((2 * n, 2 * n))
    m[:n, :n] = -a
    m[:n, n:] = np.outer(g, g)
    m[n:, n:] = a.T
    e = scipy.linalg.expm(m * h)
    phi = e[n:, n:].T
    q = phi @ e[:n, n:]
    return phi, 0.5 * (q + q.T)


def tick_maps(model: LoopModel, h: float, substeps: int):
    """One tick (``substeps`` steps of ``h``) of the model with the ``substeps`` newest bank samples.

    Returns ``(E, f, Q)``: the head ``[x(t+T); φ(t+T−h), …, φ(t)]`` equals
    ``E x(t) + f u + noise`` with noise covariance ``Q`` per unit intensity.
    """
    n, s = model.n, substeps
    ph, gh = discrete(model, h)
    _, qh = _van_loan(np.asarray(model.a, float), np.asarray(model.accel_column, float), h)
    c = np.zeros(n)
    c[model.phi_index] = 1.0
    # x_i = ph^i x0 + g_i u + sum_{m<=i} ph^(i-m) w_m,  i = 0..s
    xs_x, xs_u, xs_w = [np.eye(n)], [np.zeros(n)], [np.zeros((n, n * s))]
    for i in range(1, s + 1):
        w = ph @ xs_w[-1]
        w[:, (i - 1) * n : i * n] += np.eye(n)
        xs_x.append(ph @ xs_x[-1])
        xs_u.append(ph @ xs_u[-1] + gh)
        xs_w.append(w)
    rows_x = [xs_x[s]] + [c @ xs_x[i] for i in range(s - 1, -1, -1)]
    rows_u = [xs_u[s]] + [np.array([c @ xs_u[i]]) for i in range(s - 1, -1, -1)]
    rows_w = [xs_w[s]] + [c @ xs_w[i] for i in range(s - 1, -1, -1)]
    big_e = np.vstack([np.atleast_2d(r) for r in rows_x])
    f = np.concatenate([np.atleast_1d(r) for r in rows_u])
    nmap = np.vstack([np.atleast_2d(r) for r in rows_w])
    q = nmap @ np.kron(np.eye(s), qh) @ nmap.T
    return big_e, f, 0.5 * (q + q.T)


class DelayLineKalman:
    """The batch Kalman filter with a bank delay line (see module docstring).

    State ``z = [x (n); φ(t−h), …, φ(t−L·h)]`` per run; covariance ``(batch, N, N)``.
    """

    def __init__(self, cfg: LQGConfig, tick_s: float) -> None:
        self.cfg = cfg
        h = cfg.delay_step_s
        s = tick_s / h
        if abs(s - round(s)) > 1e-6 or round(s) < 1:
            raise ValueError(f"delay_step_s {h} is not a whole fraction of the tick {tick_s}")
        self.s = int(round(s))
        self.h = h
        self.n = cfg.model.n
        self.L = max(self.s, int(math.ceil(cfg.max_delay_s / h - 1e-9)))
        self.N = self.n + self.L
        self.E, self.f, self.Q1 = tick_maps(cfg.model, h, self.s)

    def reset(self, batch: int) -> None:
        c, n, m = self.cfg, self.n, self.cfg.model
        self.batch = batch
        self.q = per_run(c.accel_psd, batch, "accel_psd")
        self.r_cam = per_run(c.camera_noise_rad, batch, "camera_noise_rad") ** 2
        self.r_gyro = per_run(c.gyro_noise_rad_s, batch, "gyro_noise_rad_s") ** 2
        p0x = np.eye(n) * 1e-6
        p0x[m.phi_index, m.phi_index] = c.initial_bank_std_rad**2
        p0x[m.p_index, m.p_index] = c.initial_rate_std_rad_s**2
        j = np.zeros((self.N, n))
        j[:n] = np.eye(n)
        j[n:, m.phi_index] = 1.0  # the line starts as copies of the (unknown) bank
        self.P = np.broadcast_to(j @ p0x @ j.T, (batch, self.N, self.N)).copy()
        self.z = np.zeros((batch, self.N))
        self._rows = np.arange(batch)
        self._spare: np.ndarray | None = None
        self._tmp = np.empty((batch, self.N, self.N))

    @property
    def x(self) -> np.ndarray:
        """(batch, n) current state estimate."""
        return self.z[:, : self.n]

    def predict(self, u: np.ndarray) -> None:
        """Advance one tick with the aileron command ``u`` (rad, (batch,)) held."""
        n, s, L = self.n, self.s, self.L
        head = n + s
        z, P = self.z, self.P
        new = self._spare  # two covariance buffers, swapped each tick (no large allocation)
        if new is None or new.shape != P.shape:
            new = np.empty_like(P)
        pxx = P[:, :n, :n]
        pxd = P[:, :n, n : n + L - s]
        e = self.E
        new[:, :head, :head] = e @ pxx @ e.T + self.q[:, None, None] * self.Q1
        cross = e @ pxd
        new[:, :head, head:] = cross
        new[:, head:, :head] = cross.transpose(0, 2, 1)
        new[:, head:, head:] = P[:, n : n + L - s, n : n + L - s]
        zn = np.empty_like(z)
        zn[:, :head] = z[:, :n] @ e.T + np.broadcast_to(u, (self.batch,))[:, None] * self.f
        zn[:, head:] = z[:, n : n + L - s]
        self.z, self.P, self._spare = zn, new, P

    def update(self, index: np.ndarray, y: np.ndarray, r: np.ndarray, use: np.ndarray) -> None:
        """Scalar update of state entry ``index`` (per run) with ``y``, variance ``r``, where ``use``."""
        rows = self._rows
        idx = np.asarray(index, dtype=np.int64)
        col = self.P[rows, :, idx]  # (batch, N)
        s = col[rows, idx] + r
        k = np.where(use, 1.0 / s, 0.0)[:, None] * col
        innov = np.where(use, y - self.z[rows, idx], 0.0)
        self.z = self.z + k * innov[:, None]
        self._tmp = np.multiply(k[:, :, None], col[:, None, :], out=self._tmp)
        self.P -= self._tmp  # in place: the same values as P - k·col, without two large temporaries

    def camera(self, y: np.ndarray, age: np.ndarray, use: np.ndarray) -> np.ndarray:
        """Apply bank readings captured ``age`` s ago where ``use``; returns which were applied."""
        j = np.rint(np.where(np.isfinite(age), age, 0.0) / self.h).astype(np.int64)
        ok = use & np.isfinite(age) & (j <= self.L) & (j >= 0)
        if not ok.any():  # most ticks bring no new frame: skip the (no-op) update
            return ok
        idx = np.where(j == 0, self.cfg.model.phi_index, self.n + np.clip(j, 1, self.L) - 1)
        self.update(idx, y, self.r_cam, ok)
        return ok

    def gyro(self, rate: np.ndarray) -> None:
        self.update(np.full(self.batch, self.cfg.model.p_index), rate, self.r_gyro, np.ones(self.batch, bool))


def filter_matrices(kf: DelayLineKalman) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The filter's one-tick model over its whole state ``z`` (state and delay line).

    Returns ``(F, g, Q)``: :meth:`DelayLineKalman.predict` computes
    ``z ← F z + g u`` and ``P ← F P Fᵀ + q·Q`` (``q`` = ``accel_psd``); the
    head of ``z`` moves with :func:`tick_maps`, the rest of the line shifts.
    For analysis (the stationary filter); the filter itself works by blocks.
    """
    n, s, L, N = kf.n, kf.s, kf.L, kf.N
    head = n + s
    big_f = np.zeros((N, N))
    big_f[:head, :n] = kf.E
    big_f[head:, n : n + L - s] = np.eye(L - s)
    g = np.zeros(N)
    g[:head] = kf.f
    q = np.zeros((N, N))
    q[:head, :head] = kf.Q1
    return big_f, g, q


def lqr_gain(a: np.ndarray, b: np.ndarray, q: np.ndarray, r: np.ndarray) -> np.ndarray:
    """Discrete LQR gain ``K`` (``u = −K x``) from ``scipy.linalg.solve_discrete_are``."""
    s = scipy.linalg.solve_discrete_are(a, b, q, r)
    return np.linalg.solve(r + b.T @ s @ b, b.T @ s @ a)


def regulator_gain(
    model: LoopModel,
    tick_map: np.ndarray,
    tick_input: np.ndarray,
    dt: float,
    bank: float,
    rate: float,
    aileron: float,
    integral: float,
) -> np.ndarray:
    """LQR gain ``[K_x, K_i]`` (shape ``(n + 1,)``) the controller uses, for one set of Bryson limits.

    Parameters
    ----------
    model : LoopModel
    tick_map, tick_input : ndarray
        :func:`tick_maps`' ``E`` and ``f`` (only their first ``n`` rows, the
        model's state over one tick, are used).
    dt : s
        Controller tick.
    bank, rate, aileron, integral : rad, rad/s, rad, rad·s
        Largest acceptable bank error, roll rate, aileron and bank-error integral.
    """
    n = model.n
    ad, bd = tick_map[:n], tick_input[:n]
    a_i = np.zeros((n + 1, n + 1))
    a_i[:n, :n] = ad
    a_i[n, model.phi_index] = dt
    a_i[n, n] = 1.0
    b_i = np.append(bd, 0.0)[:, None]
    q = np.eye(n + 1) * 1e-6
    q[model.phi_index, model.phi_index] = 1.0 / bank**2
    q[model.p_index, model.p_index] = 1.0 / rate**2
    q[n, n] = 1.0 / integral**2
    return lqr_gain(a_i, b_i, q, np.array([[1.0 / aileron**2]]))[0]


def steady_state(model: LoopModel, tick_map: np.ndarray, tick_input: np.ndarray) -> tuple[np.ndarray, float]:
    """``(x_ss, u_ss)``: the model's state and command holding unit bank (the command's feedforward)."""
    n = model.n
    ad, bd = tick_map[:n], tick_input[:n]
    # steady state at unit bank: (ad - I) x + bd u = 0, x_phi = 1
    lhs = np.zeros((n + 1, n + 1))
    lhs[:n, :n] = ad - np.eye(n)
    lhs[:n, n] = bd
    lhs[n, model.phi_index] = 1.0
    rhs = np.zeros(n + 1)
    rhs[n] = 1.0
    sol = np.linalg.lstsq(lhs, rhs, rcond=None)[0]
    return sol[:n], sol[n]


class LQGController:
    """Batch LQG bank-hold controller (see module docstring)."""

    def __init__(self, cfg: LQGConfig) -> None:
        self.cfg = cfg

    def reset(self, batch: int) -> None:
        self.batch = batch
        self.kf = None
        self.loss = SignalLoss(self.cfg.stale_after_s, self.cfg.hold_s, self.cfg.fade_s)
        self.loss.reset(batch)
        self.xi = np.zeros(batch)
        self.u = np.zeros(batch)
        self.last_capture = np.full(batch, -np.inf)
        self.too_old = np.zeros(batch, dtype=np.int64)

    def _design(self, dt: float) -> None:
        c, b = self.cfg, self.batch
        limits = np.stack(
            [
                per_run(c.max_bank_error_rad, b, "max_bank_error_rad"),
                per_run(c.max_rate_rad_s, b, "max_rate_rad_s"),
                per_run(c.max_aileron_rad, b, "max_aileron_rad"),
                per_run(c.max_integral_rad_s, b, "max_integral_rad_s"),
            ],
            axis=1,
        )
        uniq, inverse = np.unique(limits, axis=0, return_inverse=True)
        gains = np.stack([regulator_gain(c.model, self.kf.E, self.kf.f, dt, *row) for row in uniq])
        self.K = gains[np.ravel(inverse)]
        self.x_ss, self.u_ss = steady_state(c.model, self.kf.E, self.kf.f)

    def step(self, obs: Observation) -> np.ndarray:
        c, m = self.cfg, self.cfg.model
        if self.kf is None:
            self.kf = DelayLineKalman(c, obs.dt)
            self.kf.reset(self.batch)
            self._design(obs.dt)
        else:
            self.kf.predict(self.u)
        kf = self.kf
        if c.use_gyro and obs.rate is not None:
            kf.gyro(obs.rate)
        capture = obs.t - obs.age
        fresh = self.loss.fresh(obs.age)
        new = fresh & np.isfinite(obs.age) & (capture > self.last_capture + 1e-9)
        applied = kf.camera(obs.bank, obs.age, new)
        self.too_old += new & ~applied
        self.last_capture = np.where(new, capture, self.last_capture)

        x = kf.x
        n = m.n
        cmd = obs.bank_cmd
        dev = x - cmd[:, None] * self.x_ss
        u_raw = cmd * self.u_ss - np.einsum("bi,bi->b", self.K[:, :n], dev) - self.K[:, n] * self.xi
        lim = c.output_limit_rad
        u = np.clip(u_raw, -lim, lim)
        err = x[:, m.phi_index] - cmd
        k_i = self.K[:, n]
        pushing = ((u_raw >= lim) & (-k_i * err > 0)) | ((u_raw <= -lim) & (-k_i * err < 0))
        xi = self.xi + obs.dt * err
        cap = c.integrator_limit_rad / np.maximum(np.abs(k_i), 1e-12)
        self.xi = np.where(fresh & ~pushing, np.clip(xi, -cap, cap), self.xi)
        out = self.loss.apply(u, obs.age)
        self.u = out
        return out
