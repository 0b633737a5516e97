"""Stability margins by experiment, for any controller (PID, LQG, user, learned).

The loop is broken where the analytic margins break it: at the aileron
command (:meth:`sim.core.Stepper.reset` ``input_gain`` / ``input_delay_s``).
Three margins are searched:

* **gain margin** — the largest factor on the aileron command at which the
  loop still settles;
* **delay margin** — the largest extra pure delay of the aileron command
  (on the base-step grid) at which it still settles;
* **loss-rate margin** — the largest independent frame-loss probability at
  which it still settles (the camera's per-run ``dropout_prob``). Losses are
  random: every candidate shares one random stream (same seed and run index),
  so a frame lost at a lower probability is lost at every higher one, and the
  answer holds for that seed.

The quiet copy
--------------
The experiment runs a noise-free copy of the scenario (:func:`quiet_scenario`):
camera noise, bias, quantisation, wandering error, wild readings, frame
losses, classifier decoding and timing jitter off (the mean of the random
extra latency is added to the fixed latency, as in the analytic delay
budget); gyro noise and bias off; no turbulence, gusts or moment bias.
Kept: latency, frame rate, exposure, camera scale and range, controller rate,
servo lag and limits. The run starts at a small bank (``excitation_deg``,
default 1°, divided by the member's gain factor so that every member's first
command is the nominal loop's) with a zero bank command, so at the margins'
boundaries the servo limits do not bind and the linear answer applies; well beyond a
boundary the growth saturates into a limit cycle, which the criterion
below still counts as not settling.

Settling criterion
------------------
From the last two windows of equal length ``W`` at the end of the run: the
run *settles* when

1. it did not diverge and ``|bank|`` never crossed the scenario's bank limit,
2. the peak ``|bank|`` in the last window is below the excitation, and
3. the peak ``|bank|`` *and* the peak ``|roll rate|`` in the last window are
   smaller than in the window before (a shrinking envelope; the rate is
   watched too because it weights the oscillation over slow, non-oscillating
   modes such as the integrator's).

``W`` covers at least two periods of the slowest oscillation of interest
(from the analytic crossovers when a linear model exists, else 4 s).

Search
------
Each round simulates every candidate of all three margins as members of one
batch (``3 × candidates`` runs), then narrows each bracket to the interval
between the largest settling candidate and the first one that does not
settle; ``rounds`` rounds of ``candidates`` values shrink a bracket by about
``(candidates + 1)^rounds``. The reported tolerance is half the final
bracket (for the delay at least half the base step).
"""

from __future__ import annotations

import dataclasses
import math
import time
from dataclasses import dataclass, replace

import numpy as np
from rollrig.controllers.base import Controller
from rollrig.sim.build import build_setup, make_controller
from rollrig.sim.core import LoopSetup
from rollrig.sim.driver import Perturbation, run_batch
from rollrig.sim.scenario import Scenario

__all__ = [
    "LOSS_RESOLUTION",
    "EmpiricalSettings",
    "MarginEstimate",
    "EmpiricalMargins",
    "quiet_scenario",
    "settle_verdict",
    "empirical_margins",
    "bank_step_time",
]


#: Grid of the loss-rate search (a finer answer would only describe one seed's draws).
LOSS_RESOLUTION = 0.01


@dataclass(frozen=True)
class EmpiricalSettings:
    """How the margins are searched.

    Parameters
    ----------
    excitation_deg : deg
        Initial bank of every run (command 0).
    base_step_s : s or None
        Finest base step wanted; the scenario's step is divided by a whole
        number to reach at most this. It is the delay margin's resolution.
        Default ``None``: the scenario's own step, so that frames are captured
        at the scenario's instants (a finer grid rounds capture times
        differently — 30 Hz frames on a 10 ms grid are captured at 0/30/70 ms,
        on 5 ms at 0/35/65 ms — and measures a slightly different loop;
        :attr:`EmpiricalMargins.frames_moved` says when that happened).
    window_s : s or None
        Length of each of the two judging windows (``None``: automatic).
    oscillation_rad_s : rad/s or None
        Slowest oscillation of interest, used to size the windows when
        ``window_s`` is not given (e.g. the analytic gain crossover).
    candidates : int
        Candidates per margin per round (batch members).
    rounds : int
        Narrowing rounds.
    gain_max : 1
        Largest gain factor tried (the first round spans 1 … gain_max
        geometrically; one extension to ``gain_max²`` if all settle).
    delay_max_s : s
        Largest extra delay tried in the first round (extended ×4 once).
    loss_max : 1
        Largest loss probability tried (< 1).
    loss : bool
        Also search the loss-rate margin.
    camera : bool
        Also search the camera-delay margin (extra latency of the camera
        reading alone) when the scenario has a gyro: a loop taking its
        derivative from the gyro tolerates more camera delay than delay at
        the aileron command.
    seed : int
        Seed of the loss draws.
    """

    excitation_deg: float = 1.0
    base_step_s: float | None = None
    window_s: float | None = None
    oscillation_rad_s: float | None = None
    candidates: int = 16
    rounds: int = 2
    gain_max: float = 32.0
    delay_max_s: float = 2.0
    loss_max: float = 0.98
    loss: bool = True
    camera: bool = True
    seed: int = 0

    def __post_init__(self) -> None:
        if not 0.0 < self.excitation_deg <= 30.0:
            raise ValueError("excitation_deg: allowed 0 < value ≤ 30")
        if self.candidates < 2 or self.rounds < 1:
            raise ValueError("candidates ≥ 2 and rounds ≥ 1 required")
        if not (self.gain_max > 1.0 and self.delay_max_s > 0.0 and 0.0 < self.loss_max < 1.0):
            raise ValueError("need gain_max > 1, delay_max_s > 0, 0 < loss_max < 1")


@dataclass(frozen=True)
class MarginEstimate:
    """One empirical margin as a bracket.

    Attributes
    ----------
    name : str
        ``"gain"`` (factor, 1), ``"delay"`` (s) or ``"loss"`` (probability).
    settles_at : float
        Largest value tried at which the loop settled (0 for gain 1 … see
        ``nominal``; 1 for the gain factor baseline).
    fails_at : float
        Smallest value tried at which it did not settle (``inf`` if none did
        within the range tried).
    resolution : float
        Grid quantum of the perturbation (the base step for the delay; 0
        for continuous values).
    saturation_limited : bool
        The first failing value drove the servo to a position or rate limit
        within the first eighth of a judging window (before an instability
        could have grown there): the failure may be the limit's, not
        the loop's, so the margin is *at least* ``settles_at`` (a linear
        analysis may find more).
    """

    name: str
    settles_at: float
    fails_at: float
    resolution: float = 0.0
    saturation_limited: bool = False

    @property
    def bounded(self) -> bool:
        """Whether a failing value was found (the margin is bracketed)."""
        return math.isfinite(self.fails_at)

    @property
    def value(self) -> float:
        """Bracket mid-point (the largest settling value when unbounded)."""
        if not self.bounded:
            return self.settles_at
        return 0.5 * (self.settles_at + self.fails_at)

    @property
    def tolerance(self) -> float:
        """Half the bracket, at least half the resolution (``inf`` when unbounded)."""
        if not self.bounded:
            return math.inf
        return max(0.5 * (self.fails_at - self.settles_at), 0.5 * self.resolution)


@dataclass(frozen=True)
class EmpiricalMargins:
    """Empirical gain, delay and loss-rate margins of one scenario.

    Attributes
    ----------
    gain, delay : MarginEstimate
        Gain factor (1) and extra delay (s) at the aileron command.
    loss : MarginEstimate or None
        Frame-loss probability (``None`` when not searched).
    nominal_settles : bool
        Whether the unperturbed quiet loop settles (if not, every margin is 0).
    base_step_s, window_s, duration_s : s
        Simulation step, judging-window length and run length.
    excitation_rad : rad
        Initial bank.
    rounds, candidates : int
        Search size; ``runs_simulated`` counts every batch member.
    elapsed_s : s
        Wall time of the search.
    seed : int
        Seed of the loss draws.
    camera : MarginEstimate or None
        Extra camera latency (s) at which the loop still settles (``None``
        when not searched: no gyro in the scenario).
    frames_moved : bool
        The search refined the base step and that moved frame capture
        instants: it measured a slightly different loop than the scenario's.
    """

    gain: MarginEstimate
    delay: MarginEstimate
    loss: MarginEstimate | None
    nominal_settles: bool
    base_step_s: float
    window_s: float
    duration_s: float
    excitation_rad: float
    rounds: int
    candidates: int
    runs_simulated: int
    elapsed_s: float
    seed: int
    camera: MarginEstimate | None = None
    frames_moved: bool = False

    @property
    def gain_margin_db(self) -> float:
        """Gain margin in dB, ``20 log10(gain.value)``."""
        v = self.gain.value
        return 20.0 * math.log10(v) if v > 0 else -math.inf


# ------------------------------------------------------------------ quiet copy
def _replace_known(obj, **changes):
    """``dataclasses.replace`` with only the fields ``obj`` has."""
    names = {f.name for f in dataclasses.fields(obj)}
    return replace(obj, **{k: v for k, v in changes.items() if k in names})


def quiet_scenario(sc: Scenario, base_step_s: float | None = None) -> Scenario:
    """A noise-free copy of a scenario (see module docstring for what is kept).

    Parameters
    ----------
    sc : Scenario
    base_step_s : s, optional
        Finest base step wanted: the scenario's step is divided by the smallest
        whole number that brings it to at most this value (the controller and
        frame schedules stay on the grid).

    Returns
    -------
    Scenario
    """
    cam = sc.camera
    latency = np.asarray(cam.latency_s, dtype=float) + float(getattr(cam, "latency_jitter_s", 0.0) or 0.0)
    quiet_cam = _replace_known(
        cam,
        latency_s=float(latency) if latency.ndim == 0 else latency,
        noise_rad=0.0,
        bias_rad=0.0,
        quantization_rad=0.0,
        dropout_prob=0.0,
        jitter_s=0.0,
        latency_jitter_s=0.0,
        wander_rad=0.0,
        outlier_prob=0.0,
        outlier_rad=0.0,
        classifier=None,
        bursts=None,
    )
    gyro = None if sc.gyro is None else _replace_known(sc.gyro, noise_rad_s=0.0, bias_rad_s=0.0)
    out = replace(sc, camera=quiet_cam, gyro=gyro, disturbances=())
    if base_step_s is not None and base_step_s < sc.run.base_step_s:
        m = int(math.ceil(sc.run.base_step_s / base_step_s - 1e-9))
        out = out.with_run(base_step_s=sc.run.base_step_s / m)
    return out


# ------------------------------------------------------------------ verdict
def settle_verdict(
    bank: np.ndarray,
    rate: np.ndarray,
    window_steps: int,
    excitation_rad: float | np.ndarray,
    bank_limit_rad: float,
    diverged: np.ndarray,
    band_rad: float | np.ndarray = math.inf,
) -> tuple[np.ndarray, np.ndarray]:
    """Which runs settle, by the criterion of the module docstring.

    Parameters
    ----------
    bank, rate : (batch, n_t) rad, rad/s
        True bank error (command 0) and roll rate on the base grid.
    window_steps : int
        Length of each judging window in base steps (``2·window_steps < n_t``).
    excitation_rad : rad, float or (batch,)
        Initial bank; the last window's peak must be below it.
    bank_limit_rad : rad
        Crossing it anywhere means not settling.
    diverged : (batch,) bool
        Runs the core declared diverged.
    band_rad : rad, float or (batch,)
        Optional settling band: the last window's peak must also be within it
        (used for the loss-rate margin).

    Returns
    -------
    settled : (batch,) bool
    growth : (batch,) float
        Larger of the bank and rate envelope ratios (last window / previous).
    """
    bank = np.nan_to_num(np.asarray(bank, float), nan=np.inf)
    rate = np.nan_to_num(np.asarray(rate, float), nan=np.inf)
    w = int(window_steps)
    if w < 1 or 2 * w >= bank.shape[1]:
        raise ValueError(f"window_steps = {w} does not fit twice in {bank.shape[1]} samples")
    tiny = 1e-9 * excitation_rad

    def ratio(x: np.ndarray, floor: float) -> np.ndarray:
        a = np.max(np.abs(x[:, -2 * w : -w]), axis=1)
        b = np.max(np.abs(x[:, -w:]), axis=1)
        with np.errstate(divide="ignore", invalid="ignore"):
            r = np.where(a > floor, b / np.where(a > floor, a, 1.0), 0.0)
        return r, b

    rb, peak = ratio(bank, tiny)
    rr, _ = ratio(rate, tiny)
    growth = np.maximum(rb, rr)
    crossed = np.any(np.abs(bank) > bank_limit_rad, axis=1)
    within = (peak < excitation_rad) & (peak <= band_rad)
    settled = ~np.asarray(diverged, bool) & ~crossed & within & (growth < 1.0)
    return settled, growth


# ------------------------------------------------------------------ search
def _controller_for(sc: Scenario, controller: Controller | None, allow_code: bool) -> Controller:
    return (
        controller
        if controller is not None
        else make_controller(sc.controller, allow_code=allow_code, scenario=sc)
    )


def _window_s(settings: EmpiricalSettings) -> float:
    if settings.window_s is not None:
        return float(settings.window_s)
    w = settings.oscillation_rad_s
    period = 2.0 * math.pi / w if w is not None and w > 0 and math.isfinite(w) else 4.0
    return max(2.0 * period, 3.0)


def _next_candidates(lo: float, hi: float, n: int, geometric: bool) -> np.ndarray:
    """``n`` values strictly inside ``(lo, hi)``."""
    if geometric:
        return np.geomspace(lo, hi, n + 2)[1:-1]
    return np.linspace(lo, hi, n + 2)[1:-1]


class _Bracket:
    """Narrowing search state for one margin."""

    def __init__(
        self,
        name: str,
        first: np.ndarray,
        extend_to: float,
        geometric: bool,
        rounds: int,
        quantum: float = 0.0,
        cap: float = math.inf,
    ) -> None:
        self.name, self.geometric, self.quantum, self.cap = name, geometric, quantum, cap
        self.refinements_left = rounds - 1
        self.lo = 1.0 if geometric else 0.0  # known to settle (checked by the nominal member)
        self.hi = math.inf
        self.top = float(first[-1])
        self.extend_to = extend_to
        self.extended = False
        self.hi_saturated = False
        self.current = self._snap(first)

    def _snap(self, values: np.ndarray) -> np.ndarray:
        if self.quantum > 0:
            values = np.unique(np.rint(values / self.quantum) * self.quantum)
            values = values[(values > self.lo + 1e-12) & (values < self.hi - 1e-12)]
        return np.minimum(values, self.cap)

    def update(self, settled: np.ndarray, n: int, saturated: np.ndarray | None = None) -> None:
        vals = self.current
        if vals.size:
            bad = np.nonzero(~settled)[0]
            if bad.size:
                first_bad = int(bad[0])
                self.hi = float(vals[first_bad])
                self.hi_saturated = bool(saturated is not None and saturated[first_bad])
                if first_bad > 0:
                    self.lo = float(vals[first_bad - 1])
            else:
                self.lo = float(vals[-1])
        if math.isinf(self.hi):
            if self.extended or self.lo >= self.cap or self.refinements_left <= 0:
                self.current = np.array([])
                return
            self.extended = True
            new = (
                np.geomspace(self.lo, self.extend_to, n + 1)[1:]
                if self.geometric
                else np.linspace(self.lo, self.extend_to, n + 1)[1:]
            )
            self.current = self._snap(new)
            return
        if self.refinements_left <= 0:
            self.current = np.array([])
            return
        self.refinements_left -= 1
        self.current = self._snap(_next_candidates(self.lo, self.hi, n, self.geometric))

    def estimate(self) -> MarginEstimate:
        return MarginEstimate(self.name, self.lo, self.hi, self.quantum, self.hi_saturated)


def _pad(values: np.ndarray, n: int, fill: float) -> np.ndarray:
    out = np.full(n, fill)
    out[: values.size] = values
    return out


def _supports_per_run_loss(cam) -> bool:
    try:
        _replace_known(cam, dropout_prob=np.array([0.0, 0.5]))
    except (ValueError, TypeError):
        return False
    return "dropout_prob" in {f.name for f in dataclasses.fields(cam)}


def empirical_margins(
    sc: Scenario,
    settings: EmpiricalSettings | None = None,
    *,
    controller: Controller | None = None,
    allow_code: bool = False,
) -> EmpiricalMargins:
    """Gain, delay and loss-rate margins by simulation (see module docstring).

    Parameters
    ----------
    sc : Scenario
        The scenario (its noise, losses and disturbances are switched off).
    settings : EmpiricalSettings, optional
    controller : Controller, optional
        Overrides the scenario's controller (any object with ``reset`` and
        ``step``: LQG, learned policy, user class).
    allow_code : bool
        Permission to import the scenario's own user controller class.

    Returns
    -------
    EmpiricalMargins
    """
    t0 = time.perf_counter()
    st = settings or EmpiricalSettings()
    q = quiet_scenario(sc, st.base_step_s)
    ctrl = _controller_for(q, controller, allow_code)
    dt = q.run.base_step_s
    window = _window_s(st)
    duration = 3.0 * window
    n_steps = int(math.ceil(duration / dt))
    w_steps = int(round(window / dt))
    phi0 = math.radians(st.excitation_deg)
    base = build_setup(q.with_run(duration_s=n_steps * dt))
    x0 = np.zeros(q.plant.n_states)
    x0[q.plant.phi_index] = phi0
    base = replace(base, bank_cmd=np.zeros(n_steps + 1), x0=x0)

    n = st.candidates
    gain = _Bracket("gain", np.geomspace(1.0, st.gain_max, n + 1)[1:], st.gain_max**2, True, st.rounds)
    delay = _Bracket(
        "delay",
        np.linspace(0.0, st.delay_max_s, n + 1)[1:],
        4.0 * st.delay_max_s,
        False,
        st.rounds,
        quantum=dt,
    )
    do_loss = st.loss and _supports_per_run_loss(q.camera)
    loss = (
        _Bracket(
            "loss",
            np.linspace(0.0, st.loss_max, n + 1)[1:],
            st.loss_max,
            False,
            st.rounds,
            quantum=LOSS_RESOLUTION,
            cap=st.loss_max,
        )
        if do_loss
        else None
    )
    camera = (
        _Bracket(
            "camera",
            np.linspace(0.0, st.delay_max_s, n + 1)[1:],
            4.0 * st.delay_max_s,
            False,
            st.rounds,
            quantum=dt,
            cap=_stale_cap(q, dt),
        )
        if st.camera and q.gyro is not None
        else None
    )
    frac = q.criteria.settle_band_frac
    band_frac = float(frac) if frac is not None else 0.05
    brackets = [b for b in (gain, delay, loss, camera) if b is not None]

    nominal = True
    runs_simulated = 0
    rnd = 0
    while any(b.current.size for b in brackets):  # at most rounds + 1 (one range extension)
        members = 1 + len(brackets) * n  # member 0: the nominal loop
        g = np.ones(members)
        d = np.zeros(members)
        p = np.zeros(members)
        c = np.zeros(members)
        offset = 1
        slots = {}
        for b in brackets:
            slots[b.name] = slice(offset, offset + b.current.size)
            target = {"gain": g, "delay": d, "loss": p, "camera": c}[b.name]
            target[offset : offset + n] = _pad(b.current, n, target[0])
            offset += n
        setup = base
        if loss is not None:
            setup = replace(setup, camera=_replace_known(setup.camera, dropout_prob=p))
        if camera is not None:
            setup = replace(
                setup,
                camera=_replace_known(setup.camera, latency_s=np.asarray(base.camera.latency_s, float) + c),
            )
        # The loop is linear while the servo limits do not bind, and the verdict only compares
        # the envelope with itself and with the start: each member starts smaller by its gain
        # factor (per-run initial state), so its first command equals the nominal loop's.
        phi_r = phi0 / np.maximum(1.0, g)
        setup = replace(setup, x0=np.outer(phi_r / phi0, base.x0))
        band = np.full(members, math.inf)
        if loss is not None:
            band[slots["loss"]] = band_frac * phi_r[slots["loss"]]
        settled, saturated = _simulate(
            setup, ctrl, g, d, st.seed, w_steps, phi_r, q.criteria.bank_limit_rad, band
        )
        runs_simulated += members
        if rnd == 0 and not settled[0]:
            nominal = False
            break
        rnd += 1
        for b in brackets:
            if b.current.size:
                k = b.current.size
                b.update(settled[slots[b.name]][:k], n, saturated[slots[b.name]][:k])

    if not nominal:
        zero = lambda name, res=0.0: MarginEstimate(name, 0.0, 0.0, res)  # noqa: E731
        g_est, d_est = MarginEstimate("gain", 1.0, 1.0), zero("delay", dt)
        l_est = zero("loss") if loss is not None else None
        c_est = zero("camera", dt) if camera is not None else None
    else:
        g_est, d_est = gain.estimate(), delay.estimate()
        l_est = loss.estimate() if loss is not None else None
        c_est = camera.estimate() if camera is not None else None
    return EmpiricalMargins(
        gain=g_est,
        delay=d_est,
        loss=l_est,
        nominal_settles=nominal,
        base_step_s=dt,
        window_s=w_steps * dt,
        duration_s=n_steps * dt,
        excitation_rad=phi0,
        rounds=st.rounds,
        candidates=n,
        runs_simulated=runs_simulated,
        elapsed_s=time.perf_counter() - t0,
        seed=st.seed,
        camera=c_est,
        frames_moved=_frames_moved(sc, dt),
    )


def _stale_cap(q: Scenario, dt: float) -> float:
    """Largest extra camera latency before a PID sees only stale readings (s; inf otherwise).

    Beyond it the PID holds its output instead of closing the loop on the camera,
    which is not the loop whose margin is sought.
    """
    pid = getattr(q.controller, "pid", None)
    if q.controller.kind != "pid" or pid is None:
        return math.inf
    latency = float(np.max(np.asarray(q.camera.latency_s, float)))
    return max(dt, pid.stale_after_s - latency - 1.0 / float(q.camera.frame_rate_hz) - dt)


def _frames_moved(sc: Scenario, dt: float) -> bool:
    """Whether frame capture instants on a grid of step ``dt`` differ from the scenario's."""
    dt0 = sc.run.base_step_s
    if abs(dt - dt0) <= 1e-12 * dt0:
        return False
    period = 1.0 / float(sc.camera.frame_rate_hz)
    k = np.arange(200)
    return not np.allclose(np.rint(k * period / dt) * dt, np.rint(k * period / dt0) * dt0, rtol=0, atol=1e-9)


def _simulate(
    setup: LoopSetup,
    ctrl: Controller,
    gain: np.ndarray,
    delay: np.ndarray,
    seed: int,
    w_steps: int,
    phi0: float | np.ndarray,
    bank_limit: float,
    band: np.ndarray,
) -> tuple[np.ndarray, np.ndarray]:
    """Settle verdicts of a batch and whether each run's servo met a limit in the first window."""
    batch = gain.size
    # One run index for every member: identical random streams (nested losses).
    tr = run_batch(
        setup, ctrl, seed=seed, run_indices=[0] * batch, perturbation=Perturbation(gain, delay)
    ).trace
    settled, _ = settle_verdict(
        tr.bank, tr.roll_rate, w_steps, phi0, bank_limit, np.isfinite(tr.diverged_at), band
    )
    # the first eighth of a window: a quarter of the slowest oscillation's period
    return settled, _servo_saturated(tr.aileron[:, : max(w_steps // 8, 2)], setup.actuator, setup.dt)


def _servo_saturated(aileron: np.ndarray, actuator, dt: float) -> np.ndarray:
    """Runs whose servo sat at its position limit or moved at its rate limit (within 0.1 %)."""
    pos = np.max(np.abs(aileron), axis=1) >= 0.999 * actuator.limit_rad
    rate = (
        np.max(np.abs(np.diff(aileron, axis=1)), axis=1, initial=0.0)
        >= 0.999 * actuator.rate_limit_rad_s * dt
    )
    return pos | rate


# ------------------------------------------------------------------ roll performance
def bank_step_time(
    sc: Scenario,
    bank_change_deg: float,
    *,
    overshoot_command: float = 1.05,
    duration_s: float = 10.0,
    controller: Controller | None = None,
    allow_code: bool = False,
) -> float:
    """Closed-loop time to bank through ``bank_change_deg`` from wings level.

    The quiet copy of the scenario (no noise, losses or disturbances; servo
    limits, camera delay and range kept) starts wings level and at t = 0 is
    commanded to ``overshoot_command × bank_change_deg``, slightly beyond the
    angle so that a response without overshoot still passes through it. The
    time is the first base step at which the true bank reaches the angle
    (MIL-F-8785C Table IXa times a bank *change*).

    Parameters
    ----------
    sc : Scenario
    bank_change_deg : deg
        The angle to bank through (60° or 30°; see
        :func:`sim.analysis.handling.roll_performance_bank_change_deg`).
    overshoot_command : 1
        Command as a multiple of the angle (≥ 1).
    duration_s : s
        Simulated time.
    controller : Controller, optional
    allow_code : bool

    Returns
    -------
    float, s
        Time to bank through the angle; ``inf`` if never reached.
    """
    if overshoot_command < 1.0:
        raise ValueError("overshoot_command must be ≥ 1")
    q = quiet_scenario(sc)
    ctrl = _controller_for(q, controller, allow_code)
    dt = q.run.base_step_s
    n = int(math.ceil(duration_s / dt))
    setup = build_setup(q.with_run(duration_s=n * dt))
    target = math.radians(bank_change_deg)
    setup = replace(setup, bank_cmd=np.full(n + 1, overshoot_command * target), x0=np.zeros(q.plant.n_states))
    bank = run_batch(setup, ctrl, seed=0, run_indices=[0]).trace.bank[0]
    hit = np.nonzero(bank >= target)[0]
    return float(hit[0] * dt) if hit.size else math.inf
