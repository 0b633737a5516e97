"""Analytic margins from a scenario, empirical margins by simulation, and their agreement.

Second methods used here: textbook margin identities (docs/references.md "Loop
margins"), a direct numpy evaluation of the loop formula, a python-control
step response, hand-built signals with known envelopes, and — the main one —
the analytic (frequency-domain) margins against the simulated ones.
"""

from __future__ import annotations

import math

import control as ct
import numpy as np
import pytest
from numpy.testing import assert_allclose
from rollrig.sim.analysis.empirical import (
    LOSS_RESOLUTION,
    EmpiricalSettings,
    bank_step_time,
    empirical_margins,
    quiet_scenario,
    settle_verdict,
)
from rollrig.sim.analysis.handling import Level
from rollrig.sim.analysis.linear_loop import LoopParts, margins, open_loop_response, rational_loop
from rollrig.sim.analysis.loop_from_scenario import camera_delay, loop_parts_from_scenario
from rollrig.sim.analysis.margins_report import margins_report
from rollrig.sim.errors import ScenarioError
from rollrig.sim.scenario import parse_scenario

A1, A2 = 8.4, 28.9  # roll-only plant a2/(s(s+a1)): Lp and |L_da| of the light airplane (docs/references.md)


def doc(
    *,
    model: dict,
    latency: float,
    frame_hz: float,
    pid: dict,
    ctrl_hz: float = 50.0,
    servo_tau: float = 0.08,
    base_step: float = 0.01,
    sensor_extra: dict | None = None,
    actuator_extra: dict | None = None,
) -> dict:
    sensor = {
        "frame_rate_hz": frame_hz,
        "latency_s": latency,
        "noise_deg": 0.3,
        "quantization_deg": 0.5,
        "dropout_prob": 0.05,
        **(sensor_extra or {}),
    }
    return {
        "aircraft": model,
        "actuator": {
            "time_constant_s": servo_tau,
            "limit_deg": 20.0,
            "rate_limit_deg_s": 60.0,
            **(actuator_extra or {}),
        },
        "sensor": sensor,
        "controller": {"kind": "pid", "rate_hz": ctrl_hz, "stale_after_s": 0.6, **pid},
        "disturbance": {"roll_moment_deg_s2": 2.0},
        "run": {"duration_s": 10.0, "base_step_s": base_step},
    }


LIGHT = {"model": "light-single"}
UAV = {"model": "small-uav", "airspeed_mps": 22.0}

# Three PID loops with different camera latencies and frame rates (the agreement test).
AGREEMENT = {
    "light 60 Hz, 20 ms, PID+D": doc(
        model=LIGHT,
        latency=0.02,
        frame_hz=60.0,
        pid={"kp": 0.6, "ki_per_s": 0.15, "kd_s": 0.08, "derivative_filter_hz": 4.0},
    ),
    "light 25 Hz, 80 ms, PID+D": doc(
        model=LIGHT,
        latency=0.08,
        frame_hz=25.0,
        pid={"kp": 0.5, "ki_per_s": 0.1, "kd_s": 0.05, "derivative_filter_hz": 3.0},
    ),
    "UAV 10 Hz, 150 ms, PI": doc(model=UAV, latency=0.15, frame_hz=10.0, pid={"kp": 0.25, "ki_per_s": 0.05}),
}


# ---------------------------------------------------------------------------
# Loop assembly and the margin identities
# ---------------------------------------------------------------------------


def roll_only_doc(kp: float, latency: float, frame_hz: float, ctrl_hz: float = 100.0) -> dict:
    return doc(
        model={"model": "roll-only", "roll_damping_per_s": A1, "aileron_power_per_s2": A2},
        latency=latency,
        frame_hz=frame_hz,
        pid={"kp": kp},
        ctrl_hz=ctrl_hz,
        servo_tau=0.0,
        base_step=0.005,
        actuator_extra={"limit_deg": 60.0, "rate_limit_deg_s": 5000.0},
    )


def test_camera_delay_budget_and_loop_parts() -> None:
    sc = parse_scenario(AGREEMENT["light 25 Hz, 80 ms, PID+D"])
    d = camera_delay(sc)
    # Worked by hand: 25 Hz frames (40 ms) delivered 80 ms after capture, exactly on the
    # 50 Hz ticks (20 ms). At the ticks the reading is 80 or 100 ms old -> mean 90 ms: the
    # frame hold is 10 ms, not T/2 = 20 ms, because the ticks are locked to the frames.
    assert_allclose(
        [d.latency_s, d.frame_hold_s, d.exposure_mid_s, d.total_s], [0.08, 0.01, 0.0, 0.09], rtol=1e-3
    )  # finite averaging horizon: ≤ 0.1 %
    lp = loop_parts_from_scenario(sc)
    # D path: new reading at 80 ms age, difference centred 20 ms earlier -> 100 ms, the same
    # as the P path (90 ms + 10 ms tick hold): no extra delay. The filter moves once per
    # new reading (every 40 ms) with the 20 ms coefficient: corner 3 Hz · 20/40 = 1.5 Hz.
    assert_allclose(
        [
            lp.camera_delay_s,
            lp.controller_dt_s,
            lp.actuator_tau_s,
            lp.derivative_delay_s,
            lp.derivative_filter_hz,
        ],
        [0.09, 0.02, 0.08, 0.0, 1.5],
        rtol=1e-3,
        atol=1e-12,
    )
    assert (lp.kp, lp.ki_per_s, lp.kd_s, lp.derivative_source) == (0.5, 0.1, 0.05, "measurement")


def test_non_pid_controller_has_no_linear_model() -> None:
    d = AGREEMENT["UAV 10 Hz, 150 ms, PI"]
    d = {**d, "controller": {"kind": "custom", "class": "nowhere.mod:Thing", "rate_hz": 50.0}}
    with pytest.raises(ScenarioError, match="no linear model"):
        loop_parts_from_scenario(parse_scenario(d))


@pytest.mark.parametrize("kp, latency, frame_hz", [(0.5, 0.0, 100.0), (1.2, 0.05, 50.0)])
def test_second_order_loop_identities_through_the_scenario(
    kp: float, latency: float, frame_hz: float
) -> None:
    """Roll-only plant, P control, no servo: L = kp a2 / (s (s + a1)) · e^{-sτ}.

    Textbook formula (docs/references.md "Loop margins"): for ωn²/(s(s+2ζωn)),
    PM = atan(2ζ/√(√(1+4ζ⁴) − 2ζ²)), ωc = ωn √(√(1+4ζ⁴) − 2ζ²); a pure delay τ
    keeps ωc and removes ωc·τ of phase; delay margin = PM/ωc.
    """
    sc = parse_scenario(roll_only_doc(kp, latency, frame_hz))
    lp = loop_parts_from_scenario(sc)
    # Frames locked to the 100 Hz ticks: reading ages run latency + {0, ..., T_f - T_c},
    # mean latency + (T_f - T_c)/2, plus half a tick of hold -> latency + T_f/2.
    tau = latency + 0.5 / frame_hz
    wn = math.sqrt(kp * A2)
    zeta = A1 / (2 * wn)
    r = math.sqrt(math.sqrt(1 + 4 * zeta**4) - 2 * zeta**2)
    pm0, wc = math.degrees(math.atan(2 * zeta / r)), wn * r
    m = margins(lp)
    assert_allclose(m.gain_crossover_rad_s, wc, rtol=1e-9)
    # rtol 1e-4: the mean reading age comes from a finite schedule (edge effects ~1e-5 s)
    assert_allclose(m.phase_margin_deg, pm0 - math.degrees(wc * tau), rtol=1e-4)
    assert_allclose(m.delay_margin_s, math.radians(m.phase_margin_deg) / wc, rtol=1e-9)  # identity
    assert_allclose(m.delay_margin_s + tau, math.radians(pm0) / wc, rtol=1e-4)


def test_roll_only_empirical_delay_margin_matches_pm_over_wc() -> None:
    """The simulated delay margin of the P loop agrees with PM/ωc (textbook identity)."""
    sc = parse_scenario(roll_only_doc(1.2, 0.05, 50.0))
    m = margins(loop_parts_from_scenario(sc))
    e = empirical_margins(sc, EmpiricalSettings(loss=False, oscillation_rad_s=m.gain_crossover_rad_s))
    assert e.nominal_settles and e.delay.bounded
    assert_allclose(e.delay.value, m.delay_margin_s, rtol=0.05)  # sampling approximations only
    # The delays alone make the phase cross -180°: the gain margin exists and agrees too.
    assert_allclose(e.gain.value, 10.0 ** (m.upper_gain_margin_db / 20.0), rtol=0.05)


def test_derivative_delay_matches_direct_formula() -> None:
    """LoopParts.derivative_delay_s against the loop formula evaluated with numpy."""
    parts = LoopParts(
        plant_a=[[-A1, 0.0], [1.0, 0.0]],
        plant_b=[A2, 0.0],
        phi_index=1,
        p_index=0,
        actuator_tau_s=0.07,
        camera_delay_s=0.06,
        controller_dt_s=0.02,
        kp=0.6,
        ki_per_s=0.2,
        kd_s=0.08,
        derivative_filter_hz=4.0,
        derivative_delay_s=0.02,
    )
    w = np.logspace(-1, 2, 301)
    s = 1j * w
    wf = 2 * math.pi * 4.0
    g = A2 / (s * (s + A1)) / (0.07 * s + 1)
    c = (0.6 + 0.2 / s) + 0.08 * s / (1 + s / wf) * np.exp(-0.02 * s)
    expected = c * g * np.exp(-(0.06 + 0.01) * s)
    assert_allclose(open_loop_response(parts, w), expected, rtol=1e-9)
    # The Padé model used for the stability flag follows the exact response at low frequency.
    pade = ct.frequency_response(rational_loop(parts, 6), w[w < 10]).complex.reshape(-1)
    assert_allclose(pade, expected[w < 10], rtol=1e-4)


# ---------------------------------------------------------------------------
# The settling verdict on signals with known envelopes
# ---------------------------------------------------------------------------


def test_settle_verdict_on_known_envelopes() -> None:
    t = np.arange(0.0, 30.0, 0.01)
    phi0 = math.radians(1.0)
    osc = np.sin(3.0 * t)
    bank = np.stack(
        [
            phi0 * np.exp(-0.05 * t) * osc,  # decaying: settles
            0.3 * phi0 * np.exp(+0.02 * t) * osc,  # slowly growing, still small: does not settle
            1.5 * phi0 * osc,  # limit cycle above the start: does not settle
            phi0 * np.exp(-0.05 * t) * osc + np.where(t > 5, 1.0, 0.0),  # crosses a 30° limit
            phi0 * np.exp(-0.05 * t) * osc,  # diverged per the core
            np.zeros_like(t),  # exactly at rest: settles
        ]
    )
    rate = np.gradient(bank, t, axis=1)
    diverged = np.array([False, False, False, False, True, False])
    settled, growth = settle_verdict(bank, rate, 1000, phi0, math.radians(30.0), diverged)
    assert settled.tolist() == [True, False, False, False, False, True]
    # Envelope ratio over a 10 s window: exp(-0.05·10) and exp(+0.02·10), to the peak sampling.
    assert_allclose(growth[:2], [math.exp(-0.5), math.exp(0.2)], rtol=0.02)
    with pytest.raises(ValueError, match="window"):
        settle_verdict(bank, rate, 2000, phi0, 1.0, diverged)


def test_quiet_copy_switches_off_noise_and_refines_the_step() -> None:
    sc = parse_scenario(AGREEMENT["light 60 Hz, 20 ms, PID+D"])
    q = quiet_scenario(sc, base_step_s=0.004)
    cam = q.camera
    assert (cam.noise_rad, cam.quantization_rad, float(np.max(cam.dropout_prob))) == (0.0, 0.0, 0.0)
    assert q.disturbances == ()
    assert_allclose(q.run.base_step_s, 0.01 / 3, rtol=1e-12)  # smallest whole divisor reaching ≤ 4 ms
    assert (cam.latency_s, cam.frame_rate_hz) == (0.02, 60.0)  # timing kept


# ---------------------------------------------------------------------------
# Agreement: analytic against empirical, three latencies
# ---------------------------------------------------------------------------


@pytest.mark.parametrize("name", list(AGREEMENT))
def test_empirical_margins_agree_with_analytic(name: str) -> None:
    """Gain and delay margins within 10 % (issue requirement).

    Remaining gaps, all small here: the analytic model replaces the frame and
    controller sample-and-holds by T/2 delays (no aliasing, no sinc gain loss),
    the PID's integral and derivative are discrete, and the simulated delay
    lives on the base-step grid (5 ms). A 1° start keeps servo limits from
    binding, so saturation plays no part at the boundaries.
    """
    sc = parse_scenario(AGREEMENT[name])
    m = margins(loop_parts_from_scenario(sc))
    assert m.closed_loop_stable
    e = empirical_margins(
        sc,
        EmpiricalSettings(loss=False, oscillation_rad_s=min(m.gain_crossover_rad_s, m.phase_crossover_rad_s)),
    )
    assert e.nominal_settles and e.gain.bounded and e.delay.bounded
    gm_factor = 10.0 ** (m.upper_gain_margin_db / 20.0)
    assert_allclose(e.gain.value, gm_factor, rtol=0.10)
    assert_allclose(e.delay.value, m.delay_margin_s, rtol=0.10)
    # Search tolerances are far below the 10 % being tested.
    assert e.gain.tolerance < 0.02 * e.gain.value
    assert e.delay.tolerance <= max(0.02 * e.delay.value, e.base_step_s)


def test_loss_margin_is_bracketed_and_reproducible() -> None:
    sc = parse_scenario(AGREEMENT["UAV 10 Hz, 150 ms, PI"])
    st = EmpiricalSettings(oscillation_rad_s=1.6, seed=4)
    a = empirical_margins(sc, st)
    b = empirical_margins(sc, st)
    assert a.loss is not None and a.loss.bounded
    assert 0.0 < a.loss.value < 1.0
    assert_allclose(a.loss.fails_at - a.loss.settles_at, LOSS_RESOLUTION, atol=1e-12)
    assert (a.loss, a.gain, a.delay) == (b.loss, b.gain, b.delay)  # same seed, same answer


# ---------------------------------------------------------------------------
# Handling qualities and roll performance
# ---------------------------------------------------------------------------


def test_light_single_modes_rated_in_the_report() -> None:
    sc = parse_scenario(AGREEMENT["light 60 Hz, 20 ms, PID+D"])
    rep = margins_report(sc, aircraft_class="I", category="A", empirical=False)
    m = rep.modes
    # Nelson light single (docs/references.md, derived from the quoted A): roll -8.4328,
    # Dutch roll -0.48909 ± 2.33431i, spiral -0.0088172; small differences come from the
    # preset being built from the coefficients, hence rtol 1 %.
    assert_allclose(m.roll_tau_s, 1 / 8.4328, rtol=1e-2)
    assert_allclose(m.dutch_wn, abs(complex(-0.48909, 2.33431)), rtol=1e-2)
    assert_allclose(m.dutch_zeta, 0.48909 / abs(complex(-0.48909, 2.33431)), rtol=1e-2)
    assert_allclose(m.spiral_lambda, -0.0088172, rtol=2e-2)
    # MIL-F-8785C Class I Cat A: τR 0.119 ≤ 1.0 s (Table VII); spiral stable (Table VIII);
    # ζ 0.205 ≥ 0.19, ζωn 0.489 ≥ 0.35, ωn 2.38 ≥ 1.0 (Table VI) -> Level 1 throughout.
    r = rep.mode_ratings
    assert (r.roll_mode, r.spiral, r.dutch_roll) == (Level.LEVEL_1,) * 3
    assert rep.bank_change_deg == 60.0  # Table IXa, Cat A


def test_bank_step_time_matches_linear_step_response() -> None:
    """Roll-only P loop with no limits binding: simulated time to bank vs python-control.

    The closed loop φ/φcmd = kp G e^{-s h} / (1 + kp G e^{-s(h + τc)}) with Padé delays
    (order 2: ample for 5–20 ms at a few rad/s). Frames and ticks are both 100 Hz and
    locked, so τc is the latency (20 ms) and h half a tick; the PID outputs nothing until
    the first reading arrives, which shifts the start by the latency.
    """
    kp = 0.5
    sc = parse_scenario(roll_only_doc(kp, 0.02, 100.0, ctrl_hz=100.0))
    angle = 30.0
    t_sim = bank_step_time(sc, angle)
    h, tau_c = 0.5 / 100.0, 0.02
    g = ct.tf([A2], [1.0, A1, 0.0])
    pade = lambda tau: ct.tf(*ct.pade(tau, 2))  # noqa: E731
    closed = ct.feedback(kp * g * pade(h), pade(tau_c))
    t = np.arange(0.0, 5.0, 1e-4)
    resp = ct.step_response(closed, t).outputs * 1.05 * angle
    t_lin = t[np.argmax(resp >= angle)] + 0.02
    assert_allclose(t_sim, t_lin, atol=0.01)  # two base steps
