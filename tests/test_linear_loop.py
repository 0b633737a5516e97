"""Tests for sim.analysis.linear_loop: margins with exact delays, disk margin, bandwidth."""

from __future__ import annotations

import math

import control as ct
import numpy as np
import pytest
from numpy.testing import assert_allclose
from rollrig.sim.analysis.linear_loop import (
    LoopParts,
    closed_loop_response,
    margins,
    open_loop_response,
    rational_loop,
)
from rollrig.sim.report.margin_plots import plot_margins

# A roll-only plant phi/da = a2 / (s (s + a1)), states (p, phi): p' = -a1 p + a2 da.
A1, A2 = 8.4, 28.9  # 1/s, 1/s^2 — Lp and |L_da| of the light airplane (docs/references.md, Nelson)


def roll_plant(a1: float = A1, a2: float = A2) -> dict:
    return dict(plant_a=[[-a1, 0.0], [1.0, 0.0]], plant_b=[a2, 0.0], phi_index=1, p_index=0)


def second_order_loop(zeta: float, wn: float, **kw) -> LoopParts:
    """L = wn^2 / (s (s + 2 zeta wn)) with kp = 1 and no derivative or integral."""
    return LoopParts(**roll_plant(2.0 * zeta * wn, wn * wn), kp=1.0, ki_per_s=0.0, kd_s=0.0, **kw)


def realistic(**kw) -> LoopParts:
    base = dict(
        roll_plant(),
        actuator_tau_s=0.06,
        camera_delay_s=0.08,
        gyro_delay_s=0.005,
        controller_dt_s=0.02,
        kp=0.5,
        ki_per_s=0.1,
        kd_s=0.06,
        derivative_filter_hz=4.0,
        derivative_source="measurement",
    )
    base.update(kw)
    return LoopParts(**base)


def textbook_pm_wc(zeta: float, wn: float) -> tuple[float, float]:
    # Open loop wn^2/(s(s+2 zeta wn)): PM = atan(2 zeta / sqrt(sqrt(1+4 zeta^4) - 2 zeta^2)),
    # wc = wn sqrt(sqrt(1+4 zeta^4) - 2 zeta^2)  [textbook formula, docs/references.md "Loop margins"]
    r = math.sqrt(math.sqrt(1.0 + 4.0 * zeta**4) - 2.0 * zeta**2)
    return math.degrees(math.atan(2.0 * zeta / r)), wn * r


@pytest.mark.parametrize("zeta", [0.1, 0.3, 0.5, 0.707, 1.0, 2.0])
@pytest.mark.parametrize("wn", [0.7, 3.0])
def test_second_order_loop_matches_textbook_formula(zeta: float, wn: float) -> None:
    m = margins(second_order_loop(zeta, wn))
    pm, wc = textbook_pm_wc(zeta, wn)
    assert_allclose(m.phase_margin_deg, pm, rtol=1e-9)
    assert_allclose(m.gain_crossover_rad_s, wc, rtol=1e-9)
    # Delay margin = PM (rad) / wc  [textbook identity, docs/references.md]
    assert_allclose(m.delay_margin_s, math.radians(pm) / wc, rtol=1e-9)
    assert m.gain_margin_db == math.inf and math.isnan(m.phase_crossover_rad_s)
    assert m.closed_loop_stable


@pytest.mark.parametrize("zeta", [0.3, 0.5, 0.707])
def test_second_order_bandwidth(zeta: float) -> None:
    wn = 2.0
    m = margins(second_order_loop(zeta, wn))
    # Closed loop wn^2/(s^2 + 2 zeta wn s + wn^2): wb = wn sqrt(1 - 2z^2 + sqrt(4z^4 - 4z^2 + 2))
    # [textbook formula, e.g. Nise, Control Systems Engineering — recalled from memory]
    wb = wn * math.sqrt(1 - 2 * zeta**2 + math.sqrt(4 * zeta**4 - 4 * zeta**2 + 2))
    assert_allclose(m.bandwidth_rad_s, wb, rtol=1e-8)
    # second method: python-control's evaluation of the same closed loop is at half power
    cl = ct.tf([wn * wn], [1.0, 2.0 * zeta * wn, wn * wn])
    assert_allclose(abs(cl(1j * m.bandwidth_rad_s)), 1 / math.sqrt(2), rtol=1e-10)
    # python-control's bandwidth() uses exactly -3.000 dB (0.70795) instead of half power
    # (0.70711, -3.0103 dB), so it sits slightly lower; agree within 0.5 %
    assert_allclose(m.bandwidth_rad_s, ct.bandwidth(cl), rtol=5e-3)


@pytest.mark.parametrize("source", ["measurement", "gyro"])
def test_margins_agree_with_python_control_on_high_order_pade(source: str) -> None:
    parts = realistic(derivative_source=source)
    ours = margins(parts)
    # Independent rational model built here: each path's delay by a Padé approximant
    # (order 6 on the camera path, 3 on the short gyro path — higher orders of tiny delays
    # overflow python-control's polynomial arithmetic). A Padé of order n matches the exact
    # phase to far better than 1e-3 deg for w*tau << n (here w*tau <= ~1), so margins agree.
    s = ct.tf("s")
    wf = 2 * math.pi * parts.derivative_filter_hz
    plant = ct.tf([A2], [1.0, A1, 0.0])  # phi/da
    act = 1 / (parts.actuator_tau_s * s + 1)
    hold = parts.controller_dt_s / 2

    def pade(tau: float, n: int = 6) -> ct.TransferFunction:
        return ct.tf(*ct.pade(tau, n))

    pid_pi = parts.kp + parts.ki_per_s / s
    if source == "measurement":
        loop = (pid_pi + parts.kd_s * s / (1 + s / wf)) * act * plant * pade(parts.camera_delay_s + hold)
    else:
        loop = pid_pi * act * plant * pade(parts.camera_delay_s + hold) + (
            parts.kd_s / (1 + s / wf) * act * plant * s * pade(parts.gyro_delay_s + hold, 3)
        )
    with np.errstate(over="ignore", invalid="ignore"):  # spurious huge roots in its poly method
        gm, pm, _, wpc, wgc, _ = ct.stability_margins(loop)
    assert_allclose(ours.phase_margin_deg, pm, atol=1e-3)  # deg
    assert_allclose(ours.gain_crossover_rad_s, wgc, rtol=1e-6)
    assert_allclose(ours.gain_margin_db, 20 * math.log10(gm), atol=1e-3)  # dB
    assert_allclose(ours.phase_crossover_rad_s, wpc, rtol=1e-6)
    # and python-control on our own rational assembly (checks rational_loop)
    with np.errstate(over="ignore", invalid="ignore"):
        gm2, pm2, _, wpc2, wgc2, _ = ct.stability_margins(rational_loop(parts, 6))
    assert_allclose([pm2, wgc2, wpc2], [pm, wgc, wpc], rtol=1e-5)
    assert_allclose(20 * math.log10(gm2), 20 * math.log10(gm), atol=1e-3)
    # exact response vs the hand-written one at a few frequencies
    w = np.array([0.3, 2.0, 9.0, 40.0])
    assert_allclose(open_loop_response(parts, w), _hand_loop(parts, w), rtol=1e-12)


def _hand_loop(parts: LoopParts, w: np.ndarray) -> np.ndarray:
    """Loop written out in numpy from the module docstring (second method)."""
    s = 1j * w
    n = parts.plant_a.shape[0]
    x = np.array([np.linalg.solve(si * np.eye(n) - parts.plant_a, parts.plant_b) for si in s])
    phi, p = x[:, parts.phi_index], x[:, parts.p_index]
    act = 1 / (parts.actuator_tau_s * s + 1)
    wf = 2 * math.pi * parts.derivative_filter_hz
    hold = np.exp(-s * parts.controller_dt_s / 2)
    cam = np.exp(-s * parts.camera_delay_s)
    gyro = np.exp(-s * parts.gyro_delay_s)
    pi = parts.kp + parts.ki_per_s / s
    if parts.derivative_source == "measurement":
        return hold * act * (pi + parts.kd_s * s / (1 + s / wf)) * cam * phi
    return hold * act * (pi * cam * phi + parts.kd_s / (1 + s / wf) * gyro * p)


@pytest.mark.parametrize("tau", [0.01, 0.05, 0.15])
def test_pure_delay_lowers_phase_margin_by_wc_tau(tau: float) -> None:
    # A pure delay tau adds phase -w tau and leaves |L| alone  [textbook identity]
    base = realistic(camera_delay_s=0.0, controller_dt_s=0.0)
    m0 = margins(base)
    m1 = margins(realistic(camera_delay_s=tau, controller_dt_s=0.0))
    assert_allclose(m1.gain_crossover_rad_s, m0.gain_crossover_rad_s, rtol=1e-10)
    assert_allclose(
        m0.phase_margin_deg - m1.phase_margin_deg,
        math.degrees(m0.gain_crossover_rad_s * tau),
        atol=1e-7,
    )
    # the controller hold counts as dt/2 of delay  [textbook identity, docs/references.md]
    m2 = margins(realistic(camera_delay_s=0.0, controller_dt_s=2 * tau))
    assert_allclose(m2.phase_margin_deg, m1.phase_margin_deg, atol=1e-9)
    assert_allclose(m1.delay_margin_camera_multiple, m1.delay_margin_s / tau, rtol=1e-12)


def test_delay_margin_agrees_with_pade_closed_loop_stability() -> None:
    # Second method: the delay margin from the exact response must match the delay at
    # which the Padé closed loop's eigenvalues cross into the right half plane.
    base = realistic(camera_delay_s=0.0)
    dm = margins(base).delay_margin_s
    below = margins(realistic(camera_delay_s=0.97 * dm), pade_order=8)
    above = margins(realistic(camera_delay_s=1.03 * dm), pade_order=8)
    assert below.closed_loop_stable and below.delay_margin_s > 0
    assert not above.closed_loop_stable and above.delay_margin_s == 0.0
    assert not above.meets_mil_f_9490d


def test_disk_margin_hand_case() -> None:
    # L = k/(s(s+1)): |(1-L)/(1+L)|^2 = 1 + 4kx/((k-x)^2 + x), x = w^2, peaks at x = k, so
    # ||(S-T)/2||inf = sqrt(1+4k)/2 and alpha = 2/sqrt(1+4k)  [derived by hand here]
    for k in (0.25, 1.0, 4.0):
        m = margins(LoopParts(**roll_plant(1.0, k), kp=1.0))
        alpha = 2 / math.sqrt(1 + 4 * k)
        assert_allclose(m.disk_alpha, alpha, rtol=1e-9)
        assert_allclose(m.disk_frequency_rad_s, math.sqrt(k), rtol=1e-4)
        # balanced disk: gains (2-a)/(2+a) .. (2+a)/(2-a), phase 2 atan(a/2)
        # (Seiler, Packard & Gahinet, "An Introduction to Disk Margins", IEEE CSM 2020)
        assert_allclose(m.disk_gain_margin_db, 20 * math.log10((2 + alpha) / (2 - alpha)), rtol=1e-9)
        assert_allclose(m.disk_phase_margin_deg, math.degrees(2 * math.atan(alpha / 2)), rtol=1e-9)


@pytest.mark.parametrize(
    "parts",
    [
        second_order_loop(0.4, 2.0, camera_delay_s=0.1),
        realistic(),
        realistic(derivative_source="gyro", kd_s=0.12, kp=1.0),
        realistic(kp=1.5, camera_delay_s=0.05),
    ],
)
def test_disk_margin_not_above_classical(parts: LoopParts) -> None:
    m = margins(parts)
    assert m.closed_loop_stable
    assert m.disk_gain_margin_db <= m.upper_gain_margin_db + 1e-9
    assert m.disk_gain_margin_db <= -m.lower_gain_margin_db + 1e-9
    assert m.disk_phase_margin_deg <= m.phase_margin_deg + 1e-9
    # second method: python-control's disk_margins (grid minimum, no refinement) on a
    # 10th-order Padé model; grid spacing 1e-3 decade puts its grid error below 1e-5
    w = np.logspace(-2, 2.5, 4501)
    dm, dgm, dpm = ct.disk_margins(rational_loop(parts, 10), w)
    assert_allclose(m.disk_alpha, dm, rtol=1e-5)
    assert_allclose(m.disk_gain_margin_db, dgm, rtol=1e-4)
    assert_allclose(m.disk_phase_margin_deg, dpm, rtol=1e-4)
    # sensitivity peak vs python-control's stability margin (min distance to -1)
    with np.errstate(over="ignore", invalid="ignore"):  # spurious huge roots in its poly method
        _, _, sm, _, _, _ = ct.stability_margins(rational_loop(parts, 6))
    assert_allclose(m.sensitivity_peak_db, -20 * math.log10(sm), atol=1e-3)


def test_mil_f_9490d_pass_and_fail() -> None:
    # MIL-F-9490D §3.1.3.6: 6 dB and 45 deg  [pub, docs/references.md]
    # second-order loop: PM crosses 45 deg at zeta = 0.42 (PM 44.9) / 0.43 (PM 45.9)
    assert textbook_pm_wc(0.42, 2.0)[0] < 45 < textbook_pm_wc(0.43, 2.0)[0]
    ok = margins(second_order_loop(0.43, 2.0, camera_delay_s=0.0))
    low = margins(second_order_loop(0.42, 2.0, camera_delay_s=0.0))
    assert ok.phase_margin_ok and ok.gain_margin_ok and ok.meets_mil_f_9490d
    assert not low.phase_margin_ok and not low.meets_mil_f_9490d
    # a delay gives a finite gain margin; raise the gain until it drops under 6 dB
    m = margins(second_order_loop(0.7, 2.0, camera_delay_s=0.1))
    assert 6 < m.gain_margin_db < math.inf and m.gain_margin_ok
    k = 10 ** ((m.gain_margin_db - 5.0) / 20)  # leaves 5 dB
    parts = second_order_loop(0.7, 2.0, camera_delay_s=0.1)
    hot = margins(LoopParts(**{**_fields(parts), "kp": k}))
    assert_allclose(hot.gain_margin_db, 5.0, atol=1e-8)
    assert_allclose(hot.phase_crossover_rad_s, m.phase_crossover_rad_s, rtol=1e-9)
    assert not hot.gain_margin_ok


def test_integral_only_loop_is_flagged_unstable() -> None:
    # ki/s * a2/(s(s+a1)): phase below -180 deg everywhere, unstable for any ki > 0
    m = margins(LoopParts(**roll_plant(), kp=0.0, ki_per_s=0.2))
    assert not m.closed_loop_stable and m.delay_margin_s == 0.0 and m.phase_margin_deg < 0
    assert not m.meets_mil_f_9490d


def test_closed_loop_tracks_at_low_frequency_and_matches_formula() -> None:
    parts = realistic()
    w = np.array([1e-4, 0.5, 5.0])
    t = closed_loop_response(parts, w)
    big_l = open_loop_response(parts, w)
    s = 1j * w
    fwd = (parts.kp + parts.ki_per_s / s) * np.exp(-s * parts.controller_dt_s / 2)
    fwd = fwd / (parts.actuator_tau_s * s + 1) * A2 / (s * (s + A1))
    assert_allclose(t, fwd / (1 + big_l), rtol=1e-12)
    assert_allclose(abs(t[0]), 1.0, atol=1e-4)  # integral action: unit DC gain


def test_grid_too_narrow_raises() -> None:
    with pytest.raises(ValueError, match="widen the frequency range"):
        margins(second_order_loop(0.5, 50.0), omega=np.logspace(-2, 1, 300))


def test_validation_and_from_plant() -> None:
    with pytest.raises(ValueError, match="derivative_source"):
        LoopParts(**roll_plant(), derivative_source="camera")
    with pytest.raises(ValueError, match="camera_delay_s"):
        LoopParts(**roll_plant(), camera_delay_s=-0.1)
    with pytest.raises(ValueError, match="derivative_filter_hz"):
        LoopParts(**roll_plant(), derivative_filter_hz=math.inf)
    with pytest.raises(ValueError, match="phi_index"):
        LoopParts(plant_a=np.eye(2), plant_b=[1.0, 0.0], phi_index=2, p_index=0)

    class Duck:
        a = np.array([[-A1, 0.0], [1.0, 0.0]])
        b_control = np.array([[A2, -1.0], [0.0, 0.0]])
        phi_index = 1
        p_index = 0

    parts = LoopParts.from_plant(Duck(), kp=0.7, camera_delay_s=0.1)
    assert_allclose(parts.plant_b, [A2, 0.0])
    assert parts.kp == 0.7 and parts.camera_delay_s == 0.1


def test_plot_writes_png(tmp_path) -> None:
    out = plot_margins(realistic(), tmp_path / "sub" / "margins.png")
    data = out.read_bytes()
    assert data[:8] == b"\x89PNG\r\n\x1a\n" and len(data) > 20_000
    assert list(tmp_path.joinpath("sub").iterdir()) == [out]  # no temp file left


def _fields(parts: LoopParts) -> dict:
    from dataclasses import fields

    return {f.name: getattr(parts, f.name) for f in fields(parts)}


@pytest.mark.parametrize("source", ["gyro", "measurement"])
def test_camera_delay_margin_found_by_two_methods(source: str) -> None:
    """Extra camera delay that destabilises the loop: exact-delay formula against Padé poles.

    With the derivative from the gyro the camera delay margin exceeds the delay margin
    at the aileron command (issue 8); with the camera derivative they are the same thing.
    """
    parts = realistic(derivative_source=source, kd_s=0.08, derivative_filter_hz=8.0)
    m = margins(parts)
    assert m.closed_loop_stable
    tau = m.camera_delay_margin_s
    if source == "gyro":
        assert tau > 1.05 * m.delay_margin_s  # the gyro path keeps its own, short delay
    else:
        assert_allclose(tau, m.delay_margin_s, rtol=1e-9)
    # second method: the Padé closed loop (order 10) with the extra camera delay added
    from dataclasses import replace

    def stable(extra: float) -> bool:
        p = replace(parts, camera_delay_s=parts.camera_delay_s + extra)
        cl = ct.feedback(rational_loop(p, 10), 1.0)
        return bool(np.all(np.linalg.eigvals(cl.A).real < 0))

    assert stable(0.97 * tau) and not stable(1.03 * tau)
