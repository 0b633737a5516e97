"""Builders of linear lateral aircraft models, and the named presets.

Every builder returns a :class:`sim.plant.LinearPlant` in SI units and the
project's sign convention (bank positive right wing down, roll rate positive
rolling right, positive aileron gives a positive rolling moment).

Rudder convention: the project's sign rules cover the aileron only. The rudder
column keeps the usual textbook sense in which a positive rudder deflection
gives a negative (nose-left) yawing moment; its side force and rolling moment
are whatever the source data give.

All lateral builders go through :func:`from_dimensional_derivatives`, which
knows which entries of ``A`` are aerodynamic and which are kinematic, and so
builds the gust columns of ``b_disturbance`` together with ``A`` (see
:mod:`sim.plant` for the air-relative gust model).
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass
from types import MappingProxyType

import numpy as np
from rollrig.sim.plant import N_CONTROLS, N_DISTURBANCES, LinearPlant

__all__ = [
    "LATERAL_STATES",
    "ROLL_ONLY_STATES",
    "STANDARD_GRAVITY",
    "AirframeCoefficients",
    "SMALL_UAV_AIRFRAME",
    "from_dimensional_derivatives",
    "light_single",
    "small_uav",
    "small_uav_derivatives",
    "roll_coefficients_uav",
    "roll_only",
    "from_matrices",
    "PRESETS",
]

LATERAL_STATES: tuple[str, ...] = ("beta", "p", "r", "phi")
ROLL_ONLY_STATES: tuple[str, ...] = ("p", "phi")
#: Standard gravity, m/s² (CGPM 1901 conventional value).
STANDARD_GRAVITY = 9.80665
_FT = 0.3048  # m per international foot (exact)


def from_dimensional_derivatives(
    *,
    airspeed_mps: float,
    y_beta: float,
    l_beta: float,
    l_p: float,
    l_r: float,
    n_beta: float,
    n_p: float,
    n_r: float,
    l_da: float,
    n_da: float,
    y_dr: float = 0.0,
    l_dr: float = 0.0,
    n_dr: float = 0.0,
    y_p: float = 0.0,
    y_r: float = 0.0,
    y_da: float = 0.0,
    g: float = STANDARD_GRAVITY,
    span_m: float | None = None,
    name: str = "dimensional-derivatives",
) -> LinearPlant:
    """Lateral model, states ``(beta, p, r, phi)``, from dimensional derivatives.

    Linearised about straight and level flight with zero pitch attitude
    (``theta0 = 0``), stability axes::

        A = [[Yb/V, Yp/V, Yr/V - 1, g/V],
             [Lb,   Lp,   Lr,       0  ],
             [Nb,   Np,   Nr,       0  ],
             [0,    1,    0,        0  ]]

    The ``-1`` (in ``d beta/dt`` per ``r``), ``g/V`` and the ``phi`` row are
    kinematic; the rest is aerodynamic and also sets the gust columns:
    ``b_disturbance[:, v_gust] = -[Yb/V, Lb, Nb, 0] / V``,
    ``b_disturbance[:, p_gust] = -[Yp/V, Lp, Np, 0]``,
    ``b_disturbance[:, r_gust] = -[Yr/V, Lr, Nr, 0]`` and
    ``b_disturbance[:, roll_accel] = [0, 1, 0, 0]``.

    Parameters
    ----------
    airspeed_mps : float, m/s
        Trim airspeed ``V``.
    y_beta : float, m/s² per rad
        Side acceleration per sideslip.
    l_beta, n_beta : float, 1/s²
        Roll and yaw angular acceleration per sideslip (rad/s² per rad).
    l_p, l_r, n_p, n_r : float, 1/s
        Roll and yaw angular acceleration per roll and yaw rate.
    l_da, n_da : float, 1/s²
        Roll and yaw angular acceleration per aileron (rad/s² per rad); a
        positive ``l_da`` is required by the project's sign convention.
    y_dr : float, m/s² per rad
        Side acceleration per rudder.
    l_dr, n_dr : float, 1/s²
        Roll and yaw angular acceleration per rudder.
    y_p, y_r : float, m/s per rad
        Side acceleration per roll and yaw rate (m/s² per rad/s).
    y_da : float, m/s² per rad
        Side acceleration per aileron.
    g : float, m/s²
        Gravity.
    span_m : float or None, m
        Wing span (for the Dryden rate-gust filters).
    name : str
        Label of the model.

    Notes
    -----
    ``L*`` and ``N*`` must already be the *primed* derivatives (corrected for
    the product of inertia ``Ixz``) when ``Ixz`` matters; that correction is
    the caller's responsibility (:func:`small_uav` applies it itself).
    """
    v = float(airspeed_mps)
    if not (np.isfinite(v) and v > 0):
        raise ValueError(f"airspeed_mps must be a positive finite number, got {airspeed_mps!r}")
    # Aerodynamic parts of the columns of A for beta, p and r.
    aero_beta = np.array([y_beta / v, l_beta, n_beta, 0.0])
    aero_p = np.array([y_p / v, l_p, n_p, 0.0])
    aero_r = np.array([y_r / v, l_r, n_r, 0.0])
    # Kinematic parts: d(beta)/dt gets -r and (g/V) phi; d(phi)/dt = p.
    a = np.column_stack(
        [
            aero_beta,
            aero_p + np.array([0.0, 0.0, 0.0, 1.0]),
            aero_r + np.array([-1.0, 0.0, 0.0, 0.0]),
            np.array([g / v, 0.0, 0.0, 0.0]),
        ]
    )
    b_control = np.column_stack(
        [
            np.array([y_da / v, l_da, n_da, 0.0]),
            np.array([y_dr / v, l_dr, n_dr, 0.0]),
        ]
    )
    b_disturbance = np.column_stack([-aero_beta / v, -aero_p, -aero_r, np.array([0.0, 1.0, 0.0, 0.0])])
    return LinearPlant(
        name=name,
        a=a,
        b_control=b_control,
        b_disturbance=b_disturbance,
        state_names=LATERAL_STATES,
        airspeed_mps=v,
        span_m=span_m,
    )


# --- Light single-engine airplane --------------------------------------------
# Nelson, Flight Stability and Automatic Control, 2nd ed. (1998), four-seat
# single-engine airplane at sea level, u0 = 176 ft/s. Dimensional derivatives
# as listed in docs/references.md (book units: ft, s, rad).
_NELSON_U0_FTPS = 176.0
_NELSON_SPAN_FT = 33.4  # recalled from memory
_NELSON = {
    "y_beta": -45.72,  # ft/s²
    "l_beta": -15.98,  # 1/s²
    "l_p": -8.4,  # 1/s
    "l_r": 2.19,  # 1/s
    "n_beta": 4.49,  # 1/s²
    "n_p": -0.35,  # 1/s
    "n_r": -0.76,  # 1/s
    "y_dr": 12.2,  # ft/s², recalled from memory (low confidence)
    "l_dr": 2.5,  # 1/s², recalled from memory (low confidence)
    "n_dr": -4.6,  # 1/s², recalled from memory (low confidence)
}
# Lda in the BOOK's aileron convention, where a positive deflection gives a
# negative rolling moment (Cl_da = -0.134): QSb Cl_da / Ixx = -28.9 1/s².
_NELSON_L_DA_BOOK = -28.9
# The one conversion from the book's aileron sense to ours.
_NELSON_AILERON_SIGN = -1.0
# Nda in OUR convention: adverse yaw (a right-roll aileron yaws the nose left)
# makes it negative. Magnitude recalled from memory, low confidence.
_NELSON_N_DA_OURS = -0.22


def light_single() -> LinearPlant:
    """Four-seat light single-engine airplane (Nelson, 2nd ed.), SI units.

    Sea level, 176 ft/s (53.6 m/s). Length-carrying quantities (``Y``
    derivatives, airspeed, span) are converted from feet to metres; the
    aileron column is converted once from the book's sense (positive
    deflection rolls left) to ours. ``Nda`` and the rudder derivatives and the
    span (33.4 ft) are recalled from memory with low confidence.

    Returns
    -------
    LinearPlant
        Modes about: spiral -0.0088, roll -8.43, Dutch roll -0.489 ± 2.334i (1/s).
    """
    d = dict(_NELSON)
    d["y_beta"] *= _FT
    d["y_dr"] *= _FT
    return from_dimensional_derivatives(
        airspeed_mps=_NELSON_U0_FTPS * _FT,
        l_da=_NELSON_AILERON_SIGN * _NELSON_L_DA_BOOK,
        n_da=_NELSON_N_DA_OURS,
        span_m=_NELSON_SPAN_FT * _FT,
        name="light-single",
        **d,
    )


# --- Small fixed-wing UAV -----------------------------------------------------
@dataclass(frozen=True)
class AirframeCoefficients:
    """Mass, geometry and lateral aerodynamic coefficients of an airframe.

    Attributes
    ----------
    mass_kg : float, kg
    jx, jz, jxz : float, kg m²
        Roll and yaw moments of inertia and the product of inertia.
    wing_area_m2 : float, m²
    span_m : float, m
    air_density : float, kg/m³
    cy_beta, cy_p, cy_r, cy_da, cy_dr : float
        Side-force coefficient derivatives (per rad; rates non-dimensionalised
        by ``b / (2 Va)``).
    cl_beta, cl_p, cl_r, cl_da, cl_dr : float
        Rolling-moment coefficient derivatives.
    cn_beta, cn_p, cn_r, cn_da, cn_dr : float
        Yawing-moment coefficient derivatives.
    """

    mass_kg: float
    jx: float
    jz: float
    jxz: float
    wing_area_m2: float
    span_m: float
    air_density: float
    cy_beta: float
    cy_p: float
    cy_r: float
    cy_da: float
    cy_dr: float
    cl_beta: float
    cl_p: float
    cl_r: float
    cl_da: float
    cl_dr: float
    cn_beta: float
    cn_p: float
    cn_r: float
    cn_da: float
    cn_dr: float


#: Beard & McLain, Small Unmanned Aircraft (Princeton UP, 2012), App. E.
#: cy_p, cy_r and cy_da are 0 in that set (recalled from memory).
SMALL_UAV_AIRFRAME = AirframeCoefficients(
    mass_kg=13.5,
    jx=0.8244,
    jz=1.759,
    jxz=0.1204,
    wing_area_m2=0.55,
    span_m=2.8956,
    air_density=1.2682,
    cy_beta=-0.98,
    cy_p=0.0,
    cy_r=0.0,
    cy_da=0.0,
    cy_dr=-0.17,
    cl_beta=-0.12,
    cl_p=-0.26,
    cl_r=0.14,
    cl_da=0.08,
    cl_dr=0.105,
    cn_beta=0.25,
    cn_p=0.022,
    cn_r=-0.35,
    cn_da=0.06,
    cn_dr=-0.032,
)


def _check_airspeed(airspeed_mps: float) -> float:
    v = float(airspeed_mps)
    if not (np.isfinite(v) and v > 0):
        raise ValueError(f"airspeed_mps must be a positive finite number, got {airspeed_mps!r}")
    return v


def small_uav_derivatives(
    airspeed_mps: float = 25.0, airframe: AirframeCoefficients = SMALL_UAV_AIRFRAME
) -> dict[str, float]:
    """Dimensional lateral derivatives of an airframe at level trim.

    Beard & McLain ch. 5 linearisation at ``u* = Va``, ``v* = w* = 0``,
    ``p* = q* = r* = 0``, with the inertia terms ``Γ = Jx Jz - Jxz²``,
    ``Γ3 = Jz/Γ``, ``Γ4 = Jxz/Γ``, ``Γ8 = Jx/Γ`` folded into
    ``Cp* = Γ3 Cl* + Γ4 Cn*`` and ``Cr* = Γ4 Cl* + Γ8 Cn*`` (so ``L*``, ``N*``
    are the primed derivatives). The side-velocity state ``v`` is replaced by
    ``beta = v / Va``, so per-``beta`` derivatives are ``Va`` times the
    per-``v`` ones.

    Parameters
    ----------
    airspeed_mps : float, m/s
        Trim airspeed ``Va``.
    airframe : AirframeCoefficients
        Mass, geometry and coefficients.

    Returns
    -------
    dict
        Keyword arguments for :func:`from_dimensional_derivatives` (without
        ``airspeed_mps``), SI units.
    """
    va = _check_airspeed(airspeed_mps)
    f = airframe
    gam = f.jx * f.jz - f.jxz**2
    g3, g4, g8 = f.jz / gam, f.jxz / gam, f.jx / gam

    def cp(cl: float, cn: float) -> float:
        return g3 * cl + g4 * cn

    def cr(cl: float, cn: float) -> float:
        return g4 * cl + g8 * cn

    qs = 0.5 * f.air_density * va**2 * f.wing_area_m2  # dynamic pressure times area, N
    qsb = qs * f.span_m  # N m
    rate = f.span_m / (2.0 * va)  # s: non-dimensional rate per rad/s
    return {
        "y_beta": qs * f.cy_beta / f.mass_kg,
        "y_p": qs * rate * f.cy_p / f.mass_kg,
        "y_r": qs * rate * f.cy_r / f.mass_kg,
        "y_da": qs * f.cy_da / f.mass_kg,
        "y_dr": qs * f.cy_dr / f.mass_kg,
        "l_beta": qsb * cp(f.cl_beta, f.cn_beta),
        "l_p": qsb * rate * cp(f.cl_p, f.cn_p),
        "l_r": qsb * rate * cp(f.cl_r, f.cn_r),
        "l_da": qsb * cp(f.cl_da, f.cn_da),
        "l_dr": qsb * cp(f.cl_dr, f.cn_dr),
        "n_beta": qsb * cr(f.cl_beta, f.cn_beta),
        "n_p": qsb * rate * cr(f.cl_p, f.cn_p),
        "n_r": qsb * rate * cr(f.cl_r, f.cn_r),
        "n_da": qsb * cr(f.cl_da, f.cn_da),
        "n_dr": qsb * cr(f.cl_dr, f.cn_dr),
    }


def small_uav(airspeed_mps: float = 25.0, airframe: AirframeCoefficients = SMALL_UAV_AIRFRAME) -> LinearPlant:
    """Small fixed-wing UAV of Beard & McLain (2012), lateral model at ``Va``.

    Parameters
    ----------
    airspeed_mps : float, m/s
        Trim airspeed.
    airframe : AirframeCoefficients
        Defaults to the App. E parameter set.

    Returns
    -------
    LinearPlant
        States ``(beta, p, r, phi)``; at 25 m/s the modes are about roll -11.8,
        Dutch roll -3.63 ± 8.83i and spiral -0.041 (1/s).
    """
    va = _check_airspeed(airspeed_mps)
    return from_dimensional_derivatives(
        airspeed_mps=va,
        span_m=airframe.span_m,
        name="small-uav",
        **small_uav_derivatives(va, airframe),
    )


def roll_coefficients_uav(
    airspeed_mps: float = 25.0, airframe: AirframeCoefficients = SMALL_UAV_AIRFRAME
) -> tuple[float, float]:
    """Roll-loop coefficients ``(a_phi1, a_phi2)`` of Beard & McLain ch. 6.

    ``phi / delta_a = a_phi2 / (s (s + a_phi1))`` with
    ``a_phi1 = -1/4 rho Va S b² Cp_p`` (1/s) and
    ``a_phi2 = 1/2 rho Va² S b Cp_da`` (1/s² per rad).
    """
    va = _check_airspeed(airspeed_mps)
    f = airframe
    gam = f.jx * f.jz - f.jxz**2
    cp_p = (f.jz * f.cl_p + f.jxz * f.cn_p) / gam
    cp_da = (f.jz * f.cl_da + f.jxz * f.cn_da) / gam
    a_phi1 = -0.25 * f.air_density * va * f.wing_area_m2 * f.span_m**2 * cp_p
    a_phi2 = 0.5 * f.air_density * va**2 * f.wing_area_m2 * f.span_m * cp_da
    return float(a_phi1), float(a_phi2)


# --- Roll-only and user models -----------------------------------------------
def roll_only(
    a1_per_s: float,
    a2_per_s2: float,
    airspeed_mps: float = 25.0,
    span_m: float | None = None,
    name: str = "roll-only",
) -> LinearPlant:
    """Roll-only model ``phi / delta_a = a2 / (s (s + a1))``, states ``(p, phi)``.

    Parameters
    ----------
    a1_per_s : float, 1/s
        Roll damping (``Lp = -a1``); > 0 for a stable roll mode.
    a2_per_s2 : float, 1/s² (rad/s² per rad)
        Aileron effectiveness ``Lda``.
    airspeed_mps : float, m/s
        Airspeed (used by turbulence models).
    span_m : float or None, m
        Wing span (used by the Dryden roll-gust filter).
    name : str
        Label of the model.

    Notes
    -----
    The rudder column is zero. Gusts: only a roll-rate gust acts, through the
    damping term (column ``[a1, 0]``); side and yaw gusts have no path.
    """
    a1, a2 = float(a1_per_s), float(a2_per_s2)
    return LinearPlant(
        name=name,
        a=np.array([[-a1, 0.0], [1.0, 0.0]]),
        b_control=np.array([[a2, 0.0], [0.0, 0.0]]),
        b_disturbance=np.array([[0.0, a1, 0.0, 1.0], [0.0, 0.0, 0.0, 0.0]]),
        state_names=ROLL_ONLY_STATES,
        airspeed_mps=airspeed_mps,
        span_m=span_m,
    )


def from_matrices(
    a: np.ndarray,
    b: np.ndarray,
    state_names: tuple[str, ...],
    airspeed_mps: float,
    b_disturbance: np.ndarray | None = None,
    span_m: float | None = None,
    name: str = "user-matrices",
) -> LinearPlant:
    """A plant from user-supplied matrices.

    Parameters
    ----------
    a : (n, n) array_like
        State matrix, project units and sign convention.
    b : (n,), (n, 1) or (n, 2) array_like
        Control matrix: aileron only (rudder column set to zero) or
        ``[aileron, rudder]``.
    state_names : sequence of str
        Names of the ``n`` states; must contain ``"p"`` and ``"phi"``.
    airspeed_mps : float, m/s
        Airspeed.
    b_disturbance : (n, 4) array_like or None
        Disturbance matrix. When None only the ``roll_accel`` column is built
        (1 in the ``p`` row); the gust columns stay zero, so turbulence has
        no effect on such a model unless ``b_disturbance`` is given.
    span_m : float or None, m
        Wing span.
    name : str
        Label of the model.

    Raises
    ------
    ValueError
        Wrong shapes, non-finite values or missing ``p``/``phi`` (see
        :func:`sim.plant.check_plant`).
    """
    names = tuple(state_names)
    try:
        b_arr = np.array(b, dtype=float)
    except (TypeError, ValueError) as exc:
        raise ValueError(f"b is not a numeric array ({exc})") from None
    if b_arr.ndim == 1:
        b_arr = b_arr[:, None]
    if b_arr.ndim != 2 or b_arr.shape[1] not in (1, N_CONTROLS):
        raise ValueError(f"b must have shape (n,), (n, 1) or (n, 2), got {np.shape(b)}")
    if b_arr.shape[1] == 1:
        b_arr = np.hstack([b_arr, np.zeros_like(b_arr)])
    if b_disturbance is None:
        if "p" not in names:
            raise ValueError(f"state_names must contain 'p', got {names!r}")
        b_disturbance = np.zeros((len(names), N_DISTURBANCES))
        b_disturbance[names.index("p"), 3] = 1.0
    return LinearPlant(
        name=name,
        a=a,
        b_control=b_arr,
        b_disturbance=b_disturbance,
        state_names=names,
        airspeed_mps=airspeed_mps,
        span_m=span_m,
    )


def _roll_only_default() -> LinearPlant:
    """Roll-only model with the small UAV's coefficients at 25 m/s."""
    a1, a2 = roll_coefficients_uav(25.0)
    return roll_only(a1, a2, airspeed_mps=25.0, span_m=SMALL_UAV_AIRFRAME.span_m)


#: Named presets (read-only mapping): name -> builder taking no arguments.
PRESETS: Mapping[str, Callable[[], LinearPlant]] = MappingProxyType(
    {
        "light-single": light_single,
        "small-uav": small_uav,
        "roll-only": _roll_only_default,
    }
)
