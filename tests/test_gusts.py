"""Discrete 1 − cos gusts (sim.gusts) and the [disturbance] parser (sim.disturbance_section)."""

from __future__ import annotations

import math
import tomllib

import numpy as np
import pytest
from numpy.testing import assert_allclose
from rollrig.sim.disturbance import DisturbanceSet, DisturbanceSource, SteadyRollMoment, disturbance_record
from rollrig.sim.disturbance_section import parse_disturbance
from rollrig.sim.errors import ScenarioError
from rollrig.sim.gusts import OneMinusCosineGust, one_minus_cosine
from rollrig.sim.section import Section
from rollrig.sim.seeding import run_generators
from rollrig.sim.turbulence import DrydenParams, DrydenTurbulence, dryden_params

V, B = 50.0, 10.0


def gust_signal(gust: OneMinusCosineGust, dt: float, n: int, batch: int = 3, block: int = 64):
    return disturbance_record(gust, dt, n, lambda name: run_generators(0, range(batch), name), block=block)


def analytic_1mc(t, onset, d_m, amp, v, hold):
    """MIL-F-8785C discrete gust, written out point by point (independent of sim.gusts):
    v = (v_m/2)(1 − cos(π x/d_m)) for 0 ≤ x ≤ d_m, x = V (t − onset); after d_m it holds v_m
    (the standard's ramp) or mirrors back to zero at 2 d_m (isolated gust)."""
    out = []
    for ti in t:
        x = v * (ti - onset)
        if x < 0:
            out.append(0.0)
        elif x <= d_m or (not hold and x <= 2 * d_m):
            out.append(amp / 2 * (1 - math.cos(math.pi * x / d_m)))
        else:
            out.append(amp if hold else 0.0)
    return np.array(out)


# ----------------------------------------------------------------- the 1 − cos shape
@pytest.mark.parametrize("hold", [False, True])
@pytest.mark.parametrize("channel, ch", [("v_gust", 0), ("p_gust", 1)])
def test_gust_equals_analytic_shape_at_sample_points(hold, channel, ch):
    # onset 1 s, d_m = 25 m at 50 m/s: peak at t = 1.5 s, isolated gust ends at t = 2.0 s,
    # both exactly on the 0.01 s grid.
    dt, n = 0.01, 300
    g = OneMinusCosineGust(1.0, 25.0, 4.0, channel, V, hold_after=hold)
    out = gust_signal(g, dt, n)
    t = np.arange(n) * dt
    want = analytic_1mc(t, 1.0, 25.0, 4.0, V, hold)
    assert out.shape == (n, 3, 4)
    for b in range(3):
        assert_allclose(out[:, b, ch], want, rtol=0, atol=1e-12)
    others = [c for c in range(4) if c != ch]
    assert np.all(out[:, :, others] == 0.0)
    assert_allclose(out[150, 0, ch], 4.0, atol=1e-12)  # peak v_m at x = d_m
    assert np.all(out[:100, :, ch] == 0.0)  # nothing before onset
    if hold:
        assert_allclose(out[150:, 0, ch], 4.0, atol=1e-12)  # MIL-F-8785C ramp holds v_m
    else:
        assert_allclose(out[200, 0, ch], 0.0, atol=1e-12)  # end of the gust, x = 2 d_m
        assert out[199, 0, ch] > 0.0
        assert np.all(out[201:, :, ch] == 0.0)  # zero after the gust has passed
    assert_allclose(g.duration_s, 0.5 if hold else 1.0, rtol=1e-12)


def test_shape_is_symmetric_and_bounded():
    x = np.linspace(-10.0, 70.0, 801)
    v = one_minus_cosine(x, 30.0, -2.0)
    assert np.all(v <= 0.0) and np.all(v >= -2.0)
    assert_allclose(v, one_minus_cosine(60.0 - x, 30.0, -2.0), atol=1e-12)  # mirror about d_m


def test_gust_validation_and_protocol():
    g = OneMinusCosineGust(0.0, 10.0, 1.0, "v_gust", V)
    assert isinstance(g, DisturbanceSource)
    with pytest.raises(ValueError, match="channel"):
        OneMinusCosineGust(0.0, 10.0, 1.0, "r_gust", V)
    with pytest.raises(ValueError, match="length_m"):
        OneMinusCosineGust(0.0, 0.0, 1.0, "v_gust", V)


def test_gust_and_bias_sum_in_a_disturbance_set():
    # SteadyRollMoment from sim.disturbance is reused for bias and bias steps.
    g = OneMinusCosineGust(0.5, 25.0, 3.0, "v_gust", V)
    m = SteadyRollMoment(accel_rad_s2=0.1, step_time_s=1.0, step_accel_rad_s2=0.2)
    ds = DisturbanceSet([g, m])
    out = disturbance_record(ds, 0.01, 200, lambda name: run_generators(1, range(2), name))
    t = np.arange(200) * 0.01
    assert_allclose(out[:, 1, 0], analytic_1mc(t, 0.5, 25.0, 3.0, V, False), atol=1e-12)
    assert_allclose(out[:, 0, 3], np.where(t >= 1.0 - 1e-12, 0.3, 0.1), atol=1e-15)


# ----------------------------------------------------------------- the [disturbance] parser
FILE = "case.toml"


def section(text: str) -> Section:
    return Section(tomllib.loads(text)["disturbance"], file=FILE, path="disturbance")


def parse(text: str, **kw):
    args = dict(airspeed_mps=V, span_m=B, has_gust_inputs=True) | kw
    return parse_disturbance(section(text), **args)


GOOD = """
[disturbance]
roll_moment_deg_s2 = 2.0
roll_moment_step_deg_s2 = 4.0
roll_moment_step_time_s = 20.0
[disturbance.turbulence]
intensity = "moderate"
altitude_ft = 800
[[disturbance.gust]]
onset_s = 12.0
length_m = 60.0
amplitude_mps = 5.0
channel = "side"
[[disturbance.gust]]
onset_s = 30.0
length_m = 40.0
amplitude_deg_s = -10.0
channel = "roll"
hold_after = true
"""


def test_good_section_builds_all_sources_in_si():
    ds = parse(GOOD)
    kinds = [type(s) for s in ds.sources]
    assert kinds == [SteadyRollMoment, DrydenTurbulence, OneMinusCosineGust, OneMinusCosineGust]
    m, turb, side, roll = ds.sources
    assert_allclose(m.accel_rad_s2, math.radians(2.0), rtol=1e-12)
    assert_allclose(m.step_accel_rad_s2, math.radians(4.0), rtol=1e-12)
    assert m.step_time_s == 20.0
    # 800 ft and 30 kt ("moderate", MIL-F-8785C) converted at load: 1 ft = 0.3048 m.
    assert turb.params == dryden_params(800 * 0.3048, 30 * 1852 / 3600, V, B)
    assert (side.channel, side.amplitude, side.length_m, side.onset_s) == ("v_gust", 5.0, 60.0, 12.0)
    assert not side.hold_after and side.airspeed_mps == V
    assert roll.channel == "p_gust" and roll.hold_after
    assert_allclose(roll.amplitude, math.radians(-10.0), rtol=1e-12)


def test_no_section_is_no_disturbance():
    ds = parse_disturbance(None, airspeed_mps=V, span_m=B, has_gust_inputs=False)
    assert not ds and ds.sources == ()


def test_explicit_turbulence_and_wind_speed_forms():
    ds = parse(
        "[disturbance.turbulence]\nsigma_v_mps = 2.0\nsigma_w_mps = 1.5\n"
        "length_v_m = 100.0\nlength_w_m = 60.0\n"
    )
    (turb,) = ds.sources
    assert turb.params == DrydenParams(2.0, 1.5, 100.0, 60.0, V, B)
    ds = parse("[disturbance.turbulence]\nwind_20ft_kt = 30\naltitude_m = 243.84\n")
    assert_allclose(ds.sources[0].params.sigma_w_mps, 0.1 * 30 * 1852 / 3600, rtol=1e-12)
    assert_allclose(ds.sources[0].params.length_w_m, 243.84, rtol=1e-12)  # L_w = h below 1000 ft


def test_roll_moment_only_works_without_gust_inputs():
    ds = parse("[disturbance]\nroll_moment_deg_s2 = -1.5\n", has_gust_inputs=False)
    (m,) = ds.sources
    assert_allclose(m.accel_rad_s2, math.radians(-1.5), rtol=1e-12)
    assert m.step_time_s is None


TURB = "[disturbance.turbulence]\n"
GUST = "[[disturbance.gust]]\nonset_s = 1.0\nlength_m = 30.0\n"
BAD = [
    # (scenario text, key named, path named, extra words expected, has_gust_inputs)
    (
        "[disturbance]\nroll_moment_deg_s = 2.0\n",
        "roll_moment_deg_s",
        "[disturbance]",
        "did you mean 'roll_moment_deg_s2'",
        True,
    ),
    (
        "[disturbance]\nroll_moment_deg_s2 = 900.0\n",
        "roll_moment_deg_s2",
        "[disturbance]",
        "-500 ≤ roll_moment_deg_s2 ≤ 500",
        True,
    ),
    (
        "[disturbance]\nroll_moment_step_deg_s2 = 1.0\n",
        "roll_moment_step_time_s",
        "[disturbance]",
        "allowed",
        True,
    ),
    (
        "[disturbance]\nroll_moment_step_time_s = 5.0\n",
        "roll_moment_step_time_s",
        "[disturbance]",
        "allowed",
        True,
    ),
    (
        "[disturbance]\nroll_moment_step_deg_s2 = 1.0\nroll_moment_step_time_s = -2.0\n",
        "roll_moment_step_time_s",
        "[disturbance]",
        "0 ≤ roll_moment_step_time_s",
        True,
    ),
    (
        TURB + 'intensity = "strong"\naltitude_ft = 500\n',
        "intensity",
        "[disturbance.turbulence]",
        "'light', 'moderate', 'severe'",
        True,
    ),
    (
        TURB + 'intensity = "light"\nwind_20ft_kt = 20\naltitude_ft = 500\n',
        "wind_20ft_kt",
        "[disturbance.turbulence]",
        "allowed: one of the two",
        True,
    ),
    (TURB + "altitude_ft = 500\n", "intensity", "[disturbance.turbulence]", "allowed", True),
    (
        TURB + 'intensity = "light"\n',
        "altitude_ft",
        "[disturbance.turbulence]",
        "0 ≤ altitude_ft ≤ 100000",
        True,
    ),
    (
        TURB + 'intensity = "light"\naltitude_ft = -5\n',
        "altitude_ft",
        "[disturbance.turbulence]",
        "0 ≤ altitude_ft ≤ 100000",
        True,
    ),
    (
        TURB + "wind_20ft_kt = 150\naltitude_ft = 500\n",
        "wind_20ft_kt",
        "[disturbance.turbulence]",
        "0 ≤ wind_20ft_kt ≤ 100",
        True,
    ),
    (
        TURB + "sigma_v_mps = 2.0\nsigma_w_mps = 1.0\nlength_v_m = 100.0\n",
        "length_w_m",
        "[disturbance.turbulence]",
        "allowed: all of",
        True,
    ),
    (
        TURB + "sigma_v_mps = 2.0\nsigma_w_mps = 1.0\nlength_v_m = 100.0\nlength_w_m = 50.0\n"
        'intensity = "light"\n',
        "intensity",
        "[disturbance.turbulence]",
        "allowed",
        True,
    ),
    (
        TURB + "sigma_v_mps = 99.0\nsigma_w_mps = 1.0\nlength_v_m = 100.0\nlength_w_m = 50.0\n",
        "sigma_v_mps",
        "[disturbance.turbulence]",
        "0 ≤ sigma_v_mps ≤ 30",
        True,
    ),
    (
        TURB + "sigma_v_mps = 1.0\nsigma_w_mps = 1.0\nlength_v_m = 0.0\nlength_w_m = 50.0\n",
        "length_v_m",
        "[disturbance.turbulence]",
        "0 < length_v_m ≤ 5000",
        True,
    ),
    (
        TURB + 'intensity = "light"\naltitude_ft = 500\nscale = 2\n',
        "scale",
        "[disturbance.turbulence]",
        "known keys",
        True,
    ),
    (
        TURB + 'intensity = "light"\naltitude_ft = 500\n',
        "turbulence",
        "[disturbance]",
        "no gust inputs",
        False,
    ),
    (GUST + "amplitude_mps = 3.0\n", "gust", "[disturbance]", "no gust inputs", False),
    (
        GUST.replace("30.0", "0.0") + "amplitude_mps = 3.0\n",
        "length_m",
        "[disturbance.gust #1]",
        "0 < length_m ≤ 10000",
        True,
    ),
    (
        GUST + 'amplitude_mps = 3.0\nchannel = "yaw"\n',
        "channel",
        "[disturbance.gust #1]",
        "'side', 'roll'",
        True,
    ),
    (
        GUST + "amplitude_deg_s = 3.0\n",
        "amplitude_deg_s",
        "[disturbance.gust #1]",
        "allowed for a side gust: amplitude_mps",
        True,
    ),
    (
        GUST + 'amplitude_mps = 3.0\nchannel = "roll"\n',
        "amplitude_mps",
        "[disturbance.gust #1]",
        "allowed for a roll gust: amplitude_deg_s",
        True,
    ),
    (
        GUST + "amplitude_mps = 80.0\n",
        "amplitude_mps",
        "[disturbance.gust #1]",
        "-50 ≤ amplitude_mps ≤ 50",
        True,
    ),
    (
        GUST + "amplitude_mps = 1.0\n" + GUST + "amplitude_mps = 1.0\nonset_s_ = 3\n",
        "onset_s_",
        "[disturbance.gust #2]",
        "did you mean 'onset_s'",
        True,
    ),
    ("[disturbance]\ngust = {onset_s = 1.0}\n", "gust", "[disturbance]", "must be an array of tables", True),
    (
        "[[disturbance.gust]]\nlength_m = 30.0\namplitude_mps = 1.0\n",
        "onset_s",
        "[disturbance.gust #1]",
        "is required; allowed: 0 ≤ onset_s",
        True,
    ),
    (
        '[[disturbance.gust]]\nonset_s = 1.0\nlength_m = 30.0\nchannel = "roll"\n',
        "amplitude_deg_s",
        "[disturbance.gust #1]",
        "-180 ≤ amplitude_deg_s ≤ 180",
        True,
    ),
]


@pytest.mark.parametrize("text, key, path, words, gusty", BAD)
def test_bad_sections_raise_one_line_errors(text, key, path, words, gusty):
    with pytest.raises(ScenarioError) as info:
        parse(text, has_gust_inputs=gusty)
    msg = str(info.value)
    assert "\n" not in msg
    assert msg.startswith(f"{FILE}: {path} {key}:"), msg
    assert words in msg, msg
