"""The ``[disturbance]`` section of a scenario file.

.. code-block:: toml

    [disturbance]
    roll_moment_deg_s2 = 2.0          # steady rolling-moment bias, as roll acceleration
    roll_moment_step_deg_s2 = 4.0     # optional step in it ...
    roll_moment_step_time_s = 20.0    # ... at this time

    [disturbance.turbulence]          # Dryden, MIL-F-8785C (sim.turbulence)
    intensity = "moderate"            # light | moderate | severe  (or wind_20ft_kt = 25)
    altitude_ft = 800                 # or altitude_m
    # or explicitly: sigma_v_mps, sigma_w_mps, length_v_m, length_w_m (all four)

    [[disturbance.gust]]              # any number of 1 − cos gusts (sim.gusts)
    onset_s = 12.0
    length_m = 60.0                   # build-up length d_m (onset to peak)
    channel = "side"                  # side (amplitude_mps) | roll (amplitude_deg_s)
    amplitude_mps = 5.0
    hold_after = false                # true: MIL-F-8785C ramp, holds the peak

Readable units are converted here, once: feet, knots and degrees to SI.

Which inputs reach which model: turbulence and gusts act through the plant's
gust columns (``b_disturbance[:, :3]``). A model without them (a user matrix
model given no ``b_disturbance``) rejects ``[disturbance.turbulence]`` and
``[[disturbance.gust]]``. The roll-only model (states p, phi) has only a
``p_gust`` column: of the turbulence only the roll-rate gust p_g reaches it,
and of the discrete gusts only ``channel = "roll"``; side gusts and r_g have
no path into it. The rolling-moment bias acts on every model.
"""

from __future__ import annotations

import math

from .disturbance import DisturbanceSet, SteadyRollMoment
from .errors import ScenarioError
from .gusts import OneMinusCosineGust
from .section import Section
from .turbulence import (
    FT_M,
    INTENSITY_W20_MPS,
    KT_MPS,
    DrydenParams,
    DrydenTurbulence,
    dryden_params,
)

__all__ = ["parse_disturbance"]

#: Largest |rolling-moment bias| accepted, as roll acceleration (deg/s²).
MAX_ROLL_ACCEL_DEG_S2 = 500.0
#: Largest |side-gust amplitude| (m/s) and |roll-gust amplitude| (deg/s).
MAX_SIDE_GUST_MPS = 50.0
MAX_ROLL_GUST_DEG_S = 180.0
#: Largest discrete-gust build-up length (m).
MAX_GUST_LENGTH_M = 10_000.0
#: Ranges for the turbulence keys.
MAX_W20_KT = 100.0
MAX_ALTITUDE_FT = 100_000.0
MAX_SIGMA_MPS = 30.0
MAX_SCALE_LENGTH_M = 5_000.0

_EXPLICIT = ("sigma_v_mps", "sigma_w_mps", "length_v_m", "length_w_m")
_NO_GUST_PATH = (
    "this aircraft model has no gust inputs (its b_disturbance gust columns are zero), "
    "so turbulence and gusts cannot act on it; allowed here: roll_moment_deg_s2 and the "
    "roll_moment_step keys only"
)


def parse_disturbance(
    section: Section | None, *, airspeed_mps: float, span_m: float, has_gust_inputs: bool
) -> DisturbanceSet:
    """Build the disturbance sources of a scenario.

    Parameters
    ----------
    section : Section or None
        The ``[disturbance]`` table, or None when the file has none.
    airspeed_mps : m/s
        The plant's true airspeed (Dryden filters, gust distance).
    span_m : m
        The plant's wing span (Dryden roll- and yaw-rate filters).
    has_gust_inputs : bool
        Whether the plant has any gust column (v_gust, p_gust or r_gust).

    Returns
    -------
    DisturbanceSet
        Empty when there is no section.

    Raises
    ------
    ScenarioError
        One line naming the file, the key and the allowed range.
    """
    if section is None:
        return DisturbanceSet()
    sources: list = []
    moment = _parse_roll_moment(section)
    if moment is not None:
        sources.append(moment)

    turb = section.sub("turbulence")
    if turb is not None:
        if not has_gust_inputs:
            raise section.error("turbulence", _NO_GUST_PATH)
        if span_m is None:  # the Dryden roll- and yaw-rate filters need it
            raise section.error(
                "turbulence", "needs the wing span; allowed: give span_m in [aircraft] (0.1 ≤ span_m ≤ 100)"
            )
        sources.append(DrydenTurbulence(_parse_turbulence(turb, airspeed_mps, span_m)))
        turb.finish()

    gusts = section.tables("gust")
    if gusts and not has_gust_inputs:
        raise section.error("gust", _NO_GUST_PATH)
    for g in gusts:
        sources.append(_parse_gust(g, airspeed_mps))
        g.finish()

    section.finish()
    return DisturbanceSet(sources)


def _parse_roll_moment(s: Section) -> SteadyRollMoment | None:
    lim = MAX_ROLL_ACCEL_DEG_S2
    bias = s.number("roll_moment_deg_s2", 0.0, lo=-lim, hi=lim)
    has_step = s.has("roll_moment_step_deg_s2")
    has_time = s.has("roll_moment_step_time_s")
    step = s.number("roll_moment_step_deg_s2", 0.0, lo=-lim, hi=lim)
    step_time = s.number("roll_moment_step_time_s", None, lo=0.0)
    if has_step and not has_time:
        raise s.error(
            "roll_moment_step_time_s",
            "is required when roll_moment_step_deg_s2 is given; allowed: 0 ≤ roll_moment_step_time_s",
        )
    if has_time and not has_step:
        raise s.error(
            "roll_moment_step_time_s",
            "is given without roll_moment_step_deg_s2; allowed: both keys or neither",
        )
    if bias == 0.0 and not has_step:
        return None
    return SteadyRollMoment(
        accel_rad_s2=math.radians(bias),
        step_time_s=step_time,
        step_accel_rad_s2=math.radians(step),
    )


def _parse_turbulence(s: Section, airspeed_mps: float, span_m: float) -> DrydenParams:
    explicit = [k for k in _EXPLICIT if s.has(k)]
    model_keys = ("intensity", "wind_20ft_kt", "altitude_ft", "altitude_m")
    if explicit:
        for key in model_keys:
            if s.has(key):
                raise s.error(
                    key,
                    "cannot be combined with explicit "
                    + ", ".join(explicit)
                    + "; allowed: the four keys "
                    + ", ".join(_EXPLICIT)
                    + ", or intensity (or wind_20ft_kt) with altitude_ft",
                )
        for key in _EXPLICIT:
            if not s.has(key):
                raise s.error(
                    key,
                    "is required with explicit turbulence values; allowed: all of " + ", ".join(_EXPLICIT),
                )
        return DrydenParams(
            sigma_v_mps=s.number("sigma_v_mps", lo=0.0, hi=MAX_SIGMA_MPS),
            sigma_w_mps=s.number("sigma_w_mps", lo=0.0, hi=MAX_SIGMA_MPS),
            length_v_m=s.number("length_v_m", lo=0.0, lo_open=True, hi=MAX_SCALE_LENGTH_M),
            length_w_m=s.number("length_w_m", lo=0.0, lo_open=True, hi=MAX_SCALE_LENGTH_M),
            airspeed_mps=float(airspeed_mps),
            span_m=float(span_m),
        )

    has_int, has_w20 = s.has("intensity"), s.has("wind_20ft_kt")
    if has_int and has_w20:
        raise s.error("wind_20ft_kt", "cannot be combined with intensity; allowed: one of the two")
    if not (has_int or has_w20):
        raise s.error(
            "intensity",
            "is required (light, moderate, severe); allowed instead: wind_20ft_kt, or all of "
            + ", ".join(_EXPLICIT),
        )
    if has_int:
        w20_mps = INTENSITY_W20_MPS[s.string("intensity", choices=tuple(INTENSITY_W20_MPS))]
    else:
        w20_mps = s.number("wind_20ft_kt", lo=0.0, hi=MAX_W20_KT) * KT_MPS

    has_ft, has_m = s.has("altitude_ft"), s.has("altitude_m")
    if has_ft and has_m:
        raise s.error("altitude_m", "cannot be combined with altitude_ft; allowed: one of the two")
    if not (has_ft or has_m):
        raise s.error(
            "altitude_ft",
            "is required (height above ground); "
            f"allowed: 0 ≤ altitude_ft ≤ {MAX_ALTITUDE_FT:g}, or altitude_m",
        )
    if has_ft:
        altitude_m = s.number("altitude_ft", lo=0.0, hi=MAX_ALTITUDE_FT) * FT_M
    else:
        altitude_m = s.number("altitude_m", lo=0.0, hi=MAX_ALTITUDE_FT * FT_M)
    try:
        return dryden_params(altitude_m, w20_mps, airspeed_mps, span_m)
    except ValueError as exc:  # a plant without airspeed or span
        raise ScenarioError(f"{s.where('intensity')}: {exc}") from None


def _require(s: Section, key: str, allowed: str) -> None:
    """Reject a missing required key with its allowed range in the message."""
    if not s.has(key):
        raise s.error(key, f"is required; allowed: {allowed}")


def _parse_gust(g: Section, airspeed_mps: float) -> OneMinusCosineGust:
    _require(g, "onset_s", "0 ≤ onset_s (s)")
    _require(g, "length_m", f"0 < length_m ≤ {MAX_GUST_LENGTH_M:g} (build-up length d_m)")
    onset = g.number("onset_s", lo=0.0)
    length = g.number("length_m", lo=0.0, lo_open=True, hi=MAX_GUST_LENGTH_M)
    channel = g.string("channel", "side", choices=("side", "roll"))
    hold = g.boolean("hold_after", False)
    if channel == "side":
        if g.has("amplitude_deg_s"):
            raise g.error(
                "amplitude_deg_s",
                'is for channel = "roll"; allowed for a side gust: amplitude_mps (m/s)',
            )
        _require(g, "amplitude_mps", f"-{MAX_SIDE_GUST_MPS:g} ≤ amplitude_mps ≤ {MAX_SIDE_GUST_MPS:g}")
        amplitude = g.number("amplitude_mps", lo=-MAX_SIDE_GUST_MPS, hi=MAX_SIDE_GUST_MPS)
        name = "v_gust"
    else:
        if g.has("amplitude_mps"):
            raise g.error(
                "amplitude_mps",
                'is for channel = "side"; allowed for a roll gust: amplitude_deg_s (deg/s)',
            )
        lim = MAX_ROLL_GUST_DEG_S
        _require(g, "amplitude_deg_s", f"-{lim:g} ≤ amplitude_deg_s ≤ {lim:g}")
        amplitude = math.radians(g.number("amplitude_deg_s", lo=-MAX_ROLL_GUST_DEG_S, hi=MAX_ROLL_GUST_DEG_S))
        name = "p_gust"
    return OneMinusCosineGust(
        onset_s=onset,
        length_m=length,
        amplitude=amplitude,
        channel=name,
        airspeed_mps=float(airspeed_mps),
        hold_after=hold,
    )
