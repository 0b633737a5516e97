"""The ``[aircraft]`` section: which lateral model to fly.

``model`` selects a preset or a user model:

* ``"light-single"`` — four-seat light single (Nelson, 2nd ed.), fixed flight condition;
* ``"small-uav"`` — small fixed-wing UAV (Beard & McLain 2012) at ``airspeed_mps``;
* ``"roll-only"`` — φ/δa = a2 / (s (s + a1)) with ``roll_damping_per_s`` (a1) and
  ``aileron_power_per_s2`` (a2), or the UAV's values at ``airspeed_mps``;
* ``"matrices"`` — user state-space ``a``, ``b`` with ``states`` names;
* ``"derivatives"`` — user dimensional stability derivatives.

A user model whose fastest-growing mode doubles in under ``ln 2 / 0.1 ≈ 6.9 s``
is refused unless ``allow_unstable = true``: that is quicker than MIL-F-8785C
Level 2's spiral limit (8 s to double) and usually means a sign error.
"""

from __future__ import annotations

import numpy as np

from . import presets
from .plant import LinearPlant, check_plant
from .section import REQUIRED, Section

__all__ = ["parse_aircraft", "MODELS", "MAX_GROWTH_PER_S"]

MODELS = ("light-single", "small-uav", "roll-only", "matrices", "derivatives")
MAX_GROWTH_PER_S = 0.1

_DERIVATIVES = {
    # key in the file (unit in the name) -> builder argument
    "y_beta_mps2": "y_beta",
    "y_p_mps2": "y_p",
    "y_r_mps2": "y_r",
    "l_beta_per_s2": "l_beta",
    "l_p_per_s": "l_p",
    "l_r_per_s": "l_r",
    "n_beta_per_s2": "n_beta",
    "n_p_per_s": "n_p",
    "n_r_per_s": "n_r",
    "l_da_per_s2": "l_da",
    "n_da_per_s2": "n_da",
    "y_da_mps2": "y_da",
    "y_dr_mps2": "y_dr",
    "l_dr_per_s2": "l_dr",
    "n_dr_per_s2": "n_dr",
}
_REQUIRED_DERIVATIVES = (
    "y_beta_mps2",
    "l_beta_per_s2",
    "l_p_per_s",
    "l_r_per_s",
    "n_beta_per_s2",
    "n_p_per_s",
    "n_r_per_s",
    "l_da_per_s2",
)


def parse_aircraft(sec: Section) -> LinearPlant:
    """Build the plant named by an ``[aircraft]`` section."""
    model = sec.string("model", choices=MODELS)
    user_model = model in ("matrices", "derivatives")
    if model == "light-single":
        plant = presets.light_single()
    elif model == "small-uav":
        plant = presets.small_uav(sec.number("airspeed_mps", 25.0, lo=12.0, hi=40.0))
    elif model == "roll-only":
        if sec.has("roll_damping_per_s") or sec.has("aileron_power_per_s2"):
            a1 = sec.number("roll_damping_per_s", lo=0.0, hi=100.0)
            a2 = sec.number("aileron_power_per_s2", lo=0.0, hi=1000.0, lo_open=True)
            v = sec.number("airspeed_mps", 25.0, lo=1.0, hi=300.0, lo_open=True)
        else:
            v = sec.number("airspeed_mps", 25.0, lo=12.0, hi=40.0)
            a1, a2 = presets.roll_coefficients_uav(v)
        span = sec.number("span_m", None, lo=0.1, hi=100.0)
        plant = presets.roll_only(a1, a2, airspeed_mps=v, span_m=span)
    elif model == "matrices":
        a = sec.array("a", shape=(None, None))
        n = a.shape[0]
        if a.shape != (n, n):
            raise sec.error("a", f"has shape {a.shape[0]}x{a.shape[1]}; allowed: a square n x n matrix")
        b = sec.array("b", shape=(n, None))
        if b.shape[1] not in (1, 2):
            raise sec.error("b", f"has {b.shape[1]} columns; allowed: 1 (aileron) or 2 (aileron, rudder)")
        names = sec._get("states", None)
        if (
            not isinstance(names, list)
            or len(names) != n
            or not all(isinstance(x, str) for x in names)
            or len(set(names)) != n
            or "phi" not in names
            or "p" not in names
        ):
            raise sec.error(
                "states", f'must list {n} distinct state names including "p" (roll rate) and "phi" (bank)'
            )
        bd = sec.array("b_disturbance", None, shape=(n, 4))
        plant = presets.from_matrices(
            a,
            b,
            tuple(names),
            airspeed_mps=sec.number("airspeed_mps", lo=1.0, hi=300.0, lo_open=True),
            b_disturbance=bd,
            span_m=sec.number("span_m", None, lo=0.1, hi=100.0),
        )
    else:  # derivatives
        kwargs = {
            arg: sec.number(key, REQUIRED if key in _REQUIRED_DERIVATIVES else 0.0, lo=-1e4, hi=1e4)
            for key, arg in _DERIVATIVES.items()
        }
        plant = presets.from_dimensional_derivatives(
            airspeed_mps=sec.number("airspeed_mps", lo=1.0, hi=300.0, lo_open=True),
            span_m=sec.number("span_m", None, lo=0.1, hi=100.0),
            name="user derivatives",
            **kwargs,
        )
    if user_model:
        try:
            check_plant(plant)
        except ValueError as exc:
            raise sec.error("a" if model == "matrices" else "model", str(exc)) from None
        allow = sec.boolean("allow_unstable", False)
        growth = float(np.max(np.linalg.eigvals(plant.a).real))
        if growth > MAX_GROWTH_PER_S and not allow:
            raise sec.error(
                "a" if model == "matrices" else "model",
                f"has an unstable mode growing at {growth:.3g} 1/s; allowed: real parts ≤ "
                f"{MAX_GROWTH_PER_S} 1/s (time to double ≥ 6.9 s) unless allow_unstable = true",
            )
    sec.finish()
    return plant
