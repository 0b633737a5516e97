"""Margins against python-control's own margin test cases (published test data).

Every continuous-time SISO case below, with its expected values, is taken
from python-control 0.10.2's test suite (BSD-3-Clause; a general-purpose
library): the file and test are named beside each case. python-control
reports gain margins as ratios; here they are compared in dB
(``20 log10 gm``). Its tuple is (gm, pm, sm, ω at gm, ω at pm, ω at sm).
Tolerances are the peer's own ``atol`` unless stated.

Two cases the peer tests do not hold but issue 15 found: the phase crossover
at ω = 0 on a divergent-spiral PD bank hold, and a gain crossover below the
old fixed 1e-3 rad/s grid.
"""

from __future__ import annotations

import math

import control as ct
import numpy as np
import pytest
from numpy.testing import assert_allclose
from rollrig.sim.analysis.linear_loop import LoopParts, margins, rational_loop
from rollrig.sim.analysis.loop_sources import FrequencyResponse

s = ct.tf("s")
inf, nan = math.inf, math.nan


def db(ratio: float) -> float:
    return 20.0 * math.log10(ratio) if math.isfinite(ratio) else inf


# control/tests/margin_test.py, fixture ``tsys`` used by test_stability_margins
# (gm, pm, sm, w_gm, w_pm, w_sm), atol 1.5e-2; the stability margin (sm) is compared
# only where the peer finds a local minimum of |1 + L| (it reports inf otherwise).
TSYS = {
    "(s+2)/(s^2+2s+3)": (ct.tf([1, 2], [1, 2, 3]), (inf, inf, None, nan, nan, None)),
    "1/(s^3+2s^2+3s+4)": (ct.tf([1], [1, 2, 3, 4]), (2.0, inf, 0.4170, 1.7321, nan, 1.6620)),
    "open-loop unstable state space": (
        ct.ss([[1.0, 4.0], [3.0, 2.0]], [[1.0], [-4.0]], [[1.0, 0.0]], [[0.0]]),
        (inf, 147.0743, None, nan, 2.5483, None),
    ),
    "sys4 (three gain crossovers)": (
        (8.75 * (4 * s**2 + 0.4 * s + 1))
        / ((100 * s + 1) * (s**2 + 0.22 * s + 1))
        / (s**2 / 10.0**2 + 2 * 0.04 * s / 10.0 + 1),
        (2.2716, 97.5941, 0.5591, 10.0053, 0.0850, 9.9918),
    ),
    "1/(1+s)": (1 / (1 + s), (inf, inf, None, nan, nan, None)),
    "3(10+s)/(2+s) biproper": (3 * (10 + s) / (2 + s), (inf, inf, None, nan, nan, None)),
    "0.01(10-s)/((2+s)(1+s))": (
        0.01 * (10 - s) / (2 + s) / (1 + s),
        (300.0, inf, 0.9917, 5.6569, nan, 2.3171),
    ),
}


@pytest.mark.parametrize("name", list(TSYS))
def test_python_control_tsys_cases(name: str) -> None:
    sys, (gm, pm, sm, wgm, wpm, wsm) = TSYS[name]
    m = margins(sys)
    atol = 1.5e-2  # margin_test.py::test_stability_margins
    assert_allclose(m.gain_margin_db, db(gm), atol=atol if math.isfinite(gm) else 0)
    assert_allclose(m.phase_margin_deg, pm, atol=atol)
    assert_allclose(m.phase_crossover_rad_s, wgm, atol=atol)
    assert_allclose(m.gain_crossover_rad_s, wpm, atol=atol)
    if sm is not None:
        assert_allclose(m.stability_margin, sm, atol=atol)
        assert_allclose(m.stability_margin_rad_s, wsm, atol=atol)
    # every crossover, as the peer's returnall lists them
    # (margin_test.py::test_stability_margins, returnall reference)
    if name == "sys4 (three gain crossovers)":
        assert_allclose(m.gain_crossover_margins_deg, [97.5941, -157.7844, 134.7359], atol=atol)
        assert_allclose(m.gain_crossovers_rad_s, [0.0850, 0.9373, 1.0919], atol=atol)
        assert_allclose(m.phase_crossovers_rad_s, [10.0053], atol=atol)
    if name == "1/(s^3+2s^2+3s+4)":
        assert_allclose(m.phase_crossover_margins_db, [db(2.0)], atol=atol)


# control/tests/margin_test.py::test_zmore_margin (systems from Bavafi-Toosi, "A note on
# the gain and phase margin concepts", J. Control and Systems Eng. 3(1), 2015):
# margin(sys·K) -> (gm, pm, w_gm, w_pm), each with the peer's atol.
ZMORE = {
    "typem1": s / (s + 1),
    "type0": 1 / (s + 1) ** 3,
    "type1": (s + 0.1) / s / (s + 1),
    "type2": (s + 0.1) / s**2 / (s + 1),
    "type3": (s + 0.1) * (s + 0.1) / s**3 / (s + 1),
    "example21": 0.002
    * (s + 0.02)
    * (s + 0.05)
    * (s + 5)
    * (s + 10)
    / ((s - 0.0005) * (s + 0.0001) * (s + 0.01) * (s + 0.2) * (s + 1) * (s + 100) ** 2),
}
ZMORE_CASES = [
    ("typem1", 2.0, 1.5e-3, (inf, -120.0007, nan, 0.5774)),
    ("type0", 0.8, 1.5e-3, (10.0014, inf, 1.7322, nan)),
    ("type0", 2.0, 1e-2, (4.000, 67.6058, 1.7322, 0.7663)),
    ("type1", 1.0, 1e-4, (inf, 144.9032, nan, 0.3162)),
    ("type2", 1.0, 1e-4, (inf, 44.4594, nan, 0.7907)),
    ("type3", 1.0, 1.5e-3, (0.0626, 37.1748, 0.1119, 0.7951)),
    ("example21", 1.0, 1e-2, (0.0100, -14.5640, 0, 0.0022)),
    ("example21", 1000.0, 1e-2, (0.1793, 22.5215, 0.0243, 0.0630)),
    ("example21", 5000.0, 1.5e-3, (4.5596, 21.2101, 0.4385, 0.1868)),
]


@pytest.mark.parametrize(
    ("name", "k", "atol", "ref"), ZMORE_CASES, ids=[f"{c[0]}-K{c[1]:g}" for c in ZMORE_CASES]
)
def test_python_control_zmore_cases(name: str, k: float, atol: float, ref: tuple) -> None:
    gm, pm, wgm, wpm = ref
    m = margins(ZMORE[name] * k)
    # gain margin compared as a ratio with the peer's atol (ratios near 0 lose meaning in dB)
    gm_ratio = 10.0 ** (m.gain_margin_db / 20.0) if math.isfinite(m.gain_margin_db) else inf
    assert_allclose(gm_ratio, gm, atol=atol if math.isfinite(gm) else 0)
    assert_allclose(m.phase_margin_deg, pm, atol=atol)
    assert_allclose(m.phase_crossover_rad_s, wgm, atol=atol)
    assert_allclose(m.gain_crossover_rad_s, wpm, atol=atol)


def test_example21_every_crossover_and_the_one_at_dc() -> None:
    # control/tests/margin_test.py::test_zmore_stability_margins (returnall), rtol 1e-3, atol 1e-3:
    # gm [0.01, 179.2931, 2.2798e4, 1.5946e7, 7.2477e8] at [0, 0.0243, 0.4385, 6.8640, 84.9323],
    # pm [-14.5640] at [0.0022], sm [0.2496] at [0.0022].
    m = margins(ZMORE["example21"])
    assert_allclose(m.phase_crossovers_rad_s, [0, 0.0243, 0.4385, 6.8640, 84.9323], rtol=1e-3, atol=1e-3)
    ratios = [10.0 ** (g / 20.0) for g in m.phase_crossover_margins_db]
    assert_allclose(ratios, [0.01, 179.2931, 2.2798e4, 1.5946e7, 7.2477e8], rtol=1e-3, atol=1e-3)
    assert_allclose(m.gain_crossover_margins_deg, [-14.5640], rtol=1e-3, atol=1e-3)
    assert_allclose(m.gain_crossovers_rad_s, [0.0022], rtol=1e-3, atol=1e-3)
    assert_allclose([m.stability_margin, m.stability_margin_rad_s], [0.2496, 0.0022], rtol=1e-3, atol=1e-3)
    # L(0) = -100: a gain reduction of 40 dB reaches -1 at DC
    assert_allclose(m.lower_gain_margin_db, -40.0, atol=1e-9)
    assert m.phase_crossover_rad_s == 0.0


@pytest.mark.parametrize(
    ("num", "den", "w_ref", "l_ref"),
    [
        # control/tests/margin_test.py::test_phase_crossover_frequencies, atol 1.5e-3; only the
        # crossovers through the negative real axis are margins (the peer also lists ω = 0 with
        # L(0) > 0 there, which puts no gain margin on the loop).
        ([1], [1, 2, 3, 4], 1.7325, -0.5),
        ([2], [1, 3, 3, 1], 1.732, -0.25),
        ([200.0], [1.0, 21.0, 20.0, 0.0], 4.47213595, -0.47619048),
    ],
)
def test_python_control_phase_crossovers(num, den, w_ref, l_ref) -> None:
    m = margins(ct.tf(num, den))
    assert_allclose(m.phase_crossovers_rad_s, [w_ref], atol=1.5e-3)
    assert_allclose(
        m.phase_crossover_margins_db, [-20.0 * math.log10(-l_ref)], atol=1.5e-3 * 20 / math.log(10) / 0.25
    )


def test_python_control_bode_margin_case() -> None:
    # control/tests/freqresp_test.py::test_bode_margin: 1000/(s^3 + 25 s^2 + 100 s): gain crossover
    # 6.0782869 rad/s with phase -157.46405841° (PM 22.536°), phase crossover 10 rad/s with
    # |L| = 0.4 (-7.9588 dB); rtol 1e-5.
    m = margins(ct.tf([1000], [1, 25, 100, 0]))
    assert_allclose(m.gain_crossover_rad_s, 6.0782869, rtol=1e-5)
    assert_allclose(m.phase_margin_deg, 180.0 - 157.46405841, rtol=1e-5)
    assert_allclose(m.phase_crossover_rad_s, 10.0, rtol=1e-5)
    assert_allclose(m.gain_margin_db, 7.9588, rtol=1e-5)


def test_python_control_disk_margin_case() -> None:
    # control/tests/margin_test.py::test_siso_disk_margin: L = 25/(s^3 + 10 s^2 + 10 s + 10),
    # balanced disk margin 0.46, disk gain margin 4.05 dB, disk phase margin 25.8°, atol 0.1;
    # the S-based disk margin equals the stability margin min |1 + L| (atol 0.01).
    sys = ct.tf(25, [1, 10, 10, 10])
    m = margins(sys)
    assert_allclose(
        [m.disk_alpha, m.disk_gain_margin_db, m.disk_phase_margin_deg], [0.46, 4.05, 25.8], atol=0.1
    )
    _, _, sm, _, _, _ = ct.stability_margins(sys)
    assert_allclose(m.stability_margin, sm, atol=0.01)
    # second method, tighter: python-control's own disk margins on a fine grid
    dm, dgm, dpm = ct.disk_margins(sys, np.logspace(-1, 2, 20001), skew=0.0)
    assert_allclose([m.disk_alpha, m.disk_gain_margin_db, m.disk_phase_margin_deg], [dm, dgm, dpm], rtol=1e-4)


# ---------------------------------------------------------------- frequency-response data
def test_python_control_frd_case() -> None:
    # control/tests/margin_test.py::test_frd: measured plant data (gain dB, phase deg at f Hz)
    # times C G = (1 + 1.9 s)/s^2: phase margin 44.55°, atol 0.01. The peer interpolates with a
    # smoothing spline; we interpolate log|L| and phase linearly in log ω, which differs on
    # these coarse data by up to a few tenths of a degree: tolerance 0.5°.
    f = np.array(
        [0.005, 0.010, 0.020, 0.030, 0.040, 0.050, 0.060, 0.070, 0.080, 0.090, 0.100, 0.200, 0.300]
        + [0.400, 0.500, 0.750, 1.000, 1.250, 1.500, 1.750, 2.000, 2.250, 2.500, 2.750, 3.000, 3.250]
        + [3.500, 3.750, 4.000, 4.250, 4.500, 4.750, 5.000, 6.000, 7.000, 8.000, 9.000, 10.000]
    )
    gain = np.array(
        [0.0] * 11
        + [0.1, 0.2, 0.3, 0.5, 0.5, -0.4, -2.3, -4.8, -7.3, -9.6, -11.7, -13.6, -15.3, -16.9, -18.3]
        + [-19.6, -20.8, -22.0, -23.1, -24.1, -25.0, -25.9, -29.1, -31.9, -34.2, -36.2, -38.1]
    )
    phase = np.array(
        [0, -1, -2, -3, -4, -5, -6, -7, -8, -9, -10, -19, -29, -40, -51, -81, -114, -144, -168, -187]
        + [-202, -214, -224, -233, -240, -247, -253, -259, -264, -269, -273, -277, -280, -292, -301]
        + [-307, -313, -317]
    )
    w = 2 * np.pi * f
    resp = 10 ** (gain / 20) * np.exp(1j * np.radians(phase))
    cg = (1 + 1.9 * 1j * w) / (1j * w) ** 2
    m = margins(FrequencyResponse(w, resp * cg, "test_frd"))
    assert_allclose(m.phase_margin_deg, 44.55, atol=0.5)
    assert m.closed_loop_stable is None  # data cannot tell
    # the same data as a python-control FRD object gives the same report
    m2 = margins(ct.frd(resp * cg, w))
    assert m2.phase_margin_deg == m.phase_margin_deg


def test_python_control_frd_edge_cases() -> None:
    # control/tests/margin_test.py::test_frd_indexing, atol 0.01: crossovers at the 2nd and the
    # next-to-last data point must be found.
    w = np.linspace(0.99, 2.01, 11)
    d = 0.6 * np.exp(1j * np.radians(-180 * (2 * w - 1)))
    m = margins(FrequencyResponse(w, d))
    assert_allclose(m.phase_crossover_margins_db, [db(1 / 0.6)] * 2, atol=0.01 * 20 / math.log(10) * 0.6)
    assert_allclose(m.phase_crossovers_rad_s, [1.0, 2.0], atol=0.01)
    mag = -((2 * w - 3) ** 4) + 2
    m = margins(FrequencyResponse(w, mag * np.exp(-1j * np.pi / 2)))
    assert_allclose(m.gain_crossover_margins_deg, [90.0, 90.0], atol=0.01)
    assert_allclose(m.gain_crossovers_rad_s, [1.0, 2.0], atol=0.01)
    w = np.arange(0.9, 2.1, 0.1)
    d = 0.6 * np.exp(1j * np.radians(-180 * (2 * w - 1)))
    m = margins(FrequencyResponse(w, d))
    assert_allclose(m.stability_margin, 1 - 0.6, atol=0.01)
    assert min(abs(m.stability_margin_rad_s - 1.0), abs(m.stability_margin_rad_s - 2.0)) < 0.01


@pytest.mark.parametrize("name", ["1/(s^3+2s^2+3s+4)", "sys4 (three gain crossovers)"])
def test_data_and_system_agree(name: str) -> None:
    # control/tests/margin_test.py::test_stability_margins_omega: the same loop sampled on
    # logspace(-2, 2, 2000) gives the system's margins within atol 1.5e-3.
    sys, _ = TSYS[name]
    w = np.logspace(-2, 2, 2000)
    data = margins(ct.frd(sys, w))
    exact = margins(sys)
    for key in ("gain_margin_db", "phase_margin_deg", "phase_crossover_rad_s", "gain_crossover_rad_s"):
        assert_allclose(getattr(data, key), getattr(exact, key), atol=1.5e-3)


# ---------------------------------------------------------------- issue 15's own cases
def test_crossover_below_the_old_grid_is_found() -> None:
    # L = 2e-4/(s + 1e-4): |L| = 1 at ω = 1e-4·√3 = 1.732e-4 rad/s, PM = 180 - atan(√3) = 120°
    # (hand calculation; python-control agrees, issue 15).
    m = margins(2e-4 / (s + 1e-4))
    assert_allclose(m.gain_crossover_rad_s, math.sqrt(3) * 1e-4, rtol=1e-9)
    assert_allclose(m.phase_margin_deg, 120.0, rtol=1e-9)
    assert_allclose(m.delay_margin_s, math.radians(120.0) / (math.sqrt(3) * 1e-4), rtol=1e-9)


def test_divergent_spiral_pd_loop_fails_mil_f_9490d() -> None:
    # Issue 15: light single with L_r raised to 5.0 1/s (spiral +0.0385 1/s), PD kp 0.025,
    # kd 0.01 s, 80 ms camera delay, 60 ms servo. python-control on the same loop (Padé):
    # phase crossovers at 0 and 11.21 rad/s, -4.85 dB and +35.01 dB. A 4.85 dB gain reduction
    # destabilises it, so MIL-F-9490D's ±6 dB is not met.
    from rollrig.sim.presets import (
        _FT,
        _NELSON,
        _NELSON_AILERON_SIGN,
        _NELSON_L_DA_BOOK,
        _NELSON_N_DA_OURS,
        _NELSON_SPAN_FT,
        _NELSON_U0_FTPS,
        from_dimensional_derivatives,
    )

    d = dict(_NELSON, l_r=5.0)
    d["y_beta"] *= _FT
    d["y_dr"] *= _FT
    plant = from_dimensional_derivatives(
        airspeed_mps=_NELSON_U0_FTPS * _FT,
        l_da=_NELSON_AILERON_SIGN * _NELSON_L_DA_BOOK,
        n_da=_NELSON_N_DA_OURS,
        span_m=_NELSON_SPAN_FT * _FT,
        name="light-single, L_r 5",
        **d,
    )
    spiral = min(np.linalg.eigvals(plant.a), key=lambda z: abs(z))
    assert_allclose(spiral.real, 0.0385, atol=5e-4)
    parts = LoopParts.from_plant(plant, actuator_tau_s=0.06, camera_delay_s=0.08, kp=0.025, kd_s=0.01)
    m = margins(parts)
    # The crossover at ω = 0 depends on L(0) only (delays are 1 at DC): -4.85 dB as in issue 15.
    assert m.phase_crossovers_rad_s[0] == 0.0
    assert_allclose(m.lower_gain_margin_db, -4.85, atol=0.01)
    # The 11.21 rad/s, +35.01 dB also depend on sampling details it does not give
    # (hold, derivative filter); second method for this loop: python-control on our Padé model.
    pc = ct.stability_margins(rational_loop(parts, 8), returnall=True)
    assert_allclose(m.phase_crossovers_rad_s[:2], sorted(pc[3])[:2], rtol=1e-3, atol=1e-6)
    assert_allclose(m.upper_gain_margin_db, 20 * math.log10(min(g for g in pc[0] if g > 1)), atol=0.02)
    assert m.upper_gain_margin_db > 30.0
    assert m.closed_loop_stable and not m.gain_margin_ok and not m.meets_mil_f_9490d
    # and the Padé closed loop with the gain reduced by 5 dB is unstable
    reduced = ct.feedback(rational_loop(parts) * 10 ** (-5 / 20), 1)
    assert np.max(np.linalg.eigvals(reduced.A).real) > 0.0


def test_loop_with_no_gain_is_refused() -> None:
    with pytest.raises(ValueError, match="no gain"):
        margins(LoopParts(plant_a=[[-8.4, 0.0], [1.0, 0.0]], plant_b=[0.0, 0.0], phi_index=1, p_index=0))


def test_improper_mimo_discrete_and_ill_posed_loops_are_refused() -> None:
    with pytest.raises(ValueError, match="improper"):
        margins(s + 1)
    with pytest.raises(ValueError, match="continuous"):
        margins(ct.tf([1], [1, 1], 0.1))
    with pytest.raises(ValueError, match="ill-posed"):
        margins(-(s + 2) / (s + 1))
    with pytest.raises(TypeError):
        margins([1, 2, 3])
