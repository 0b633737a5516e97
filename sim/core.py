"""The stepping core: plant, actuator, camera reader, gyro and controller.

Everything that runs the closed loop (the CLI, Monte Carlo, tuning, margins
by experiment, the gym environment) drives :class:`Stepper`, usually through
:func:`rollrig.sim.driver.run_batch`. It is batch-first: one Python loop over
base steps advances every run at once.

Parameters and state
    :class:`LoopSetup` and every configuration in it are immutable values
    (safe to share between steppers and to send to another process). All
    that changes while a batch runs — the plant and servo states, the
    turbulence filter states and random streams, the camera reader, the gyro,
    the records — belongs to the :class:`Stepper`; the controller instance
    owns its own state. Any numeric parameter may be given per run (see
    :mod:`rollrig.sim.params` for the rule and for what is shared).

Timing on the base-step grid ``t_k = k·dt``, within step ``k``:

1. frames due at ``k`` are captured from the true bank ``φ_k``; the gyro
   samples ``p_k`` if due;
2. at a controller tick the controller sees the newest delivered reading and
   returns an aileron command, held until the next tick;
3. plant, servo and turbulence filters advance together by one exact
   zero-order-hold step of the combined linear system (servo lag driven by
   the held command; gusts held over the step), plus the step's noise
   increments and deterministic disturbance inputs. Where the servo's rate or
   position limit binds during a step, those runs' servo is clipped and their
   plant is driven by the mean servo position over the step (exact for a
   straight-line servo motion). A limit binds when the free servo step moves
   more than the rate limit allows or ends beyond the position limit (decided
   with the limits themselves, so last-bit rounding never switches method).
   Whether a limit can bind is decided once per tick (the lag's step-to-step
   change only shrinks while the command is held), so runs far from the
   limits cost one matrix product per step.

A run whose ``|φ|`` exceeds ``divergence_rad`` (or whose controller returns a
non-finite command) is declared diverged at that time and frozen there.

Episodes and restarts
    Every run (row of the batch) has its own episode clock: its local step
    counts from 0 at :meth:`Stepper.reset` or at the :meth:`Stepper.restart`
    that started its current episode. After ``restart(rows, run_indices)``
    row ``r`` evolves bit for bit as a fresh single run with that run index:
    its camera timing plan and draws, disturbances, gyro and command are
    restarted from its local time zero. While every row shares one clock
    (no restart yet, or every row restarted together) the core takes its
    fast path; otherwise each row's step and tick are gathered per run.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np
import scipy.linalg
from rollrig.controllers.base import Observation
from rollrig.sensors.camera import CameraConfig, CameraReader
from rollrig.sensors.gyro import GyroConfig, RateGyro

from . import params as P
from .actuator import ActuatorSpec
from .disturbance import N_CHANNELS, ShapedNoise, initial_state, noise_block
from .plant import LinearPlant, discretize
from .seeding import run_generators
from .trace import Trace

__all__ = ["LoopSetup", "Stepper", "simulate", "matmul_cols", "RECORD_LEVELS"]

_BLOCK = 256  # base steps of disturbance inputs made at once

#: Recording levels: ``full`` (the whole :class:`Trace`), ``metrics`` (bank
#: and aileron only: what the metrics need), ``none`` (nothing beyond what
#: the camera reads: for stepping from outside).
RECORD_LEVELS = ("full", "metrics", "none")


@dataclass(frozen=True)
class LoopSetup:
    """Everything needed to run the closed loop except the controller (immutable).

    Parameters
    ----------
    plant : LinearPlant
        Continuous lateral model (SI).
    dt : s
        Base step.
    n_steps : int
        Number of base steps of an episode (duration = ``n_steps·dt``).
    ctrl_every : int
        Controller period in base steps.
    actuator, camera, gyro
        Servo, camera-reader and (optional) gyro parameters.
    bank_cmd : (n_steps + 1,) or (batch, n_steps + 1) rad
        Bank command on the base grid (shared or per run).
    x0 : (n_x,) or (batch, n_x)
        Initial plant state (SI; shared or per run).
    disturbances : sequence of disturbance sources
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

    def batch_size(self) -> int | None:
        """Batch size fixed by per-run arrays in the setup, or ``None`` when every parameter is shared."""
        sizes = set()
        b = P.batch_size_of(self.actuator, self.camera, self.gyro, tuple(self.disturbances))
        if b is not None:
            sizes.add(b)
        for arr in (self.bank_cmd, self.x0):
            if np.ndim(arr) == 2:
                sizes.add(int(np.shape(arr)[0]))
        if len(sizes) > 1:
            raise ValueError(f"per-run parameters disagree on the number of runs: {sorted(sizes)}")
        return sizes.pop() if sizes else None

    def take(self, rows: np.ndarray) -> LoopSetup:
        """The setup for batch rows ``rows`` of a setup with per-run arrays (chunking)."""
        batch = self.batch_size()
        if batch is None:
            return self
        rows = np.asarray(rows)

        def cut(obj):
            return None if obj is None else P.take(P.resolve(obj, batch), rows)

        return LoopSetup(
            plant=self.plant,
            dt=self.dt,
            n_steps=self.n_steps,
            ctrl_every=self.ctrl_every,
            actuator=cut(self.actuator),
            camera=cut(self.camera),
            gyro=cut(self.gyro),
            bank_cmd=np.asarray(self.bank_cmd)[rows] if np.ndim(self.bank_cmd) == 2 else self.bank_cmd,
            x0=np.asarray(self.x0)[rows] if np.ndim(self.x0) == 2 else self.x0,
            disturbances=tuple(cut(d) for d in self.disturbances),
            divergence_rad=self.divergence_rad,
        )


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


_MEMO: dict[tuple, tuple[object, object]] = {}


def _memo(owner, key: tuple, make):
    """``make()`` once per ``(owner, key)``: exact discretisations repeat for every Stepper of a setup.

    Keyed by the owner's identity (a plant is not hashable); the entry keeps a
    reference to it, so the identity cannot be reused while cached. Results
    must not be modified (they are shared).
    """
    k = (id(owner), *key)
    hit = _MEMO.get(k)
    if hit is not None and hit[0] is owner:
        return hit[1]
    if len(_MEMO) >= 64:
        _MEMO.clear()
    value = make()
    _MEMO[k] = (owner, value)
    return value


def _servo_plant_matrix(plant: LinearPlant, dp, tau: float, dt: float) -> np.ndarray:
    """``(n_x + 1, n_x + 2)`` exact step of [plant; servo] from [plant; servo; held command]."""
    nx = plant.n_states
    if tau > 0:
        lag = np.zeros((nx + 2, nx + 2))
        lag[:nx, :nx] = plant.a
        lag[:nx, nx] = plant.b_control[:, 0]
        lag[nx, nx] = -1.0 / tau
        lag[nx, nx + 1] = 1.0 / tau
        return scipy.linalg.expm(lag * dt)[: nx + 1]
    m = np.zeros((nx + 1, nx + 2))  # instant servo: the plant sees the held command itself
    m[:nx, :nx] = dp.ad
    m[:nx, nx + 1] = dp.bd_control[:, 0]
    m[nx, nx + 1] = 1.0
    return m


class Stepper:
    """The mutable run state of one batch on a :class:`LoopSetup`; several may share a setup.

    Driving it one tick at a time::

        st = Stepper(setup)
        obs = st.reset(seed, run_indices)
        ctrl.reset(st.batch)
        while not st.done:
            st.advance(ctrl.step(obs))
            obs = st.observe()

    :meth:`observe` is pure (calling it twice changes nothing). The true
    state a reward or metric needs is readable as ``(batch,)`` read-only
    views: :attr:`bank`, :attr:`roll_rate`, :attr:`sideslip`,
    :attr:`yaw_rate`, :attr:`aileron`; :attr:`episode_step` and
    :attr:`episode_time_s` give each run's own clock.
    """

    def __init__(self, setup: LoopSetup) -> None:
        self.setup = setup
        self._dp = _memo(setup.plant, ("zoh", float(setup.dt)), lambda: discretize(setup.plant, setup.dt))
        self._nx = setup.plant.n_states
        names = setup.plant.state_names
        self._phi = setup.plant.phi_index
        self._p = setup.plant.p_index
        self._beta = names.index("beta") if "beta" in names else None
        self._r = names.index("r") if "r" in names else None
        self.batch = 0

    # ================================================================ start
    def reset(
        self,
        seed: int,
        run_indices: Sequence[int],
        *,
        record: str = "full",
        record_states: bool = False,
        input_gain: np.ndarray | float | None = None,
        input_delay_s: np.ndarray | float | None = None,
    ) -> Observation:
        """Start a batch; returns the observation at the first tick.

        Parameters
        ----------
        seed : int
        run_indices : sequence of int
            Run index of each row (selects its random streams).
        record : {"full", "metrics", "none"}
            What to keep (see :data:`RECORD_LEVELS`).
        record_states : bool
            Also keep the full plant state (``full`` only).
        input_gain, input_delay_s : float or (batch,), optional
            Margin perturbations at the aileron command, between controller
            and servo: a gain, and a delay on the base grid (resolution ``dt``).
        """
        if record not in RECORD_LEVELS:
            raise ValueError(f"record = {record!r}; allowed: {', '.join(RECORD_LEVELS)}")
        s = self.setup
        runs = np.asarray(run_indices, dtype=np.int64).reshape(-1)
        batch = runs.size
        self.seed, self.runs, self.batch = int(seed), runs.copy(), batch
        self.record = record
        n, nx, every = s.n_steps, self._nx, s.ctrl_every
        self._ar = np.arange(batch)

        # ---- per-run parameters, resolved once
        act = P.resolve(s.actuator, batch, "actuator.")
        cam = P.resolve(s.camera, batch, "camera.")
        gyro = P.resolve(s.gyro, batch, "gyro.")
        self._x0 = P.per_run_rows(s.x0, batch, nx, "x0")
        cmd = np.asarray(s.bank_cmd, dtype=float)
        self._cmd = cmd if cmd.ndim == 1 else P.per_run_rows(cmd, batch, n + 1, "bank_cmd")
        sources = [P.resolve(d, batch, "disturbance.") for d in s.disturbances]

        # ---- state layout (rows): plant n_x, servo, noise-filter states, held command
        self._set_sources(sources)
        ns = self._ns
        nrow = nx + 2 + ns
        self._nrow = nrow
        f0 = nx + 1  # first filter row
        bd = self._dp.bd_disturbance
        coupling = np.zeros((nx, ns))
        filt = np.zeros((ns, ns))
        i = 0
        for _, f in self._noise:
            coupling[:, i : i + f.n_states] = bd @ f.out
            filt[i : i + f.n_states, i : i + f.n_states] = f.phi
            i += f.n_states
        self._coupling, self._filt = coupling, filt
        self._set_actuator(act)
        # the plant step redone for runs whose servo limit binds: [plant; filters] -> plant
        # (zero columns for the servo and the held command, so it multiplies the state as it is)
        self._redo = np.zeros((nx, nrow))
        self._redo[:, :nx] = self._dp.ad
        self._redo[:, f0 : f0 + ns] = coupling
        self._b_ail = self._dp.bd_control[:, 0].copy()
        # disturbance inputs added per step: rows [w_lo, w_hi) of the state
        has_sig = bool(self._signals)
        self._w_lo = 0 if has_sig else f0
        self._w_hi = (f0 + ns) if ns else (nx if has_sig else 0)
        self._W = None
        self._w0 = 0

        # ---- state buffer: one slice per base step of a tick; a lone run is padded
        # to two columns so the matrix product uses the same BLAS kernel as a batch
        width = max(batch, 2)
        self._Sfull = np.zeros((every + 1, nrow, width))
        self._S = self._Sfull[:, :, :batch]
        self._views: dict[int | None, np.ndarray] = {}

        # ---- clocks
        self.k = 0  # base steps advanced (global)
        self._start = np.zeros(batch, dtype=np.int64)
        self._uniform = True
        self._start0 = 0

        # ---- perturbation
        self._gain = None if input_gain is None else P.per_run(input_gain, batch, "input_gain")
        self._delay_steps = None
        if input_delay_s is not None:
            d = P.per_run(input_delay_s, batch, "input_delay_s")
            if np.any(d < 0):
                raise ValueError("input_delay_s must be >= 0")
            self._delay_steps = np.rint(d / s.dt).astype(np.int64)

        # ---- records (indexed by each run's local step / tick)
        n_ticks = len(s.tick_steps)
        full = record == "full"
        self.rec_bank = np.zeros((n + 1, batch))  # also the camera's view of the true bank
        self.rec_ail = np.zeros((n + 1, batch)) if record != "none" else None
        self.rec_rate = np.zeros((n + 1, batch)) if full else None
        self.rec_states = np.zeros((n + 1, batch, nx)) if full and record_states else None
        self.rec_meas = np.zeros((n_ticks, batch)) if full else None
        self.rec_valid = np.zeros((n_ticks, batch), dtype=bool) if full else None
        self.rec_age = np.zeros((n_ticks, batch)) if full else None
        keep_cmd = full or self._delay_steps is not None
        self.rec_cmd = np.zeros((n_ticks, batch)) if keep_cmd else None
        self.alive = np.ones(batch, dtype=bool)
        self.diverged_at = np.full(batch, np.inf)

        # ---- components (their state is ours)
        self.camera = CameraReader(cam, s.dt, n, s.tick_steps, batch)
        self.camera.history = self.rec_bank
        self.gyro = RateGyro(gyro, s.dt, n, batch) if gyro is not None else None
        self._noise_rngs = [[None] * batch for _ in self._noise]
        self._start_rows(self._ar)
        self._obs = self._make_obs()
        return self._obs

    def _set_sources(self, sources: list) -> None:
        """Resolved disturbance sources: shaped noise (with its filters) and deterministic signals."""
        s = self.setup
        self._sources = sources
        self._noise = [
            (src, src.noise_filter(s.dt, self.batch)) for src in sources if isinstance(src, ShapedNoise)
        ]
        self._signals = [src for src in sources if not isinstance(src, ShapedNoise)]
        self._ns = sum(f.n_states for _, f in self._noise)

    def _set_actuator(self, act) -> None:
        """Servo limits and the step matrices, one per distinct servo time constant."""
        s, nx, nrow, ns = self.setup, self._nx, self._nrow, self._ns
        f0 = nx + 1
        self._act = act
        self._lim = act.limit_rad
        self._max_change = act.rate_limit_rad_s * s.dt
        tau = act.time_constant_s
        with np.errstate(divide="ignore", over="ignore"):
            self._alpha = np.where(tau > 0, -np.expm1(-s.dt / np.where(tau > 0, tau, 1.0)), 1.0)
        self._groups = []
        for value in np.unique(tau):
            sp = _memo(  # the matrix exponential, once per plant, step and time constant
                s.plant,
                ("servo", float(s.dt), float(value)),
                lambda tau=float(value): _servo_plant_matrix(s.plant, self._dp, tau, s.dt),
            )
            m = np.zeros((nrow - 1, nrow))
            m[: nx + 1, : nx + 1] = sp[:, : nx + 1]
            m[: nx + 1, nrow - 1] = sp[:, nx + 1]
            m[:nx, f0 : f0 + ns] = self._coupling
            m[f0 : f0 + ns, f0 : f0 + ns] = self._filt
            rows = np.flatnonzero(tau == value)
            self._groups.append((m, None if rows.size == self.batch else rows))

    def _adopt(self, new: LoopSetup, rows: np.ndarray) -> None:
        """Take the per-run values of ``rows`` from ``new`` (same structure); the other rows keep theirs."""
        s, b, nx = self.setup, self.batch, self._nx
        if new is s:
            return
        shared = ("dt", "n_steps", "ctrl_every", "divergence_rad")
        if any(getattr(new, k) != getattr(s, k) for k in shared) or not _same_plant(new.plant, s.plant):
            raise ValueError(f"restart: the new setup must share {', '.join(shared)} and the plant")
        if len(new.disturbances) != len(s.disturbances):
            raise ValueError("restart: the new setup must have the same disturbance sources")
        self._x0 = self._x0.copy()
        self._x0[rows] = P.per_run_rows(new.x0, b, nx, "x0")[rows]
        cmd = np.asarray(new.bank_cmd, dtype=float)
        if not (cmd.ndim == 1 and self._cmd.ndim == 1 and np.array_equal(cmd, self._cmd)):
            width = s.n_steps + 1
            full = np.array(P.per_run_rows(self._cmd, b, width, "bank_cmd"))
            full[rows] = P.per_run_rows(cmd, b, width, "bank_cmd")[rows]
            self._cmd = full
        self._set_actuator(P.put(self._act, new.actuator, rows, b, "actuator."))
        self.camera.set_config(P.put(self.camera.cfg, new.camera, rows, b, "camera."))
        if self.gyro is not None:
            self.gyro.cfg = P.put(self.gyro.cfg, new.gyro, rows, b, "gyro.")
        sources = [
            P.put(old, src, rows, b, "disturbance.")
            for old, src in zip(self._sources, new.disturbances, strict=True)
        ]
        self._set_sources(sources)

    def restart(
        self,
        rows: Sequence[int] | np.ndarray,
        run_indices: Sequence[int],
        setup: LoopSetup | None = None,
    ) -> Observation:
        """Start a new episode for batch rows ``rows`` with run indices ``run_indices``.

        The other rows go on. Row ``r`` then evolves bit for bit as a fresh
        single run with its new run index would (same seed): its initial
        state, command, camera timing plan and draws, disturbances and gyro
        all restart at its own local time zero. Rows may restart at any tick
        (between :meth:`advance` calls); the controller's state for those
        rows is the caller's to restart. Returns the observation at this tick
        (unchanged for the other rows).

        With ``setup`` (the same structure as the current one: step,
        duration, controller rate, plant, disturbance sources), the
        restarted rows take their per-run values (initial state, command,
        servo, camera, gyro, disturbance intensities) from it: a restarted
        row then evolves as a fresh run of ``setup`` would. The other rows
        keep the values they started with; :attr:`setup` stays the first one.
        """
        rows = np.asarray(rows, dtype=np.int64).reshape(-1)
        new_runs = np.asarray(run_indices, dtype=np.int64).reshape(-1)
        if new_runs.size != rows.size:
            raise ValueError(f"restart: {rows.size} rows but {new_runs.size} run indices")
        if rows.size == 0:
            return self._obs
        if np.any(rows < 0) or np.any(rows >= self.batch) or np.unique(rows).size != rows.size:
            raise ValueError(f"restart: rows must be distinct, in 0..{self.batch - 1}")
        if setup is not None:
            self._adopt(setup, rows)
        self.runs[rows] = new_runs
        self._start[rows] = self.k
        self._uniform = bool(np.all(self._start == self._start[0]))
        self._start0 = int(self._start[0])
        self._start_rows(rows)
        self._obs = self._make_obs()
        return self._obs

    def _start_rows(self, rows: np.ndarray) -> None:
        """Put rows at their local time zero: state, records, components, disturbance block."""
        nx = self._nx
        S = self._S
        runs = self.runs[rows]
        seed = self.seed

        def rng_for(name: str):
            return run_generators(seed, runs, name)

        S[0, :, rows] = 0.0
        S[0, :nx, rows] = self._x0[rows]
        f0 = nx + 1
        i = f0
        for j, (src, f) in enumerate(self._noise):
            gens = rng_for(src.component)
            for r, g in zip(rows, gens, strict=True):
                self._noise_rngs[j][r] = g
            sub = _take_filter(f, rows)
            S[0, i : i + f.n_states, rows] = initial_state(sub, gens).T
            i += f.n_states
        self.alive[rows] = True
        self.diverged_at[rows] = np.inf
        self.camera.start(rows, rng_for)
        X = S[0]
        if self.gyro is not None:
            self.gyro.start(rows, rng_for, X[self._p, rows])
        # records at local step 0
        self.rec_bank[0, rows] = X[self._phi, rows]
        if self.rec_ail is not None:
            self.rec_ail[0, rows] = X[nx, rows]
        if self.rec_rate is not None:
            self.rec_rate[0, rows] = X[self._p, rows]
        if self.rec_states is not None:
            self.rec_states[0, rows] = X[:nx, rows].T
        # disturbance inputs of the current block, from these rows' new clocks
        if self._W is not None:
            pos = self.k - self._w0
            rest = self._W.shape[0] - pos
            if rest > 0:
                self._W[pos:, :, rows] = self._make_block(rows, rest, np.zeros(rows.size, dtype=np.int64))

    # ================================================================ views
    def _view(self, row: int | None) -> np.ndarray:
        """Read-only view of one state row at the current step (made once per batch: it follows the state)."""
        v = self._views.get(row)
        if v is None:
            v = np.zeros(self.batch) if row is None else self._S[0, row].view()
            v.flags.writeable = False
            self._views[row] = v
        return v

    @property
    def bank(self) -> np.ndarray:
        """True bank angle φ, rad, ``(batch,)`` (read-only)."""
        return self._view(self._phi)

    @property
    def roll_rate(self) -> np.ndarray:
        """True roll rate p, rad/s, ``(batch,)`` (read-only)."""
        return self._view(self._p)

    @property
    def sideslip(self) -> np.ndarray:
        """True sideslip β, rad, ``(batch,)`` (read-only; zeros for a roll-only plant)."""
        return self._view(self._beta)

    @property
    def yaw_rate(self) -> np.ndarray:
        """True yaw rate r, rad/s, ``(batch,)`` (read-only; zeros for a roll-only plant)."""
        return self._view(self._r)

    @property
    def aileron(self) -> np.ndarray:
        """Aileron (servo) position, rad, ``(batch,)`` (read-only)."""
        return self._view(self._nx)

    @property
    def episode_step(self) -> np.ndarray:
        """Each run's local base step (since its episode started), ``(batch,)`` int."""
        return np.minimum(self.k - self._start, self.setup.n_steps)

    @property
    def episode_time_s(self) -> np.ndarray:
        """Each run's local time, s, ``(batch,)``."""
        return self.episode_step * self.setup.dt

    @property
    def finished(self) -> np.ndarray:
        """``(batch,)`` bool: runs whose episode has reached its end."""
        return self.k - self._start >= self.setup.n_steps

    @property
    def done(self) -> bool:
        """Every run's episode has reached its end."""
        if self._uniform:
            return self.k - self._start0 >= self.setup.n_steps
        return bool(self.finished.all())

    # ================================================================ loop
    def observe(self) -> Observation:
        """The controller's view at the current tick (pure: calling it again changes nothing)."""
        return self._obs

    def _make_obs(self) -> Observation:
        s = self.setup
        every, n = s.ctrl_every, s.n_steps
        if self._uniform:
            kl = min(self.k - self._start0, n)
            tick, t = kl // every, kl * s.dt
            cmd = (
                self._cmd[kl : kl + 1].repeat(self.batch) if self._cmd.ndim == 1 else self._cmd[:, kl].copy()
            )
        else:
            kl = self.episode_step
            tick, t = kl // every, kl * s.dt
            cmd = self._cmd[kl] if self._cmd.ndim == 1 else self._cmd[self._ar, kl]
        bank, valid, age = self.camera.read(tick, t)
        return Observation(
            t=t,
            dt=every * s.dt,
            bank=bank,
            valid=valid,
            age=age,
            bank_cmd=cmd,
            rate=None if self.gyro is None else self.gyro.read(),
        )

    def advance(self, u_cmd: np.ndarray) -> Observation | None:
        """Apply an aileron command (rad, ``(batch,)``) until the next tick.

        Returns the next observation (also given by :meth:`observe`), or
        ``None`` when every run's episode is over.
        """
        s = self.setup
        n, every, nx = s.n_steps, s.ctrl_every, self._nx
        u = np.asarray(u_cmd, dtype=float)
        if u.shape != (self.batch,):
            u = np.broadcast_to(u, (self.batch,))
        if np.count_nonzero(np.isfinite(u)) != u.size:
            bad_u = ~np.isfinite(u)
            self._diverge(bad_u)
            u = np.where(bad_u, 0.0, u)
        uniform = self._uniform
        if uniform:
            kl = self.k - self._start0
            if kl >= n:
                return None
            steps = min(every, n - kl)
            moving = None
        else:
            kl = self.k - self._start  # (batch,)
            steps = int(min(every, max(n - kl.min(), 0)))
            if steps == 0:
                return None
            if int(kl.max()) + steps <= n:  # every run moves the whole tick
                moving = None
            else:
                moving = left = np.minimum(np.maximum(n - kl, 0), every)  # steps each run still moves
        tick = kl // every
        if self.rec_cmd is not None:
            self._record_tick(tick, u)

        S, lim, mc = self._S, self._lim, self._max_change
        perturbed = self._gain is not None or self._delay_steps is not None
        if perturbed:  # the command changes within the tick: any run may bind
            near = self._ar
        else:
            S[:steps, -1] = u
            # While the command is held the lag's per-step change only shrinks,
            # so a run can meet a limit in this tick only if it does at its start.
            near = ((np.abs(u) > lim) | (self._alpha * np.abs(u - S[0, nx]) > mc)).nonzero()[0]
        frozen = np.count_nonzero(self.alive) != self.batch
        w_lo, w_hi = self._w_lo, self._w_hi
        single = self._groups[0][0] if len(self._groups) == 1 else None
        for j in range(steps):
            X, Y = S[j], S[j + 1]
            if perturbed:
                X[-1] = self._perturbed_command(kl + j, u)
            if single is not None:
                np.matmul(single, self._Sfull[j], out=self._Sfull[j + 1, :-1])
            else:
                for m, rows in self._groups:
                    Y[:-1, rows] = matmul_cols(m, X[:, rows])
            if near.size:
                self._limit_servo(X, Y, near, self._Sfull[j])
            if w_hi:
                Y[w_lo:w_hi] += self._block_row(self.k + j)
            if frozen or moving is not None:
                keep = self.alive if moving is None else self.alive & (left > j)
                Y[:-1] = np.where(keep, Y[:-1], X[:-1])
        S[0] = S[steps]
        self._record_steps(kl, steps)
        self.k += steps
        inside = np.abs(S[0, self._phi]) < s.divergence_rad
        if np.count_nonzero(inside) != self.batch:
            self._diverge(~inside)
        if self.done:
            return None
        self._obs = self._make_obs()
        return self._obs

    # ================================================================ helpers
    def _record_tick(self, tick, u: np.ndarray) -> None:
        if self.rec_cmd is None:
            return
        obs = self._obs
        if np.ndim(tick) == 0:
            self.rec_cmd[tick] = u
            if self.rec_meas is not None:
                self.rec_meas[tick], self.rec_valid[tick], self.rec_age[tick] = obs.bank, obs.valid, obs.age
        else:
            t = np.minimum(tick, self.rec_cmd.shape[0] - 1)
            ar = self._ar
            self.rec_cmd[t, ar] = u
            if self.rec_meas is not None:
                self.rec_meas[t, ar], self.rec_valid[t, ar], self.rec_age[t, ar] = (
                    obs.bank,
                    obs.valid,
                    obs.age,
                )

    def _record_steps(self, kl, steps: int) -> None:
        """Record the tick's base steps 1..steps (each run at its local step) and sample the gyro."""
        S, nx, n = self._S, self._nx, self.setup.n_steps
        g = self.gyro
        if not isinstance(kl, np.ndarray):  # every run on one clock
            sl = slice(kl + 1, kl + steps + 1)
            self.rec_bank[sl] = S[1 : steps + 1, self._phi]
            if self.rec_ail is not None:
                self.rec_ail[sl] = S[1 : steps + 1, nx]
            if self.rec_rate is not None:
                self.rec_rate[sl] = S[1 : steps + 1, self._p]
            if self.rec_states is not None:
                self.rec_states[sl] = S[1 : steps + 1, :nx].transpose(0, 2, 1)
            if g is not None:  # only the newest sample of the tick is ever read
                due = g.sample_at
                for j in range(steps, 0, -1):
                    if due[kl + j] >= 0:
                        g.sample(kl + j, S[j, self._p])
                        break
            return
        ar = self._ar
        k = np.minimum(kl[None, :] + np.arange(1, steps + 1)[:, None], n)  # (steps, batch) local steps
        self.rec_bank[k, ar] = S[1 : steps + 1, self._phi]  # a stopped run rewrites its last value
        if self.rec_ail is not None:
            self.rec_ail[k, ar] = S[1 : steps + 1, nx]
        if self.rec_rate is not None:
            self.rec_rate[k, ar] = S[1 : steps + 1, self._p]
        if self.rec_states is not None:
            self.rec_states[k, ar] = S[1 : steps + 1, :nx].transpose(0, 2, 1)
        if g is not None:
            g.sample_newest(kl, S[1 : steps + 1, self._p])

    def _perturbed_command(self, kl, u: np.ndarray) -> np.ndarray:
        """Aileron command reaching the servo at local step ``kl`` with the margin perturbation."""
        cmd = u
        if self._delay_steps is not None:
            src = kl - self._delay_steps  # base step whose command arrives now
            tick = np.floor_divide(src, self.setup.ctrl_every)
            ok = src >= 0
            cmd = np.where(ok, self.rec_cmd[np.clip(tick, 0, None), self._ar], 0.0)
        if self._gain is not None:
            cmd = cmd * self._gain
        return cmd

    def _limit_servo(
        self, X: np.ndarray, Y: np.ndarray, rows: np.ndarray, X_padded: np.ndarray | None = None
    ) -> None:
        """Clip the servo of ``rows`` where a limit binds; redo those runs' plant step.

        A limit binds when the free step moves the servo by more than the
        rate limit allows or ends beyond the position limit; both are decided
        with the limits themselves (never by comparing a clipped value with
        the free one, which last-bit rounding would flip). ``X_padded`` is
        ``X`` in the state buffer that pads a lone run to two columns (see
        :func:`matmul_cols`): when every run binds, the redone product reads
        it directly instead of doubling the column.
        """
        nx = self._nx
        every_run = rows.size == X.shape[1]
        if every_run:  # slices, no gathers
            lim, mc, before, free = self._lim, self._max_change, X[nx], Y[nx]
        else:
            lim, mc, before, free = self._lim[rows], self._max_change[rows], X[nx, rows], Y[nx, rows]
        bind = (np.abs(free - before) > mc) | (np.abs(free) > lim)
        hits = np.count_nonzero(bind)
        if hits == 0:
            return
        if hits < bind.size:
            r = rows[bind]
            before, free, lim, mc = before[bind], free[bind], lim[bind], mc[bind]
        else:
            r = slice(None) if every_run else rows
        change = np.minimum(np.maximum(free - before, -mc), mc)
        clipped = np.minimum(np.maximum(before + change, -lim), lim)
        mean = 0.5 * (before + clipped)  # straight-line servo motion
        if not isinstance(r, slice):  # some runs: gather their columns
            plant = matmul_cols(self._redo, X[:, r])
        elif X_padded is not None:  # every run: the padded buffer (the same BLAS kernel, no copy)
            plant = np.matmul(self._redo, X_padded)[:, : X.shape[1]]
        else:
            plant = matmul_cols(self._redo, X)
        Y[:nx, r] = plant + self._b_ail[:, None] * mean
        Y[nx, r] = clipped

    def _block_row(self, k: int) -> np.ndarray:
        """Disturbance inputs of global step ``k`` (rows ``[w_lo, w_hi)`` of the state)."""
        W = self._W
        if W is None or not (self._w0 <= k < self._w0 + W.shape[0]):
            self._w0 = k
            self._W = W = self._make_block(self._ar, _BLOCK, k - self._start)
        return W[k - self._w0]

    def _make_block(self, rows: np.ndarray, n: int, k_local: np.ndarray) -> np.ndarray:
        """Inputs ``(n, w_hi - w_lo, len(rows))`` of ``n`` steps of ``rows`` from local steps ``k_local``."""
        nx, lo = self._nx, self._w_lo
        m = rows.size
        W = np.zeros((n, self._w_hi - lo, m))
        if self._signals:
            t = (np.asarray(k_local)[None, :] + np.arange(n)[:, None]) * self.setup.dt
            chans: dict[int, np.ndarray] = {}
            for src in self._signals:
                sub = P.take(src, rows) if m != self.batch else src
                for ch, v in sub.values(t).items():
                    chans[ch] = v if ch not in chans else chans[ch] + v
            bd = self._dp.bd_disturbance
            for i in range(nx):
                for ch in range(N_CHANNELS):
                    if ch in chans and bd[i, ch] != 0.0:
                        W[:, i - lo] += bd[i, ch] * chans[ch]
        i = nx + 1
        for j, (_, f) in enumerate(self._noise):
            gens = [self._noise_rngs[j][r] for r in rows]
            sub = _take_filter(f, rows) if m != self.batch else f
            W[:, i - lo : i - lo + f.n_states] = noise_block(sub, gens, n)
            i += f.n_states
        return W

    def _diverge(self, rows: np.ndarray) -> None:
        rows = rows & self.alive
        self.diverged_at[rows] = self.episode_time_s[rows]
        self.alive &= ~rows

    def trace(self) -> Trace:
        """The recorded batch (``record="full"``; every run on one clock)."""
        if self.record != "full":
            raise ValueError(f"no trace: this batch records {self.record!r} (use record='full')")
        if not self._uniform:
            raise ValueError("no trace: runs were restarted at different times")
        s = self.setup
        kl = min(self.k - self._start0, s.n_steps)
        n_t = kl + 1
        t = np.arange(n_t) * s.dt
        n_tick = -(-kl // s.ctrl_every)
        ticks = s.tick_steps[:n_tick]
        cmd = self._cmd
        return Trace(
            t=t,
            bank_cmd=np.broadcast_to(cmd[:n_t], (self.batch, n_t)) if cmd.ndim == 1 else cmd[:, :n_t],
            bank=self.rec_bank[:n_t].T,
            roll_rate=self.rec_rate[:n_t].T,
            aileron=self.rec_ail[:n_t].T,
            t_ctrl=ticks * s.dt,
            bank_meas=self.rec_meas[:n_tick].T,
            valid=self.rec_valid[:n_tick].T,
            age=self.rec_age[:n_tick].T,
            aileron_cmd=self.rec_cmd[:n_tick].T,
            states=None if self.rec_states is None else self.rec_states[:n_t].transpose(1, 0, 2),
            state_names=s.plant.state_names,
            diverged_at=self.diverged_at.copy(),
            run_index=self.runs.copy(),
            seed=self.seed,
        )


def _same_plant(a, b) -> bool:
    if a is b:
        return True
    return all(np.array_equal(getattr(a, k), getattr(b, k)) for k in ("a", "b_control", "b_disturbance"))


def _take_filter(f, rows: np.ndarray):
    """A noise filter with its per-run scale restricted to ``rows``."""
    from dataclasses import replace

    return replace(f, scale=np.ascontiguousarray(f.scale[:, rows]))


def simulate(
    setup: LoopSetup,
    controller,
    *,
    seed: int,
    run_indices: Sequence[int] = (0,),
    record_states: bool = False,
) -> Trace:
    """Run a batch of closed-loop runs and return their trace (see :func:`rollrig.sim.driver.run_batch`)."""
    from .driver import run_batch

    return run_batch(setup, controller, seed=seed, run_indices=run_indices, record_states=record_states).trace
