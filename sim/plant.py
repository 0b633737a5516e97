"""Linear lateral aircraft models and their exact discretisation.

A :class:`LinearPlant` is the continuous-time model

.. math::

    \\dot x = A x + B_c u + B_d d,

with ``u = [aileron, rudder]`` (rad) and ``d = [v_gust, p_gust, r_gust,
roll_accel]`` (m/s, rad/s, rad/s, rad/s²; the channel order of
:mod:`sim.disturbance`). Lateral models use the states ``(beta, p, r, phi)``
(rad, rad/s, rad/s, rad); roll-only models use ``(p, phi)``.

Signs (DEVELOPERS.md, "Ground rules"): bank positive right wing down, roll rate positive rolling
right, positive aileron gives a positive rolling moment.

Gusts change the air-relative motion, not the inertial state: a side gust
``v_g`` (m/s, positive along body y) makes the aerodynamic sideslip
``beta - v_g / V``; gust rates ``p_g``, ``r_g`` make the aerodynamic rates
``p - p_g`` and ``r - r_g``. The builders in :mod:`sim.presets` derive the
gust columns of ``B_d`` from the aerodynamic part of ``A`` accordingly.

:func:`discretize` gives the exact zero-order-hold model used by the stepping
core; :func:`continuous_response` is an independent ODE integration kept for
cross-checks only.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.linalg

__all__ = [
    "N_CONTROLS",
    "N_DISTURBANCES",
    "LinearPlant",
    "DiscretePlant",
    "check_plant",
    "discretize",
    "continuous_response",
    "modes",
]

#: Control inputs: aileron (rad), rudder (rad).
N_CONTROLS = 2
#: Disturbance inputs: v_gust (m/s), p_gust (rad/s), r_gust (rad/s), roll_accel (rad/s²).
N_DISTURBANCES = 4


def _is_positive_finite(value: object) -> bool:
    """True for a real number that is finite and > 0 (not a bool)."""
    if isinstance(value, bool) or not isinstance(value, (int, float, np.integer, np.floating)):
        return False
    return bool(np.isfinite(value) and value > 0)


def _frozen_array(value: object, what: str) -> np.ndarray:
    """A read-only float copy of ``value``; plain ValueError if not numeric."""
    try:
        arr = np.array(value, dtype=float)
    except (TypeError, ValueError) as exc:
        raise ValueError(f"{what} is not a numeric array ({exc})") from None
    arr.setflags(write=False)
    return arr


@dataclass(frozen=True, eq=False)
class LinearPlant:
    """A continuous-time linear lateral aircraft model.

    Parameters
    ----------
    name : str
        Short label of the model (shown in reports).
    a : (n, n) ndarray, 1/s
        State matrix (entries carry the units of ``dx_i/dt / x_j``).
    b_control : (n, 2) ndarray
        Control matrix; columns ``[aileron (rad), rudder (rad)]``.
    b_disturbance : (n, 4) ndarray
        Disturbance matrix; columns ``[v_gust (m/s), p_gust (rad/s),
        r_gust (rad/s), roll_accel (rad/s²)]``.
    state_names : tuple of str
        ``("beta", "p", "r", "phi")`` for lateral models, ``("p", "phi")``
        for roll-only models; must contain ``"p"`` and ``"phi"``.
    airspeed_mps : float, m/s
        True airspeed of the trim condition (> 0).
    span_m : float or None, m
        Wing span, needed by the Dryden roll- and yaw-rate gust filters.

    Notes
    -----
    Arrays are copied to read-only float arrays and the whole plant is
    validated by :func:`check_plant` on construction (plain ``ValueError``).
    """

    name: str
    a: np.ndarray
    b_control: np.ndarray
    b_disturbance: np.ndarray
    state_names: tuple[str, ...]
    airspeed_mps: float
    span_m: float | None = None

    def __post_init__(self) -> None:
        object.__setattr__(self, "a", _frozen_array(self.a, "a"))
        object.__setattr__(self, "b_control", _frozen_array(self.b_control, "b_control"))
        object.__setattr__(self, "b_disturbance", _frozen_array(self.b_disturbance, "b_disturbance"))
        object.__setattr__(self, "state_names", tuple(self.state_names))
        check_plant(self)

    @property
    def n_states(self) -> int:
        """Number of states ``n``."""
        return int(self.a.shape[0])

    @property
    def phi_index(self) -> int:
        """Index of the bank angle ``phi`` in the state vector."""
        return self.state_names.index("phi")

    @property
    def p_index(self) -> int:
        """Index of the roll rate ``p`` in the state vector."""
        return self.state_names.index("p")


@dataclass(frozen=True, eq=False)
class DiscretePlant:
    """Exact zero-order-hold discretisation of a :class:`LinearPlant`.

    ``x[k+1] = ad @ x[k] + bd_control @ u[k] + bd_disturbance @ d[k]`` with
    inputs held constant over each step of ``dt`` seconds.

    Attributes
    ----------
    ad : (n, n) ndarray
        Discrete state matrix ``expm(A dt)``.
    bd_control : (n, 2) ndarray
        Discrete control matrix.
    bd_disturbance : (n, 4) ndarray
        Discrete disturbance matrix.
    dt : float, s
        Step length.
    """

    ad: np.ndarray
    bd_control: np.ndarray
    bd_disturbance: np.ndarray
    dt: float


def check_plant(plant: LinearPlant) -> None:
    """Validate shapes, finiteness and state names of a plant.

    Parameters
    ----------
    plant : LinearPlant
        The model to check.

    Raises
    ------
    ValueError
        With a short reason when ``a`` is not square, ``b_control`` is not
        ``(n, 2)``, ``b_disturbance`` is not ``(n, 4)``, any entry is not
        finite, ``state_names`` has the wrong length, repeats a name or lacks
        ``"p"`` or ``"phi"``, or the airspeed or span is not a positive
        finite number.
    """
    label = f"plant {plant.name!r}"
    a = np.asarray(plant.a)
    if a.ndim != 2 or a.shape[0] != a.shape[1] or a.shape[0] == 0:
        raise ValueError(f"{label}: a must be a non-empty square matrix, got shape {a.shape}")
    n = a.shape[0]
    for key, cols in (("b_control", N_CONTROLS), ("b_disturbance", N_DISTURBANCES)):
        shape = np.shape(getattr(plant, key))
        if shape != (n, cols):
            raise ValueError(f"{label}: {key} must have shape ({n}, {cols}), got {shape}")
    for key in ("a", "b_control", "b_disturbance"):
        if not np.all(np.isfinite(getattr(plant, key))):
            raise ValueError(f"{label}: {key} has non-finite entries")
    names = plant.state_names
    if len(names) != n or not all(isinstance(s, str) for s in names):
        raise ValueError(f"{label}: state_names must be {n} strings, got {names!r}")
    if len(set(names)) != n:
        raise ValueError(f"{label}: state_names repeat a name: {names!r}")
    for required in ("p", "phi"):
        if required not in names:
            raise ValueError(f"{label}: state_names must contain {required!r}, got {names!r}")
    v = plant.airspeed_mps
    if not _is_positive_finite(v):
        raise ValueError(f"{label}: airspeed_mps must be a positive finite number, got {v!r}")
    b = plant.span_m
    if b is not None and not _is_positive_finite(b):
        raise ValueError(f"{label}: span_m must be None or a positive finite number, got {b!r}")


def discretize(plant: LinearPlant, dt: float) -> DiscretePlant:
    """Exact zero-order-hold discretisation.

    Uses one matrix exponential of the augmented matrix
    ``[[A, B], [0, 0]] * dt`` with ``B = [B_c, B_d]``; the top blocks of the
    result are ``expm(A dt)`` and ``∫_0^dt expm(A s) ds B``.

    Parameters
    ----------
    plant : LinearPlant
        Continuous model.
    dt : float, s
        Step length (> 0).

    Returns
    -------
    DiscretePlant
    """
    if not _is_positive_finite(dt):
        raise ValueError(f"dt must be a positive finite number of seconds, got {dt!r}")
    n = plant.n_states
    b = np.hstack([plant.b_control, plant.b_disturbance])
    m = b.shape[1]
    aug = np.zeros((n + m, n + m))
    aug[:n, :n] = plant.a
    aug[:n, n:] = b
    e = scipy.linalg.expm(aug * dt)
    ad = e[:n, :n].copy()
    bd = e[:n, n:]
    out = []
    for arr in (ad, bd[:, :N_CONTROLS].copy(), bd[:, N_CONTROLS:].copy()):
        arr.setflags(write=False)
        out.append(arr)
    return DiscretePlant(ad=out[0], bd_control=out[1], bd_disturbance=out[2], dt=float(dt))


def continuous_response(
    plant: LinearPlant,
    t: np.ndarray,
    u_control: np.ndarray,
    u_dist: np.ndarray,
    x0: np.ndarray,
    *,
    rtol: float = 1e-12,
    atol: float = 1e-14,
) -> np.ndarray:
    """State history by ODE integration, for cross-checks only.

    Integrates each interval ``[t[k], t[k+1]]`` separately with
    :func:`scipy.integrate.solve_ivp` (DOP853), holding ``u_control[k]`` and
    ``u_dist[k]`` constant over it, so the answer is comparable with the
    zero-order-hold model of :func:`discretize` without integrating across
    input steps.

    Parameters
    ----------
    plant : LinearPlant
        Continuous model.
    t : (N,) ndarray, s
        Strictly increasing time grid.
    u_control : (N, 2) or (N-1, 2) ndarray, rad
        Controls; row ``k`` acts on ``[t[k], t[k+1])`` (a last row is unused).
    u_dist : (N, 4) or (N-1, 4) ndarray
        Disturbances in the units of :class:`LinearPlant`, held the same way.
    x0 : (n,) ndarray
        Initial state.
    rtol, atol : float
        Integrator tolerances.

    Returns
    -------
    (N, n) ndarray
        States at the times ``t``; row 0 is ``x0``.
    """
    import scipy.integrate  # cross-checks only: keep it off the start-up path

    t = np.asarray(t, dtype=float)
    u_control = np.asarray(u_control, dtype=float)
    u_dist = np.asarray(u_dist, dtype=float)
    x = np.array(x0, dtype=float)
    n_t = t.shape[0]
    if t.ndim != 1 or n_t < 1 or np.any(np.diff(t) <= 0):
        raise ValueError("t must be a 1-D strictly increasing time grid")
    if x.shape != (plant.n_states,):
        raise ValueError(f"x0 must have shape ({plant.n_states},), got {x.shape}")
    for key, arr, cols in (
        ("u_control", u_control, N_CONTROLS),
        ("u_dist", u_dist, N_DISTURBANCES),
    ):
        if arr.ndim != 2 or arr.shape[1] != cols or arr.shape[0] < n_t - 1:
            raise ValueError(f"{key} must have shape (N or N-1, {cols}), got {arr.shape}")
    a = np.asarray(plant.a)
    out = np.empty((n_t, plant.n_states))
    out[0] = x
    for k in range(n_t - 1):
        forcing = plant.b_control @ u_control[k] + plant.b_disturbance @ u_dist[k]
        sol = scipy.integrate.solve_ivp(
            lambda _t, y, f=forcing: a @ y + f,
            (t[k], t[k + 1]),
            x,
            method="DOP853",
            rtol=rtol,
            atol=atol,
        )
        if not sol.success:  # pragma: no cover - integrator failure is exceptional
            raise RuntimeError(f"solve_ivp failed on step {k}: {sol.message}")
        x = sol.y[:, -1]
        out[k + 1] = x
    return out


def modes(plant: LinearPlant) -> np.ndarray:
    """Eigenvalues of the state matrix (1/s), sorted by real then imaginary part."""
    return np.sort_complex(scipy.linalg.eigvals(plant.a))
