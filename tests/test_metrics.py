"""Tests of sim.metrics against analytic responses and python-control's step_info."""

from __future__ import annotations

import warnings

import control as ct
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as hst
from hypothesis.extra import numpy as hnp
from numpy.testing import assert_allclose, assert_array_equal
from rollrig.sim.metrics import (
    METRIC_INFO,
    MetricSpec,
    StepSegment,
    actuator_metrics,
    evaluate,
    evaluate_steps,
    hold_metrics,
    safety_metrics,
    step_metrics,
)
from rollrig.sim.trace import Trace

DT = 1e-3
T = np.arange(0.0, 20.0 + DT / 2, DT)  # 20001 samples
WN = 2.0  # rad/s
TAU = 0.5  # s


def second_order_step(t, zeta, wn=WN):
    """Unit step response of wn^2/(s^2 + 2 zeta wn s + wn^2), 0 < zeta < 1 (analytic)."""
    t = np.maximum(t, 0.0)
    wd = wn * np.sqrt(1 - zeta**2)
    phi = np.arccos(zeta)
    return 1.0 - np.exp(-zeta * wn * t) / np.sqrt(1 - zeta**2) * np.sin(wd * t + phi)


def first_order_step(t, tau=TAU, gain=1.0):
    return gain * (1.0 - np.exp(-np.maximum(t, 0.0) / tau))


def _lsim_batch():
    """Step responses of three linear systems by python-control (batch of 3)."""
    systems = [
        ct.tf([WN**2], [1, 2 * 0.3 * WN, WN**2]),
        ct.tf([WN**2], [1, 2 * 0.7 * WN, WN**2]),
        ct.tf([1], [TAU, 1]),
    ]
    ys = [ct.step_response(s, T).outputs for s in systems]
    return systems, np.array(ys)


# ------------------------------------------------------------- step metrics
def test_step_metrics_match_control_step_info():
    systems, y = _lsim_batch()
    # step_info: SettlingTimeThreshold 0.02 of the final value and RiseTimeLimits
    # (0.1, 0.9) by default; our band for a unit step is therefore 0.02 rad.
    m = step_metrics(T, y, 0.0, 0.0, 1.0, T[-1], 0.02)
    for i, s in enumerate(systems):
        ref = ct.step_info(s, T)
        # step_info takes the first sample at/after a crossing; we interpolate,
        # so the two agree to within one sample interval.
        assert_allclose(m["rise_time_s"][i], ref["RiseTime"], atol=1.01 * DT)
        assert_allclose(m["settling_time_s"][i], ref["SettlingTime"], atol=1.01 * DT)
        # both take the sampled maximum: identical up to rounding
        assert_allclose(m["overshoot_pct"][i], ref["Overshoot"], rtol=1e-9, atol=1e-9)
        assert_allclose(m["peak_bank_rad"][i], ref["Peak"], rtol=1e-12)


def test_step_metrics_analytic_values():
    y = np.array([second_order_step(T, 0.3), second_order_step(T, 0.7), first_order_step(T)])
    m = step_metrics(T, y, 0.0, 0.0, 1.0, T[-1], 0.02)
    # second-order overshoot exp(-pi zeta / sqrt(1 - zeta^2)) [textbook identity];
    # sampling the peak at dt = 1 ms costs O(dt^2), hence rtol 1e-5
    for i, z in enumerate((0.3, 0.7)):
        mp = 100 * np.exp(-np.pi * z / np.sqrt(1 - z**2))
        assert_allclose(m["overshoot_pct"][i], mp, rtol=1e-5)
        assert_allclose(m["peak_bank_rad"][i], 1 + mp / 100, rtol=1e-6)
    # first order: 10-90 % rise tau ln 9; 2 % settling tau ln 50 [textbook identity];
    # linear interpolation of an exponential over 1 ms: error << 1e-6 s
    assert_allclose(m["rise_time_s"][2], TAU * np.log(9), atol=1e-6)
    assert_allclose(m["settling_time_s"][2], TAU * np.log(50), atol=1e-6)
    assert m["overshoot_pct"][2] == 0.0
    # ITAE of a first-order step over [0, Tf]: tau^2 (1 - e^{-Tf/tau}(1 + Tf/tau)) [analytic]
    tf = T[-1]
    itae = TAU**2 * (1 - np.exp(-tf / TAU) * (1 + tf / TAU))
    assert_allclose(m["itae"][2], itae, rtol=1e-6)


def test_roll_out_to_wings_level():
    """A step to zero from a non-zero bank: a roll-out to wings level.

    control.step_info divides by the final value (``yout/InfValue - 1``, and
    overshoot ``/ InfValue``), so it cannot describe a step whose final value
    is 0. Our metrics work on the step size, so a roll-out from 0.5 rad
    matches the scaled unit-step results.
    """
    systems, y = _lsim_batch()
    up = step_metrics(T, y, 0.0, 0.0, 1.0, T[-1], 0.02)
    phi0 = 0.5
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        down = step_metrics(T, phi0 * (1 - y), 0.0, phi0, 0.0, T[-1], 0.02 * phi0)
    for k in ("rise_time_s", "settling_time_s", "overshoot_pct"):
        assert_allclose(down[k], up[k], rtol=1e-9, atol=1e-12)
    assert_allclose(down["itae"], phi0 * up["itae"], rtol=1e-9)
    assert_allclose(down["peak_bank_rad"], phi0, rtol=1e-12)  # the starting bank
    # and a negative step (0 -> -1) mirrors the positive one
    neg = step_metrics(T, -y, 0.0, 0.0, -1.0, T[-1], 0.02)
    for k in ("rise_time_s", "settling_time_s", "overshoot_pct", "peak_bank_rad", "itae"):
        assert_allclose(neg[k], up[k], rtol=1e-12)


def test_step_later_in_the_record_and_off_grid():
    t_step = 3.0004  # between samples
    y = np.array([second_order_step(T - t_step, 0.5)])
    m = step_metrics(T, y, t_step, 0.0, 1.0, T[-1], 0.05)
    # reference: same response evaluated from its own time origin on a fine grid
    tt = np.linspace(0.0, T[-1] - t_step, 400001)
    r = step_metrics(tt, second_order_step(tt, 0.5)[None, :], 0.0, 0.0, 1.0, tt[-1], 0.05)
    assert_allclose(m["rise_time_s"], r["rise_time_s"], atol=1e-6)
    assert_allclose(m["settling_time_s"], r["settling_time_s"], atol=1e-6)
    assert_allclose(m["overshoot_pct"], r["overshoot_pct"], rtol=1e-5)


def test_steady_state_error_and_never_reached():
    # gain 0.9 first order: settles at 0.9, error 0.1 rad (analytic, e^{-36} tail)
    y = np.array([first_order_step(T, gain=0.9), first_order_step(T, gain=0.85)])
    m = step_metrics(T, y, 0.0, 0.0, 1.0, T[-1], 0.02)
    assert_allclose(m["steady_state_error_rad"], [0.1, 0.15], atol=1e-9)
    # 0.9 is reached exactly at the limit; 0.85 never reaches 90 %
    assert np.isfinite(m["rise_time_s"][0]) and m["rise_time_s"][1] == np.inf
    assert np.all(m["settling_time_s"] == np.inf)  # never within 0.02 of 1


def test_zero_step_and_degenerate_inputs_give_no_nan():
    y = np.vstack([np.zeros(T.size), 0.1 * np.sin(T), np.full(T.size, 0.3)])
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # no division by zero, no invalid value
        m = step_metrics(T, y, 0.0, 0.3, 0.3, T[-1], 0.01)
    assert np.all(m["rise_time_s"] == np.inf)
    assert np.all(m["overshoot_pct"] == np.inf)
    # settling is still defined with an absolute band: run 2 sits on the target
    assert_allclose(m["settling_time_s"], [np.inf, np.inf, 0.0])
    for v in m.values():
        assert not np.any(np.isnan(v))


def test_step_segment_window():
    # response only inside [5, 10]; segment end limits what is judged
    y = np.array([first_order_step(T - 5.0)])
    m = step_metrics(T, y, 5.0, 0.0, 1.0, 6.0, 0.02)  # tau ln 50 = 1.956 s > 1 s
    assert m["settling_time_s"][0] == np.inf
    m = step_metrics(T, y, 5.0, 0.0, 1.0, 10.0, 0.02)
    assert_allclose(m["settling_time_s"][0], TAU * np.log(50), atol=1e-6)
    with pytest.raises(ValueError):
        step_metrics(T, y, 25.0, 0.0, 1.0, 30.0, 0.02)


# ------------------------------------------------------------- hold metrics
def test_hold_metrics_sine_analytic():
    amp, w = 0.2, 2 * np.pi * 0.5  # 10 whole periods in 20 s
    y = amp * np.sin(w * T)[None, :] + np.zeros((2, 1))
    band = np.array([0.1, 0.05])
    m0 = hold_metrics(T, y, 0.0, band[0])
    # RMS of a sine amp/sqrt(2); fraction of time with |sin| > b: 1 - (2/pi) asin(b) [analytic]
    assert_allclose(m0["rms_error_rad"], amp / np.sqrt(2), rtol=1e-6)
    assert_allclose(m0["max_abs_bank_rad"], amp, rtol=1e-6)
    frac = 1 - 2 / np.pi * np.arcsin(band[0] / amp)
    # left-sample rule: each of the 40 band crossings may cost up to one dt
    assert_allclose(m0["time_outside_band_s"], frac * 20.0, atol=40 * DT)
    # error against a per-run reference
    m1 = hold_metrics(T, y, np.array([0.0, 0.2]), 0.05)
    assert_allclose(m1["max_abs_error_rad"], [amp, 2 * amp], rtol=1e-6)
    assert_allclose(m1["max_abs_bank_rad"], [amp, amp], rtol=1e-6)


# --------------------------------------------------------- actuator metrics
def test_actuator_metrics_analytic():
    amp, lim, w = 0.4, 0.3, 2 * np.pi * 0.5
    a = np.clip(amp * np.sin(w * T), -lim, lim)[None, :]
    m = actuator_metrics(T, a, lim, np.inf)
    # |a| >= 0.995 lim happens where |sin| >= 0.995 lim/amp [analytic]
    frac = 1 - 2 / np.pi * np.arcsin(0.995 * lim / amp)
    assert_allclose(m["pct_time_at_limit"], 100 * frac, atol=100 * 40 * DT / 20)
    assert m["pct_time_at_rate_limit"][0] == 0.0
    # RMS of the clipped sine by numerical quadrature on a much finer grid (second method)
    tt = np.linspace(0, 20, 2_000_001)
    rms = np.sqrt(np.mean(np.clip(amp * np.sin(w * tt), -lim, lim) ** 2))
    assert_allclose(m["aileron_rms_rad"], rms, rtol=1e-5)
    # ramp at the rate limit for 2 s, then hold: 10 % of a 20 s record
    rate = 0.5
    ramp = np.minimum(rate * T, rate * 2.0)[None, :]
    m = actuator_metrics(T, ramp, np.inf, rate)
    assert_allclose(m["pct_time_at_rate_limit"], 10.0, atol=100 * DT / 20)
    assert m["pct_time_at_limit"][0] == 0.0


# ----------------------------------------------------------- safety metrics
def test_safety_metrics_crossing_and_divergence():
    lim = np.deg2rad(35.0)
    rate = np.deg2rad(5.0)  # 5 deg/s ramp crosses 35 deg at 7 s
    bank = np.vstack([rate * T, -rate * T, 0.1 * np.sin(T), rate * T])
    bank[3, T >= 4.0] = np.nan  # diverged at 4 s, garbage afterwards
    div = np.array([np.inf, np.inf, np.inf, 4.0])
    m = safety_metrics(T, bank, lim, div)
    assert_allclose(m["first_exceedance_s"][:2], 7.0, atol=1e-9)
    assert m["first_exceedance_s"][2] == np.inf
    assert m["first_exceedance_s"][3] == 4.0  # divergence counts as exceedance
    assert_array_equal(m["limit_exceeded"], [True, True, False, True])
    assert_array_equal(m["diverged"], [False, False, False, True])
    assert_allclose(m["peak_abs_bank_rad"][:3], [rate * 20, rate * 20, 0.1], rtol=1e-6)
    assert m["peak_abs_bank_rad"][3] == np.inf
    assert_array_equal(m["diverged_at_s"], div)


# ----------------------------------------------------------------- evaluate
def _trace(bank, cmd, aileron, diverged_at):
    b = bank.shape[0]
    tick = slice(None, None, 10)  # controller at 1/10 of the base rate
    return Trace(
        t=T,
        bank_cmd=cmd,
        bank=bank,
        roll_rate=np.gradient(bank, T, axis=1),
        aileron=aileron,
        t_ctrl=T[tick],
        bank_meas=bank[:, tick],
        valid=np.ones(bank[:, tick].shape, bool),
        age=np.zeros(bank[:, tick].shape),
        aileron_cmd=aileron[:, tick],
        states=None,
        state_names=(),
        diverged_at=diverged_at,
        run_index=np.arange(b) + 100,
        seed=1,
    )


def _two_step_case():
    phi = 0.5
    zetas = (0.3, 0.7, 0.5)
    bank = np.array(
        [
            phi * second_order_step(T - 1.0, z) * (T >= 1.0)
            - phi * second_order_step(T - 11.0, z) * (T >= 11.0)
            for z in zetas
        ]
    )
    cmd = np.where((T >= 1.0) & (T < 11.0), phi, 0.0)[None, :] + np.zeros((3, 1))
    ail = 0.1 * np.gradient(bank, T, axis=1)
    spec = MetricSpec(
        steps=(
            StepSegment(1.0, 11.0, 0.0, phi),
            StepSegment(11.0, 20.0, phi, 0.0),
            StepSegment(15.0, 20.0, 0.0, 0.0),
        ),  # zero-size: skipped
        settle_band_frac=0.05,
        settle_band_rad=None,
        hold_band_rad=np.deg2rad(2.0),
        bank_limit_rad=np.deg2rad(32.0),
        aileron_limit_rad=0.3,
        aileron_rate_limit_rad_s=1.0,
    )
    return bank, cmd, ail, spec


def test_evaluate_worst_over_steps_and_divergence():
    bank, cmd, ail, spec = _two_step_case()
    div = np.array([np.inf, np.inf, 15.0])
    bank[2, T >= 15.0] = np.nan
    ail[2, T >= 15.0] = np.inf
    tr = _trace(bank, cmd, ail, div)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        res = evaluate(tr, spec)
        per = evaluate_steps(tr, spec)
    assert len(per) == 2
    # first step computed directly
    s1 = step_metrics(T, bank, 1.0, 0.0, 0.5, 11.0, 0.025)
    for k, v in s1.items():
        assert_allclose(per[0][k], v, rtol=1e-12)
    # worst over steps, diverged run inf everywhere except safety
    for k in per[0]:
        expect = np.maximum(per[0][k], per[1][k])
        assert_allclose(res[k][:2], expect[:2], rtol=1e-12)
        assert res[k][2] == np.inf
    assert np.isfinite(per[0]["settling_time_s"][2])  # step 1 ended before 15 s
    assert np.all(per[1]["settling_time_s"][2] == np.inf)
    # zeta = 0.3 overshoot, both steps alike: exp(-pi z/sqrt(1-z^2)) [textbook identity]
    assert_allclose(res["overshoot_pct"][0], 100 * np.exp(-np.pi * 0.3 / np.sqrt(0.91)), rtol=1e-4)
    for k in ("rms_error_rad", "time_outside_band_s", "aileron_rms_rad", "pct_time_at_limit"):
        assert np.all(np.isfinite(res[k][:2])) and res[k][2] == np.inf
    assert_array_equal(res["diverged"], [False, False, True])
    # peaks 39.3 and 29.97 deg against a 32 deg limit; run 3 diverged
    assert_array_equal(res["limit_exceeded"], [True, False, True])
    # every output is (batch,), NaN-free and described in METRIC_INFO
    for k, v in res.items():
        assert v.shape == (3,) and not np.any(np.isnan(v.astype(float)))
        assert k in METRIC_INFO
    assert "max_abs_bank_rad" not in res


def test_pure_hold_has_no_step_keys():
    bank, cmd, ail, spec = _two_step_case()
    hold = MetricSpec((), None, 0.01, 0.02, 0.5, 0.3, 1.0)
    res = evaluate(_trace(bank, cmd, ail, np.full(3, np.inf)), hold)
    assert "settling_time_s" not in res and "rms_error_rad" in res


def test_metric_spec_validation():
    with pytest.raises(ValueError):
        MetricSpec((), 0.05, 0.01, 0.02, 0.5, 0.3, 1.0)  # both bands
    with pytest.raises(ValueError):
        MetricSpec((), None, None, 0.02, 0.5, 0.3, 1.0)  # no band
    with pytest.raises(ValueError):
        StepSegment(5.0, 4.0, 0.0, 0.1)


# ------------------------------------------------------- property: batching
@settings(max_examples=40, deadline=None)
@given(
    y=hnp.arrays(np.float64, (3, 60), elements=hst.floats(-3, 3, allow_subnormal=False)),
    y0=hst.floats(-1, 1),
    y1=hst.floats(-1, 1),
    band=hst.floats(0, 0.5),
)
def test_step_metrics_batch_consistent_and_nan_free(y, y0, y1, band):
    t = np.linspace(0.0, 5.9, 60)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        m = step_metrics(t, y, 1.0, y0, y1, 5.0, band)
        h = hold_metrics(t, y, y1, band)
        a = actuator_metrics(t, y, 1.0, 2.0)
        s = safety_metrics(t, y, 1.0, np.array([np.inf, 2.0, np.inf]))
    for d in (m, h, a, s):
        for v in d.values():
            assert not np.any(np.isnan(v.astype(float)))
    for i in range(3):
        mi = step_metrics(t, y[i], 1.0, y0, y1, 5.0, band)
        for k in m:
            assert_allclose(m[k][i], mi[k][0], rtol=1e-12, atol=0)
