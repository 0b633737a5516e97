"""Lateral-directional modes and their MIL-F-8785C handling-quality Levels.

Mode identification (:func:`identify_modes`) uses eigenvector content, not the
order of the eigenvalues: the roll mode is the real eigenvalue with the largest
participation factor in roll rate ``p``; the spiral is the remaining real
eigenvalue of smallest magnitude; the Dutch roll is the complex pair (or, when
it is overdamped, the two real eigenvalues left over). Participation factors
``|w_ik v_ik| / |w_k^H v_k|`` (left and right eigenvectors) do not depend on the
scaling of the states.

Ratings follow MIL-F-8785C (5 Nov 1980):

* Table VI — Dutch roll minimum ζ, ζωn, ωn
* Table VII — maximum roll-mode time constant
* Table VIII — spiral minimum time to double amplitude. We use the 1980
  values 12/8/4 s (Categories A and C) and 20/8/4 s (Category B); textbook
  tables copied from an older edition show 12/12/4 and 20/12/4 s.
* Table IXa — Class I roll performance (time to bank through 60° in
  Categories A and B, 30° in Category C)

Aircraft classes are ``"I"``, ``"II"``, ``"III"``, ``"IV"``; for Category C
the tables split Class II into ``"II-C"`` (carrier) and ``"II-L"`` (land), and
plain ``"II"`` is refused there. Categories are ``"A"``, ``"B"``, ``"C"``.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from enum import IntEnum

import numpy as np
from scipy import linalg

__all__ = [
    "Level",
    "LateralModes",
    "ModeRatings",
    "identify_modes",
    "rate_roll_mode",
    "rate_spiral",
    "rate_dutch_roll",
    "rate_roll_performance",
    "roll_performance_bank_change_deg",
    "rate_modes",
]


class Level(IntEnum):
    """MIL-F-8785C flying-quality Level (larger is worse)."""

    LEVEL_1 = 1
    LEVEL_2 = 2
    LEVEL_3 = 3
    WORSE_THAN_LEVEL_3 = 4

    def __str__(self) -> str:
        return "worse than Level 3" if self is Level.WORSE_THAN_LEVEL_3 else f"Level {int(self)}"


# --- tables (data) -----------------------------------------------------------

# MIL-F-8785C Table VII: maximum roll-mode time constant τR (s), Levels 1/2/3.
_TABLE_VII_ROLL_TAU_MAX: dict[tuple[str, str], tuple[float, float, float]] = {
    ("A", "I"): (1.0, 1.4, 10.0),
    ("A", "IV"): (1.0, 1.4, 10.0),
    ("A", "II"): (1.4, 3.0, 10.0),
    ("A", "III"): (1.4, 3.0, 10.0),
    ("B", "I"): (1.4, 3.0, 10.0),
    ("B", "II"): (1.4, 3.0, 10.0),
    ("B", "III"): (1.4, 3.0, 10.0),
    ("B", "IV"): (1.4, 3.0, 10.0),
    ("C", "I"): (1.0, 1.4, 10.0),
    ("C", "II-C"): (1.0, 1.4, 10.0),
    ("C", "IV"): (1.0, 1.4, 10.0),
    ("C", "II-L"): (1.4, 3.0, 10.0),
    ("C", "III"): (1.4, 3.0, 10.0),
}

# MIL-F-8785C (1980) Table VIII: spiral minimum time to double amplitude (s), Levels 1/2/3.
# (Older-edition textbook copies show 12/12/4 and 20/12/4; we use the 1980 values.)
_TABLE_VIII_SPIRAL_T2_MIN: dict[str, tuple[float, float, float]] = {
    "A": (12.0, 8.0, 4.0),
    "B": (20.0, 8.0, 4.0),
    "C": (12.0, 8.0, 4.0),
}

# MIL-F-8785C Table VI: Dutch roll minimum (ζ, ζωn rad/s, ωn rad/s).
# Level 1 rows for Cat A Classes II/III and Cat C Classes II-L/III (ωn 0.4) are
# recalled from memory; the other rows are quoted in docs/references.md.
_TABLE_VI_LEVEL1: dict[tuple[str, str], tuple[float, float, float]] = {
    ("A", "I"): (0.19, 0.35, 1.0),
    ("A", "IV"): (0.19, 0.35, 1.0),
    ("A", "II"): (0.19, 0.35, 0.4),
    ("A", "III"): (0.19, 0.35, 0.4),
    ("B", "I"): (0.08, 0.15, 0.4),
    ("B", "II"): (0.08, 0.15, 0.4),
    ("B", "III"): (0.08, 0.15, 0.4),
    ("B", "IV"): (0.08, 0.15, 0.4),
    ("C", "I"): (0.08, 0.15, 1.0),
    ("C", "II-C"): (0.08, 0.15, 1.0),
    ("C", "IV"): (0.08, 0.15, 1.0),
    ("C", "II-L"): (0.08, 0.15, 0.4),
    ("C", "III"): (0.08, 0.15, 0.4),
}
# Table VI, Levels 2 and 3 (all classes and categories); Level 3 has no ζωn minimum.
_TABLE_VI_LEVEL2 = (0.02, 0.05, 0.4)
_TABLE_VI_LEVEL3 = (0.0, 0.0, 0.4)
# MIL-F-8785C §3.3.1.1 (recalled from memory): when ωn²|φ/β|d > 20 (rad/s)², the
# minimum ζωn rises by k·(ωn²|φ/β|d − 20), k = 0.014 / 0.009 / 0.005 for Levels 1/2/3.
_PHI_BETA_THRESHOLD = 20.0
_PHI_BETA_SLOPE = (0.014, 0.009, 0.005)

# MIL-F-8785C Table IXa, Class I: bank change (deg) and maximum time to achieve it (s),
# Levels 1/2/3.
_TABLE_IXA_CLASS_I: dict[str, tuple[float, tuple[float, float, float]]] = {
    "A": (60.0, (1.3, 1.7, 2.6)),
    "B": (60.0, (1.7, 2.5, 3.4)),
    "C": (30.0, (1.3, 1.8, 2.6)),
}

_CLASSES = ("I", "II", "III", "IV", "II-C", "II-L")
_CATEGORIES = ("A", "B", "C")


def _key(aircraft_class: str, category: str) -> tuple[str, str]:
    cls = str(aircraft_class).strip().upper()
    cat = str(category).strip().upper()
    if cls not in _CLASSES:
        raise ValueError(f"aircraft class must be one of {_CLASSES}, got {aircraft_class!r}")
    if cat not in _CATEGORIES:
        raise ValueError(f"flight-phase category must be one of {_CATEGORIES}, got {category!r}")
    if cat == "C":
        if cls == "II":
            raise ValueError("Category C splits Class II: use 'II-C' (carrier) or 'II-L' (land)")
    elif cls in ("II-C", "II-L"):
        cls = "II"
    return cat, cls


def _level_at_most(value: float, limits: tuple[float, float, float]) -> Level:
    for level, limit in zip((Level.LEVEL_1, Level.LEVEL_2, Level.LEVEL_3), limits, strict=True):
        if value <= limit:
            return level
    return Level.WORSE_THAN_LEVEL_3


def _level_at_least(value: float, limits: tuple[float, float, float]) -> Level:
    for level, limit in zip((Level.LEVEL_1, Level.LEVEL_2, Level.LEVEL_3), limits, strict=True):
        if value >= limit:
            return level
    return Level.WORSE_THAN_LEVEL_3


# --- ratings -----------------------------------------------------------------


def rate_roll_mode(roll_tau_s: float, aircraft_class: str, category: str) -> Level:
    """Level of the roll-mode time constant (MIL-F-8785C Table VII).

    Parameters
    ----------
    roll_tau_s : float, s
        Roll-mode time constant (``inf`` for a neutral or unstable roll mode).
    aircraft_class : str
        ``"I"`` … ``"IV"`` (``"II-C"``/``"II-L"`` in Category C).
    category : str
        Flight-phase category ``"A"``, ``"B"`` or ``"C"``.

    Returns
    -------
    Level
        Level 1 when ``τR`` is at most the Level-1 maximum (boundary included).
    """
    tau = float(roll_tau_s)
    if math.isnan(tau) or tau < 0.0:
        raise ValueError(f"roll_tau_s must be >= 0 (inf if unstable), got {roll_tau_s!r}")
    return _level_at_most(tau, _TABLE_VII_ROLL_TAU_MAX[_key(aircraft_class, category)])


def rate_spiral(time_to_double_s: float, aircraft_class: str, category: str) -> Level:
    """Level of spiral divergence (MIL-F-8785C 1980 Table VIII).

    Parameters
    ----------
    time_to_double_s : float, s
        Time to double bank amplitude; ``inf`` for a stable or neutral spiral
        (always Level 1).
    aircraft_class : str
        Checked for validity; Table VIII depends on the category only.
    category : str
        ``"A"``, ``"B"`` or ``"C"``.

    Returns
    -------
    Level
        Level 1 when the time to double is at least 12 s (Cat A, C) or 20 s
        (Cat B); Level 2 from 8 s; Level 3 from 4 s.
    """
    t2 = float(time_to_double_s)
    if math.isnan(t2) or t2 <= 0.0:
        raise ValueError(f"time_to_double_s must be > 0 (inf if stable), got {time_to_double_s!r}")
    cat, _ = _key(aircraft_class, category)
    return _level_at_least(t2, _TABLE_VIII_SPIRAL_T2_MIN[cat])


def rate_dutch_roll(
    zeta: float,
    wn_rad_s: float,
    aircraft_class: str,
    category: str,
    phi_beta_ratio: float | None = None,
) -> Level:
    """Level of the Dutch roll (MIL-F-8785C Table VI).

    All three minima (ζ, ζωn, ωn) of a Level must be met.

    Parameters
    ----------
    zeta : float
        Dutch-roll damping ratio.
    wn_rad_s : float, rad/s
        Dutch-roll undamped natural frequency.
    aircraft_class, category : str
        As in :func:`rate_roll_mode`.
    phi_beta_ratio : float, optional
        ``|φ/β|`` of the Dutch-roll mode (rad/rad). When given and
        ``ωn²|φ/β| > 20 (rad/s)²``, the ζωn minimum is raised per §3.3.1.1
        (coefficients recalled from memory). Default: not applied.

    Returns
    -------
    Level
    """
    zeta = float(zeta)
    wn = float(wn_rad_s)
    if not (math.isfinite(zeta) and math.isfinite(wn) and wn >= 0.0):
        raise ValueError(f"need finite zeta and wn >= 0, got zeta={zeta!r}, wn={wn!r}")
    key = _key(aircraft_class, category)
    rows = (_TABLE_VI_LEVEL1[key], _TABLE_VI_LEVEL2, _TABLE_VI_LEVEL3)
    excess = 0.0
    if phi_beta_ratio is not None:
        excess = max(0.0, wn * wn * float(phi_beta_ratio) - _PHI_BETA_THRESHOLD)
    sigma = zeta * wn
    for level, (z_min, zw_min, wn_min), slope in zip(
        (Level.LEVEL_1, Level.LEVEL_2, Level.LEVEL_3), rows, _PHI_BETA_SLOPE, strict=True
    ):
        if zeta >= z_min and sigma >= zw_min + slope * excess and wn >= wn_min:
            return level
    return Level.WORSE_THAN_LEVEL_3


def roll_performance_bank_change_deg(category: str) -> float:
    """Bank change (deg) timed by MIL-F-8785C Table IXa for Class I: 60° (A, B), 30° (C)."""
    cat, _ = _key("I", category)
    return _TABLE_IXA_CLASS_I[cat][0]


def rate_roll_performance(time_to_bank_s: float, aircraft_class: str, category: str) -> Level:
    """Level of roll performance (MIL-F-8785C Table IXa, Class I only).

    Parameters
    ----------
    time_to_bank_s : float, s
        Measured time to bank through the angle of
        :func:`roll_performance_bank_change_deg` (60° in Cat A/B, 30° in Cat C).
    aircraft_class : str
        Must be ``"I"`` (Tables IXb–IXd for other classes are not implemented).
    category : str
        ``"A"``, ``"B"`` or ``"C"``.

    Returns
    -------
    Level
        Level 1 when the time is at most the Level-1 maximum (boundary included).
    """
    cat, cls = _key(aircraft_class, category)
    if cls != "I":
        raise ValueError("roll performance is rated for Class I only (MIL-F-8785C Table IXa)")
    t = float(time_to_bank_s)
    if math.isnan(t) or t < 0.0:
        raise ValueError(f"time_to_bank_s must be >= 0 (inf if never reached), got {t!r}")
    return _level_at_most(t, _TABLE_IXA_CLASS_I[cat][1])


# --- modes -------------------------------------------------------------------


@dataclass(frozen=True)
class LateralModes:
    """Lateral-directional modes of a linear model.

    Attributes
    ----------
    roll_tau_s : float, s
        Roll-mode time constant ``−1/λ`` (``inf`` if the roll root is ≥ 0).
    roll_lambda : float, 1/s
        Roll-mode eigenvalue.
    spiral_lambda : float or None, 1/s
        Spiral eigenvalue (positive = divergent); ``None`` for roll-only models.
    spiral_time_to_double_s : float or None, s
        ``ln 2 / λ`` if divergent, else ``inf``.
    spiral_time_to_half_s : float or None, s
        ``ln 2 / (−λ)`` if convergent, else ``inf``.
    dutch_zeta : float or None
        Dutch-roll damping ratio.
    dutch_wn : float or None, rad/s
        Dutch-roll undamped natural frequency.
    dutch_phi_beta_ratio : float or None
        ``|φ/β|`` of the Dutch-roll eigenvector (rad/rad), if β is a state.
    """

    roll_tau_s: float
    roll_lambda: float
    spiral_lambda: float | None = None
    spiral_time_to_double_s: float | None = None
    spiral_time_to_half_s: float | None = None
    dutch_zeta: float | None = None
    dutch_wn: float | None = None
    dutch_phi_beta_ratio: float | None = None


def _participation(a: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    lam, vl, vr = linalg.eig(a, left=True, right=True)
    norm = np.abs(np.einsum("ik,ik->k", vl.conj(), vr))
    part = np.abs(vl.conj() * vr) / norm  # part[i, k]: state i in mode k
    return lam, vr, part


def identify_modes(a: np.ndarray, state_names: Sequence[str]) -> LateralModes:
    """Identify roll, spiral and Dutch-roll modes of a lateral state matrix.

    Parameters
    ----------
    a : (n, n) array_like, 1/s
        State matrix; states in the order of ``state_names``.
    state_names : sequence of str
        Must contain ``"p"`` and ``"phi"``; ``("beta", "p", "r", "phi")`` for
        the 4-state model, ``("p", "phi")`` for a roll-only model (then only
        the roll mode is returned).

    Returns
    -------
    LateralModes

    Raises
    ------
    ValueError
        Bad shapes or names, or no real roll root (roll and spiral coupled
        into an oscillation).
    """
    a = np.asarray(a, dtype=float)
    names = [str(s).lower() for s in state_names]
    if a.ndim != 2 or a.shape[0] != a.shape[1] or a.shape[0] != len(names):
        raise ValueError(f"a must be (n, n) with n = len(state_names) = {len(names)}")
    if "p" not in names or "phi" not in names:
        raise ValueError(f"state_names must contain 'p' and 'phi', got {tuple(state_names)}")
    ip = names.index("p")
    lam, vr, part = _participation(a)
    scale = max(1.0, float(np.max(np.abs(lam))))
    is_real = np.abs(lam.imag) <= 1e-9 * scale
    real_idx = [int(k) for k in np.nonzero(is_real)[0]]
    if not real_idx:
        raise ValueError("no real roll root: roll and spiral are coupled into an oscillation")
    k_roll = max(real_idx, key=lambda k: part[ip, k])
    roll_lambda = float(lam[k_roll].real)
    roll_tau = -1.0 / roll_lambda if roll_lambda < 0.0 else math.inf

    full = len(names) >= 4 and "beta" in names and "r" in names
    if not full:
        return LateralModes(roll_tau_s=roll_tau, roll_lambda=roll_lambda)

    others = [k for k in real_idx if k != k_roll]
    if not others:
        raise ValueError("no real spiral root: roll and spiral are coupled into an oscillation")
    k_spiral = min(others, key=lambda k: abs(lam[k].real))
    sl = float(lam[k_spiral].real)
    t_double = math.log(2.0) / sl if sl > 0.0 else math.inf
    t_half = math.log(2.0) / -sl if sl < 0.0 else math.inf

    rest = [k for k in range(len(lam)) if k not in (k_roll, k_spiral)]
    zeta = wn = phi_beta = None
    if len(rest) == 2:
        l1, l2 = lam[rest[0]], lam[rest[1]]
        wn2 = float((l1 * l2).real)
        if wn2 > 0.0:
            wn = math.sqrt(wn2)
            zeta = float(-(l1 + l2).real / (2.0 * wn))
        k_dr = rest[0] if lam[rest[0]].imag >= 0 else rest[1]
        vb = vr[names.index("beta"), k_dr]
        if abs(vb) > 0.0:
            phi_beta = float(abs(vr[names.index("phi"), k_dr]) / abs(vb))
    return LateralModes(
        roll_tau_s=roll_tau,
        roll_lambda=roll_lambda,
        spiral_lambda=sl,
        spiral_time_to_double_s=t_double,
        spiral_time_to_half_s=t_half,
        dutch_zeta=zeta,
        dutch_wn=wn,
        dutch_phi_beta_ratio=phi_beta,
    )


@dataclass(frozen=True)
class ModeRatings:
    """Levels of each identified mode (``None`` where the model has no such mode)."""

    roll_mode: Level
    spiral: Level | None
    dutch_roll: Level | None

    @property
    def worst(self) -> Level:
        """The worst Level among the rated modes."""
        return max(x for x in (self.roll_mode, self.spiral, self.dutch_roll) if x is not None)


def rate_modes(modes: LateralModes, aircraft_class: str, category: str) -> ModeRatings:
    """Rate every mode of :func:`identify_modes` against Tables VI, VII and VIII.

    The |φ/β| correction to the Dutch-roll ζωn minimum is not applied here;
    call :func:`rate_dutch_roll` with ``phi_beta_ratio`` for it.
    """
    roll = rate_roll_mode(modes.roll_tau_s, aircraft_class, category)
    spiral = None
    if modes.spiral_time_to_double_s is not None:
        spiral = rate_spiral(modes.spiral_time_to_double_s, aircraft_class, category)
    dutch = None
    if modes.dutch_zeta is not None and modes.dutch_wn is not None:
        dutch = rate_dutch_roll(modes.dutch_zeta, modes.dutch_wn, aircraft_class, category)
    return ModeRatings(roll_mode=roll, spiral=spiral, dutch_roll=dutch)
