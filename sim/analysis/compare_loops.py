"""Linear loops of the comparison's controllers, broken at the aileron command.

Every loop here is one :class:`ControllerLoop`: the aileron command ``u``
goes through the controller's hold into the aircraft + servo
(:func:`rollrig.sim.build.loop_model`); the controller's inputs are sums of
the aircraft's bank and roll rate (and, for a Smith predictor, of its own
model's bank), each with its own delay; the controller maps them back to
``u``. Negative feedback convention: ``1 + L = 0`` at instability. The delay
budget is the PID's (:mod:`.loop_from_scenario`): the camera's effective
delay ``τ_c`` (:func:`.loop_from_scenario.camera_delay`: latency + mean
frame hold at the ticks + exposure mid-point; the LQG's own, see
:mod:`.compare_loops_lqg`), the controller's hold, and ``τ_g``, the mean age
of the gyro sample read at the ticks (from the sampling schedule: zero for
a 100 Hz gyro read at 50 Hz; the PID's analysis takes half a sample
period, which on such a gyro costs a few dB of gain margin near a high
phase crossover).

* **Cascade** (continuous PI laws, rate and acceleration limits assumed not
  to bind)::

      L(jω) = C_r(jω) · [C_b(jω) · e^{−jωτ_c} · G_φ(jω) + e^{−jωτ_g} · G_p(jω)] · e^{−jωT/2}

  with ``C_b = k_bank + ki_bank/s``, ``C_r = k_rate + ki_rate/s``; the hold is
  its mean delay ``T/2``.
* **LQG** (:mod:`.compare_loops_lqg`) and **Smith predictor**
  (:mod:`.compare_loops_smith`): discrete controllers, evaluated at
  ``z = e^{jωT}``; their hold is the zero-order hold's own response
  ``(1 − e^{−jωT})/(jωT)`` (phase ``−ωT/2``, magnitude ``sinc``), and
  sampling is otherwise left out: the fundamental of the sampled-data loop,
  without aliases (Franklin, Powell & Workman, *Digital Control of Dynamic
  Systems*, 3rd ed. 1998, ch. 4 and 6), used up to the Nyquist frequency
  ``π/T`` only.

Margins from the frequency response with python-control (``control.frd``
and ``control.stability_margins``): gain and phase margins, and the delay
margin ``PM/ω_c`` — the extra delay at the aileron command that the loop
tolerates.

Closed-loop stability is checked separately (a frequency response alone
cannot tell): every delay is replaced by Padé approximants
(``control.pade``), the plant chain is discretised with a zero-order hold
(``control.c2d``) for a discrete controller, and the loop is closed; it is
stable when every closed-loop eigenvalue that moves the aircraft lies
strictly inside the unit circle (left half-plane for the cascade). An
eigenvalue whose mode the aircraft never sees (the Smith predictor's model
bank drifting on an integrating aircraft; an integrator with zero gain) is
left out. An unstable loop gets no margins: ``closed_loop_stable`` is
false and the margins are ``nan``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace

import numpy as np

from ..scenario import Scenario

__all__ = [
    "OMEGA",
    "FrequencyMargins",
    "ControllerLoop",
    "cascade_loop",
    "cascade_response",
    "frequency_margins",
    "loop_margins",
    "analytic_loop",
    "pade_delay",
]

#: Grid of the stored loop responses (rad/s).
OMEGA = np.logspace(-2, 2.5, 1500)

#: Eigenvalue tolerance of the stability check (|z| < 1 − tol, Re s < −tol).
STABILITY_TOL = 1e-9


@dataclass(frozen=True)
class FrequencyMargins:
    """Classical margins of a loop known by its frequency response.

    Attributes
    ----------
    gain_margin_db : dB (``inf`` without a phase crossover; ``nan`` if unstable)
    phase_margin_deg : deg
    gain_crossover_rad_s : rad/s
    delay_margin_s : s
        Phase margin over the gain crossover frequency: the extra delay at the
        aileron command the loop tolerates.
    closed_loop_stable : bool or None
        From the Padé state-space closed loop; ``None`` when not checked.
    extra : dict
        Further figures of some loops (the Smith predictor's, see
        :mod:`.compare_loops_smith`), SI keys.
    """

    gain_margin_db: float
    phase_margin_deg: float
    gain_crossover_rad_s: float
    delay_margin_s: float
    closed_loop_stable: bool | None = None
    extra: dict = field(default_factory=dict)


def pade_delay(tau: float, order: int = 6, piece_s: float = 0.1):
    """State-space Padé model of ``e^{−sτ}``: ``ceil(τ/piece_s)`` pieces of order ``order``.

    Each piece realises the approximant of a unit delay with time scaled
    (as :func:`.linear_loop.rational_loop` does), which stays well
    conditioned for short delays. Below 1 µs the delay is left out.
    """
    import control as ct

    if tau < 1e-6:
        return ct.ss([], [], [], [[1.0]])
    pieces = max(1, math.ceil(tau / piece_s - 1e-9))
    step = tau / pieces
    unit = ct.ss(ct.tf(*ct.pade(1.0, order)))
    one = ct.ss(unit.A / step, unit.B / step, unit.C, unit.D)
    out = one
    for _ in range(pieces - 1):
        out = one * out
    return out


@dataclass(frozen=True)
class ControllerLoop:
    """A controller around the aircraft + servo, broken at the aileron command.

    The controller's input ``j`` is ``Σ_t w_t · e^{−sτ_t} · y_t`` over the terms
    ``t`` with ``inputs[t] = j``, where ``y_t`` is row ``rows[t]`` of the
    aircraft's state (``source[t] = 0``) or of the controller's own internal
    model's state (``source[t] = 1``, a Smith predictor), both driven through
    the hold: the aircraft by the aileron as applied, the model by the
    controller's own command.

    Attributes
    ----------
    a, b : aircraft + servo, ``x' = a x + b u`` (SI)
    controller : control.StateSpace
        From the controller's inputs to ``u`` (sign included: ``u = C y``);
        discrete with ``dt = tick_s``, or continuous (``dt = 0``).
    rows, source, inputs : int arrays, per term
    delays : s, per term
    weights : per term
    tick_s : s
    model_a, model_b : the controller's internal model (or ``None``)
    """

    a: np.ndarray
    b: np.ndarray
    controller: object
    rows: tuple[int, ...]
    source: tuple[int, ...]
    inputs: tuple[int, ...]
    delays: tuple[float, ...]
    weights: tuple[float, ...]
    tick_s: float
    model_a: np.ndarray | None = None
    model_b: np.ndarray | None = None

    @property
    def discrete(self) -> bool:
        return bool(self.controller.dt)

    @property
    def nyquist_rad_s(self) -> float:
        return math.pi / self.tick_s if self.discrete else math.inf

    # ------------------------------------------------------------ frequency domain
    def controller_response(self, omega: np.ndarray) -> np.ndarray:
        """``C`` at ``z = e^{jωT}`` (or ``s = jω``), shape ``(len(omega), n_inputs)``."""
        c = self.controller
        pt = np.exp(1j * omega * self.tick_s) if self.discrete else 1j * omega
        a, b, cc, d = (np.asarray(m, float) for m in (c.A, c.B, c.C, c.D))
        if a.size == 0:
            return np.broadcast_to(d[0], (omega.size, d.shape[1])).astype(complex)
        n = a.shape[0]
        x = np.linalg.solve(pt[:, None, None] * np.eye(n) - a, np.broadcast_to(b, (omega.size, *b.shape)))
        return (cc[0] @ x) + d[0]

    def hold(self, omega: np.ndarray) -> np.ndarray:
        """The hold: zero-order hold response for a discrete controller, ``e^{−jωT/2}`` otherwise."""
        t = self.tick_s
        if not self.discrete:
            return np.exp(-0.5j * omega * t)
        x = 0.5 * omega * t
        return np.exp(-1j * x) * np.sinc(x / np.pi)

    def paths(self, omega: np.ndarray, plant_delay_s: float = 0.0) -> tuple[np.ndarray, np.ndarray]:
        """``(P_r, P_m)``: controller inputs per unit aileron through the aircraft and through the model.

        Shape ``(len(omega), n_inputs)`` each, the hold included; ``plant_delay_s``
        delays the aircraft path only.
        """
        s = 1j * omega
        h = self.hold(omega)
        n_in = self.controller.ninputs
        out = [np.zeros((omega.size, n_in), complex), np.zeros((omega.size, n_in), complex)]
        states = {}
        for src, (a, b) in enumerate(((self.a, self.b), (self.model_a, self.model_b))):
            if a is None or src not in self.source:
                continue
            n = a.shape[0]
            states[src] = np.linalg.solve(
                s[:, None, None] * np.eye(n) - a, np.broadcast_to(b, (omega.size, n))[..., None]
            )[..., 0]
        for r, src, j, tau, w in zip(
            self.rows, self.source, self.inputs, self.delays, self.weights, strict=True
        ):
            extra = plant_delay_s if src == 0 else 0.0
            out[src][:, j] += w * np.exp(-s * (tau + extra)) * states[src][:, r] * h
        return out[0], out[1]

    def response(self, omega: np.ndarray, plant_delay_s: float = 0.0) -> np.ndarray:
        """``L(jω)`` broken at the aileron command (the applied aileron → the command).

        ``L = −C P_r / (1 − C P_m)``: the controller's own model is driven by
        its command, not by the aileron as applied, so the model path is an
        inner loop of the controller. Without a model ``L = −C P_r``.
        """
        c = self.controller_response(omega)
        p_r, p_m = self.paths(omega, plant_delay_s)
        num = -np.einsum("wi,wi->w", c, p_r)
        if self.model_a is None:
            return num
        return num / (1.0 - np.einsum("wi,wi->w", c, p_m))

    def predictor_response(self, omega: np.ndarray) -> np.ndarray:
        """``−C (P_r + P_m)``: the loop broken at the controller's output *before* its model taps it."""
        c = self.controller_response(omega)
        p_r, p_m = self.paths(omega)
        return -np.einsum("wi,wi->w", c, p_r + p_m)

    # ------------------------------------------------------------ state space
    def closed_loop(self, gain: float = 1.0, delay_s: float = 0.0, order: int = 6):
        """Closed-loop state matrix (Padé delays) and the rows of the aircraft's states.

        ``gain`` and ``delay_s`` perturb the aileron as applied (the aircraft's
        input; a controller's own model keeps the undisturbed command).

        Returns
        -------
        (ndarray, slice)
            Closed-loop ``A`` (discrete if the controller is), and where the
            aircraft + servo states sit in it.
        """
        import control as ct

        n_a = self.a.shape[0]
        front = pade_delay(delay_s, order)
        if not self.discrete:
            front = pade_delay(0.5 * self.tick_s, order) * front
        air = ct.ss(self.a, gain * self.b.reshape(-1, 1), np.eye(n_a), np.zeros((n_a, 1)))
        chain = air * front
        n_front = front.nstates
        if self.model_a is not None:
            n_m = self.model_a.shape[0]
            mod = ct.ss(self.model_a, self.model_b.reshape(-1, 1), np.eye(n_m), np.zeros((n_m, 1)))
            chain = ct.append(chain, mod) * ct.ss([], [], [], [[1.0], [1.0]])
        n_out = chain.noutputs
        terms = []
        sel = np.zeros((len(self.rows), n_out))
        for t, (r, src) in enumerate(zip(self.rows, self.source, strict=True)):
            sel[t, r + (n_a if src == 1 else 0)] = 1.0
            terms.append(pade_delay(self.delays[t], order))
        mix = np.zeros((self.controller.ninputs, len(self.rows)))
        for t, (j, w) in enumerate(zip(self.inputs, self.weights, strict=True)):
            mix[j, t] = w
        delays = terms[0]
        for d in terms[1:]:
            delays = ct.append(delays, d)
        plant = ct.ss([], [], [], mix) * delays * ct.ss([], [], [], sel) * chain
        if self.discrete:
            plant = ct.c2d(plant, self.tick_s, "zoh")
        ap, bp, cp, dp = (np.asarray(m, float) for m in (plant.A, plant.B, plant.C, plant.D))
        k = self.controller
        ac, bc, cc, dc = (np.asarray(m, float) for m in (k.A, k.B, k.C, k.D))
        if np.abs(dp).max(initial=0.0) > 0.0:
            raise ValueError("plant chain has direct feedthrough")
        big = np.block([[ap + bp @ dc @ cp, bp @ cc], [bc @ cp, ac]])
        return big, slice(n_front, n_front + n_a)

    def growth(self, gain: float = 1.0, delay_s: float = 0.0) -> float:
        """Largest ``|z|`` (discrete) or ``Re s`` (continuous) of the closed-loop modes the aircraft sees."""
        big, air = self.closed_loop(gain, delay_s)
        lam, vec = np.linalg.eig(big)
        size = np.abs(lam) if self.discrete else lam.real
        seen = np.linalg.norm(vec[air], axis=0) > 1e-6 * np.linalg.norm(vec, axis=0)
        return float(size[seen].max(initial=0.0 if self.discrete else -np.inf))

    def stable(self, gain: float = 1.0, delay_s: float = 0.0) -> bool:
        """Closed-loop stability (see module docstring)."""
        g = self.growth(gain, delay_s)
        return g < 1.0 - STABILITY_TOL if self.discrete else g < -STABILITY_TOL


def frequency_margins(response: np.ndarray, omega: np.ndarray = OMEGA) -> FrequencyMargins:
    """Gain and phase margins of a frequency response, by ``control.stability_margins``."""
    import control

    gm, pm, _, _, wc, _ = control.stability_margins(control.frd(response, omega))
    gm_db = 20 * np.log10(gm) if np.isfinite(gm) and gm > 0 else np.inf
    delay = np.radians(pm) / wc if np.isfinite(wc) and wc > 0 and np.isfinite(pm) else np.inf
    return FrequencyMargins(float(gm_db), float(pm), float(wc), float(delay))


def loop_margins(loop: ControllerLoop, omega: np.ndarray = OMEGA) -> FrequencyMargins:
    """Margins of ``loop.response`` (below the Nyquist frequency), after the stability check."""
    nan = math.nan
    if not loop.stable():
        return FrequencyMargins(nan, nan, nan, nan, closed_loop_stable=False)
    w = omega[omega < loop.nyquist_rad_s]
    return replace(frequency_margins(loop.response(w), w), closed_loop_stable=True)


# ---------------------------------------------------------------------- cascade
def _gyro_delay(sc: Scenario, ticks: int = 500) -> float:
    """Mean age of the gyro sample the controller reads at its ticks (s), from the sampling schedule.

    The core samples the gyro on the base grid at ``round(i/(f·dt))`` and the
    controller reads the newest sample at its tick: a gyro whose samples
    fall on the ticks (100 Hz gyro, 50 Hz controller) is read with no delay,
    not half a sample period.
    """
    if sc.gyro is None:
        return 0.0
    dt = sc.run.base_step_s
    every = int(round(1.0 / (sc.controller.rate_hz * dt)))
    period = 1.0 / float(np.mean(sc.gyro.rate_hz))
    tick_steps = np.arange(1, ticks + 1) * every
    n = int(tick_steps[-1] * dt / period) + 2
    samples = np.rint(np.arange(n) * period / dt).astype(np.int64)
    last = samples[np.searchsorted(samples, tick_steps, side="right") - 1]
    return float(np.mean(tick_steps - last) * dt)


def cascade_loop(sc: Scenario, params: dict, rate_hz: float) -> ControllerLoop:
    """The cascade's loop; ``params`` as in its ControllerSpec (SI).

    Controller states: the bank-error integral and the rate-error integral::

        r_cmd = −(k_bank φ_m + ki_bank ξ_b),  ξ_b' = φ_m
        u = k_rate (r_cmd − p_m) + ki_rate ξ_r,  ξ_r' = r_cmd − p_m
    """
    import control as ct

    from ..build import loop_model
    from .loop_from_scenario import camera_delay

    m = loop_model(sc)
    kb, kib = params["k_bank_per_s"], params["ki_bank_per_s2"]
    kr, kir = params["k_rate_s"], params["ki_rate"]
    ctrl = ct.ss(
        [[0.0, 0.0], [-kib, 0.0]],
        [[1.0, 0.0], [-kb, -1.0]],
        [[-kr * kib, kir]],
        [[-kr * kb, -kr]],
    )
    return ControllerLoop(
        a=np.asarray(m.a, float),
        b=np.asarray(m.b, float),
        controller=ctrl,
        rows=(m.phi_index, m.p_index),
        source=(0, 0),
        inputs=(0, 1),
        delays=(camera_delay(sc).total_s, _gyro_delay(sc)),
        weights=(1.0, 1.0),
        tick_s=1.0 / rate_hz,
    )


def cascade_response(sc: Scenario, params: dict, rate_hz: float, omega: np.ndarray = OMEGA) -> np.ndarray:
    """``L(jω)`` of the cascade (see module docstring); ``params`` as in its ControllerSpec (SI)."""
    return cascade_loop(sc, params, rate_hz).response(np.asarray(omega, float))


def analytic_loop(sc: Scenario) -> ControllerLoop | None:
    """The scenario's controller's loop, for the cascade, LQG and Smith predictor (else ``None``)."""
    spec = sc.controller
    if spec.kind == "cascade":
        return cascade_loop(sc, spec.params, spec.rate_hz)
    if spec.kind == "lqg":
        from .compare_loops_lqg import lqg_loop

        return lqg_loop(sc)
    if spec.kind == "smith":
        from .compare_loops_smith import smith_loop

        return smith_loop(sc)
    return None
