"""The stepping core: plant, actuator, camera reader, gyro and controller.

Everything that runs the closed loop (the CLI, Monte Carlo, tuning, margins
by experiment, the gym environment) drives :class:`Stepper`. It is
batch-first: the state is ``(batch, n_x)`` and one Python loop over base steps
advances every run at once.

Timing on the base-step grid ``t_k = k·dt``, within step ``k``:

1. frames due at ``k`` are captured from the true bank ``φ_k``; the gyro
   samples ``p_k`` if due;
2. at a controller tick the controller sees the newest delivered reading and
   returns an aileron command, held until the next tick;
3. plant and servo advance together by the exact zero-order-hold step of
   the combined linear system (servo lag driven by the held command), plus
   the disturbance inputs. Where the servo's rate or position limit binds
   during a step, those runs' servo is clipped and their plant is driven by
   the mean servo position over the step (exact for a straight-line servo
   motion). Whether a limit can bind is decided once per tick (the lag's
   step-to-step change only shrinks while the command is held), so runs far
   from the limits cost one matrix product per step.

A run whose ``|φ|`` exceeds ``divergence_rad`` (or whose controller returns a
non-finite command) is declared diverged at that time and frozen there.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np
import scipy.linalg
from rollrig.controllers.base import Controller, Observation
from rollrig.sensors.camera import CameraConfig, CameraReader
from rollrig.sensors.gyro import GyroConfig, RateGyro

from .actuator import ActuatorSpec
from .disturbance import DisturbanceSet
from .plant import LinearPlant, discretize
from .seeding import run_generators
from .trace import Trace

__all__ = ["LoopSetup", "Stepper", "simulate", "matmul_cols"]

_BLOCK = 512  # base steps of disturbance fetched at once


@dataclass(frozen=True)
class LoopSetup:
    """Everything needed to run the closed loop except the controller.

    Parameters
    ----------
    plant : LinearPlant
        Continuous lateral model (SI).
    dt : s
        Base step.
    n_steps : int
        Number of base steps (duration = ``n_steps·dt``).
    ctrl_every : int
        Controller period in base steps.
    actuator, camera, gyro
        Servo, camera-reader and (optional) gyro parameters.
    bank_cmd : (n_steps + 1,) rad
        Bank command on the base grid.
    x0 : (n_x,)
        Initial plant state (SI).
    disturbances : sequence of DisturbanceSource
        Disturbance sources (summed).
    divergence_rad : rad
        |bank| beyond which a run is declared diverged.
    """

    plant: LinearPlant
    dt: float
    n_steps: int
    ctrl_every: int
    actuator: ActuatorSpec
    camera: CameraConfig
    bank_cmd: np.ndarray
    x0: np.ndarray
    gyro: GyroConfig | None = None
    disturbances: Sequence = field(default_factory=tuple)
    divergence_rad: float = math.pi

    @property
    def duration_s(self) -> float:
        return self.n_steps * self.dt

    @property
    def tick_steps(self) -> np.ndarray:
        return np.arange(0, self.n_steps, self.ctrl_every)


def matmul_cols(a: np.ndarray, x: np.ndarray, out: np.ndarray | None = None) -> np.ndarray:
    """``a @ x`` whose columns do not depend on how many columns ``x`` has.

    BLAS multiplies a single column by a different kernel (matrix-vector)
    than a block of columns, which changes the last bits; a lone column is
    therefore doubled, so that run *i* alone equals run *i* in a batch bit
    for bit.
    """
    if x.shape[1] != 1:
        return np.matmul(a, x, out=out)
    r = np.matmul(a, np.concatenate([x, x], axis=1))[:, :1]
    if out is None:
        return r
    out[...] = r
    return out


class Stepper:
    """Stateful shell around the loop; one instance per batch at a time."""

    def __init__(self, setup: LoopSetup) -> None:
        self.setup = setup
        dp = discretize(setup.plant, setup.dt)
        act = setup.actuator
        nx = setup.plant.n_states
        alpha = act.gain_per_step(setup.dt)
        # Rows of the transposed state (n_x + 2, batch): plant states, servo
        # position, held aileron command. One matmul with m advances plant
        # and servo exactly; the command row is carried unchanged.
        lag = np.zeros((nx + 2, nx + 2))
        lag[:nx, :nx] = setup.plant.a
        if act.time_constant_s > 0:
            lag[:nx, nx] = setup.plant.b_control[:, 0]
            lag[nx, nx] = -1.0 / act.time_constant_s
            lag[nx, nx + 1] = 1.0 / act.time_constant_s
            m = scipy.linalg.expm(lag * setup.dt)[: nx + 1]
        else:  # instant servo: the plant sees the held command itself
            m = np.zeros((nx + 1, nx + 2))
            m[:nx, :nx] = dp.ad
            m[:nx, nx + 1] = dp.bd_control[:, 0]
            m[nx, nx + 1] = 1.0
        self._m = np.ascontiguousarray(m)
        self._ad = np.ascontiguousarray(dp.ad)
        self._b_ail = dp.bd_control[:, 0].copy()
        self._bd = np.ascontiguousarray(dp.bd_disturbance)
        self._nx = nx
        self._alpha = alpha
        self._phi = setup.plant.phi_index
        self._p = setup.plant.p_index

    # -------------------------------------------------------------- start
    def reset(
        self,
        seed: int,
        run_indices: Sequence[int],
        *,
        record_states: bool = False,
        input_gain: np.ndarray | float | None = None,
        input_delay_s: np.ndarray | float | None = None,
    ) -> Observation:
        """Start a batch; returns the observation at the first tick.

        ``input_gain`` and ``input_delay_s`` (per run, or one value for all)
        perturb the loop where it is broken for margins: at the aileron
        command, between controller and servo. The delay acts on the base
        grid (resolution ``dt``).
        """
        s = self.setup
        runs = np.asarray(run_indices, dtype=np.int64)
        batch = runs.size
        self.seed, self.runs, self.batch = int(seed), runs, batch
        rng_for = lambda name: run_generators(seed, runs, name)  # noqa: E731
        n = s.n_steps
        self.rec_bank = np.empty((n + 1, batch))  # also the camera's view of the true bank
        self.camera = CameraReader(s.camera, s.dt)
        self.camera.reset(n, s.tick_steps, batch, rng_for, history=self.rec_bank)
        self.gyro = RateGyro(s.gyro, s.dt) if s.gyro is not None else None
        if self.gyro is not None:
            self.gyro.reset(n, batch, rng_for)
        self.dist = DisturbanceSet(s.disturbances)
        self.dist.reset(s.dt, rng_for)
        self._dist_eff = None

        nx = self._nx
        self._X = np.zeros((nx + 2, batch))
        self._X[:nx] = np.asarray(s.x0, float)[:, None]
        self._Y = np.zeros_like(self._X)
        self.k = 0
        self.tick = 0
        self._gain = None if input_gain is None else np.broadcast_to(np.asarray(input_gain, float), (batch,))
        self._delay_steps = (
            None
            if input_delay_s is None
            else np.rint(np.broadcast_to(np.asarray(input_delay_s, float), (batch,)) / s.dt).astype(np.int64)
        )
        if self._delay_steps is not None and np.any(self._delay_steps < 0):
            raise ValueError("input_delay_s must be >= 0")
        self._rows = np.arange(batch)
        self.alive = np.ones(batch, dtype=bool)
        self.diverged_at = np.full(batch, np.inf)

        n_ticks = len(s.tick_steps)
        self.rec_rate = np.empty((n + 1, batch))
        self.rec_ail = np.empty((n + 1, batch))
        self.rec_states = np.empty((n + 1, batch, s.plant.n_states)) if record_states else None
        self.rec_meas = np.empty((n_ticks, batch))
        self.rec_valid = np.empty((n_ticks, batch), dtype=bool)
        self.rec_age = np.empty((n_ticks, batch))
        self.rec_cmd = np.empty((n_ticks, batch))
        self._record(0)
        self._sense(0)
        return self.observe()

    # -------------------------------------------------------------- loop
    @property
    def done(self) -> bool:
        return self.k >= self.setup.n_steps

    def observe(self) -> Observation:
        """The controller's view at the current tick."""
        s = self.setup
        t = self.k * s.dt
        bank, valid, age = self.camera.read(t)
        self._obs_rec = (bank, valid, age)
        return Observation(
            t=t,
            dt=s.ctrl_every * s.dt,
            bank=bank,
            valid=valid,
            age=age,
            bank_cmd=np.full(self.batch, s.bank_cmd[self.k]),
            rate=None if self.gyro is None else self.gyro.read(),
        )

    def advance(self, u_cmd: np.ndarray) -> Observation | None:
        """Apply an aileron command (rad, (batch,)) until the next tick.

        Returns the next observation, or ``None`` when the run is over.
        """
        s = self.setup
        u = np.asarray(u_cmd, dtype=float)
        u = np.broadcast_to(u, (self.batch,))
        bad_u = ~np.isfinite(u)
        if bad_u.any():
            self._diverge(bad_u)
            u = np.where(bad_u, 0.0, u)
        j = self.tick
        bank, valid, age = self._obs_rec
        self.rec_meas[j], self.rec_valid[j], self.rec_age[j], self.rec_cmd[j] = bank, valid, age, u
        self.tick += 1

        m, nx, phi = self._m, self._nx, self._phi
        lim = s.actuator.limit_rad
        max_change = s.actuator.rate_limit_rad_s * s.dt
        stop = min(self.k + s.ctrl_every, s.n_steps)
        frozen = not self.alive.all()
        X, Y = self._X, self._Y
        X[nx + 1] = u
        Y[nx + 1] = u
        perturbed = self._gain is not None or self._delay_steps is not None
        if perturbed:  # the command changes within the tick: any run may bind
            near_limit = self._rows
        else:
            # While the command is held the lag's per-step change only shrinks,
            # so a run can meet a limit in this tick only if it does at its start.
            near_limit = np.flatnonzero((np.abs(u) > lim) | (self._alpha * np.abs(u - X[nx]) > max_change))
        for k in range(self.k, stop):
            if perturbed:
                X[nx + 1] = self._perturbed_command(k, u)
            matmul_cols(m, X, out=Y[: nx + 1])
            if near_limit.size:
                self._limit_servo(X, Y, near_limit, lim, max_change)
            if self.dist:
                Y[:nx] += self._disturbance_row(k)
            if frozen:
                Y[: nx + 1] = np.where(self.alive, Y[: nx + 1], X[: nx + 1])
            X, Y = Y, X
            self._X, self._Y = X, Y
            self._record(k + 1)
            self._sense(k + 1)
        self.k = stop
        runaway = self.alive & ~(np.abs(X[phi]) < s.divergence_rad)
        if runaway.any():
            self._diverge(runaway)
        if self.done:
            return None
        return self.observe()

    # -------------------------------------------------------------- helpers
    def _perturbed_command(self, k: int, u: np.ndarray) -> np.ndarray:
        """Aileron command reaching the servo at step ``k`` with the margin perturbation."""
        cmd = u
        if self._delay_steps is not None:
            src = k - self._delay_steps  # base step whose command arrives now
            tick = np.floor_divide(src, self.setup.ctrl_every)
            ok = src >= 0
            cmd = np.where(ok, self.rec_cmd[np.clip(tick, 0, None), self._rows], 0.0)
        if self._gain is not None:
            cmd = cmd * self._gain
        return cmd

    def _limit_servo(
        self, X: np.ndarray, Y: np.ndarray, rows: np.ndarray, lim: float, max_change: float
    ) -> None:
        """Clip the servo of ``rows`` where a limit binds; redo those runs' plant step."""
        nx = self._nx
        before, free = X[nx, rows], Y[nx, rows]
        # np.minimum/np.maximum: np.clip's Python-level overhead shows at this call rate
        change = np.minimum(np.maximum(free - before, -max_change), max_change)
        clipped = np.minimum(np.maximum(before + change, -lim), lim)
        bind = clipped != free
        if bind.any():
            r = rows[bind]
            mean = 0.5 * (before[bind] + clipped[bind])  # straight-line servo motion
            Y[:nx, r] = matmul_cols(self._ad, X[:nx, r]) + self._b_ail[:, None] * mean
            Y[nx, r] = clipped[bind]

    def _record(self, k: int) -> None:
        X = self._X
        self.rec_bank[k] = X[self._phi]
        self.rec_rate[k] = X[self._p]
        self.rec_ail[k] = X[self._nx]
        if self.rec_states is not None:
            self.rec_states[k] = X[: self._nx].T

    def _sense(self, k: int) -> None:
        """Sensors sampled per base step: the gyro (the camera reads the bank record)."""
        if self.gyro is not None:
            self.gyro.sample(k, self._X[self._p])

    def _disturbance_row(self, k: int) -> np.ndarray:
        if self._dist_eff is None or not (self._d0 <= k < self._d0 + len(self._dist_eff)):
            self._d0 = k
            n = min(_BLOCK, self.setup.n_steps - k)
            self._dist_eff = self.dist.block(k, n, self.batch)  # (n, batch, 4)
        # one small product per step beats a block-wide einsum here
        return matmul_cols(self._bd, self._dist_eff[k - self._d0].T)

    def _diverge(self, rows: np.ndarray) -> None:
        rows = rows & self.alive
        self.diverged_at[rows] = self.k * self.setup.dt
        self.alive &= ~rows

    def trace(self) -> Trace:
        """The recorded batch (call when :attr:`done`)."""
        s = self.setup
        n_t = self.k + 1
        t = np.arange(n_t) * s.dt
        ticks = s.tick_steps[: self.tick]
        return Trace(
            t=t,
            bank_cmd=np.broadcast_to(s.bank_cmd[:n_t], (self.batch, n_t)),
            bank=self.rec_bank[:n_t].T,
            roll_rate=self.rec_rate[:n_t].T,
            aileron=self.rec_ail[:n_t].T,
            t_ctrl=ticks * s.dt,
            bank_meas=self.rec_meas[: self.tick].T,
            valid=self.rec_valid[: self.tick].T,
            age=self.rec_age[: self.tick].T,
            aileron_cmd=self.rec_cmd[: self.tick].T,
            states=None if self.rec_states is None else self.rec_states[:n_t].transpose(1, 0, 2),
            state_names=s.plant.state_names,
            diverged_at=self.diverged_at.copy(),
            run_index=self.runs.copy(),
            seed=self.seed,
        )


def simulate(
    setup: LoopSetup,
    controller: Controller,
    *,
    seed: int,
    run_indices: Sequence[int] = (0,),
    record_states: bool = False,
) -> Trace:
    """Run a batch of closed-loop runs and return their trace."""
    stepper = Stepper(setup)
    obs = stepper.reset(seed, run_indices, record_states=record_states)
    controller.reset(stepper.batch)
    while obs is not None:
        obs = stepper.advance(controller.step(obs))
    return stepper.trace()
