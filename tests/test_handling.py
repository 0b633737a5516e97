"""Tests for sim.analysis.handling: mode identification and MIL-F-8785C Levels."""

from __future__ import annotations

import math

import numpy as np
import pytest
from numpy.testing import assert_allclose
from rollrig.sim.analysis.handling import (
    Level,
    identify_modes,
    rate_dutch_roll,
    rate_modes,
    rate_roll_mode,
    rate_roll_performance,
    rate_spiral,
    roll_performance_bank_change_deg,
)

L1, L2, L3, BAD = Level.LEVEL_1, Level.LEVEL_2, Level.LEVEL_3, Level.WORSE_THAN_LEVEL_3
NAMES = ("beta", "p", "r", "phi")


def nelson_a() -> np.ndarray:
    # Nelson, Flight Stability and Automatic Control, 2nd ed. (1998), light single-engine
    # airplane, lateral example: u0 = 176 ft/s; Y_beta = -45.72 ft/s^2; L_beta = -15.98,
    # L_p = -8.4, L_r = 2.19; N_beta = 4.49, N_p = -0.35, N_r = -0.76 (docs/references.md;
    # the derivatives are marked "recalled from memory" there). g = 32.17 ft/s^2.
    u0, g = 176.0, 32.17
    return np.array(
        [
            [-45.72 / u0, 0.0, -1.0, g / u0],
            [-15.98, -8.4, 2.19, 0.0],
            [4.49, -0.35, -0.76, 0.0],
            [0.0, 1.0, 0.0, 0.0],
        ]
    )


def test_nelson_modes() -> None:
    m = identify_modes(nelson_a(), NAMES)
    # Printed in Nelson (recalled from memory, docs/references.md): roll -8.435, spiral -0.0088,
    # Dutch roll -0.487 +/- 2.335i -> loose tolerance.
    assert_allclose(m.roll_tau_s, 1 / 8.435, rtol=5e-3)  # ~0.119 s
    assert_allclose(m.spiral_lambda, -0.0088, rtol=2e-2)
    assert_allclose(m.dutch_zeta, 0.487 / math.hypot(0.487, 2.335), rtol=1e-2)  # ~0.205
    assert_allclose(m.dutch_wn, math.hypot(0.487, 2.335), rtol=5e-3)  # ~2.386 rad/s
    # second method: eigenvalues straight from numpy, sorted by magnitude of the real part
    lam = np.linalg.eigvals(nelson_a())
    real = np.sort(lam[np.abs(lam.imag) < 1e-12].real)
    cplx = lam[lam.imag > 0][0]
    assert_allclose(m.roll_lambda, real[0], rtol=1e-12)
    assert_allclose(m.spiral_lambda, real[1], rtol=1e-10)
    assert_allclose(m.dutch_wn, abs(cplx), rtol=1e-12)
    assert_allclose(m.dutch_zeta, -cplx.real / abs(cplx), rtol=1e-12)
    assert m.spiral_time_to_double_s == math.inf
    assert_allclose(m.spiral_time_to_half_s, math.log(2) / -real[1], rtol=1e-12)  # ~79 s
    assert m.dutch_phi_beta_ratio is not None and m.dutch_phi_beta_ratio > 0


@pytest.mark.parametrize("category", ["A", "B", "C"])
def test_nelson_levels(category: str) -> None:
    # Expected from the MIL-F-8785C tables (docs/references.md), Class I:
    # roll: tau 0.119 s <= 1.0 s (Cat A, C) / 1.4 s (Cat B) -> Level 1 (Table VII)
    # spiral: stable -> no divergence -> Level 1 (Table VIII)
    # Dutch roll: zeta 0.205 >= 0.19, zeta*wn 0.489 >= 0.35, wn 2.39 >= 1.0 (Cat A);
    #   0.08/0.15/0.4 (Cat B) and 0.08/0.15/1.0 (Cat C) also met -> Level 1 (Table VI)
    r = rate_modes(identify_modes(nelson_a(), NAMES), "I", category)
    assert (r.roll_mode, r.spiral, r.dutch_roll, r.worst) == (L1, L1, L1, L1)


def test_mode_identification_does_not_depend_on_state_order() -> None:
    perm = [3, 1, 0, 2]  # (phi, p, beta, r)
    a = nelson_a()[np.ix_(perm, perm)]
    m0 = identify_modes(nelson_a(), NAMES)
    m1 = identify_modes(a, [NAMES[i] for i in perm])
    assert_allclose(
        [m1.roll_tau_s, m1.spiral_lambda, m1.dutch_zeta, m1.dutch_wn, m1.dutch_phi_beta_ratio],
        [m0.roll_tau_s, m0.spiral_lambda, m0.dutch_zeta, m0.dutch_wn, m0.dutch_phi_beta_ratio],
        rtol=1e-10,
    )


def test_roll_only_model_and_unstable_spiral() -> None:
    m = identify_modes(np.array([[-8.4, 0.0], [1.0, 0.0]]), ("p", "phi"))
    assert_allclose(m.roll_tau_s, 1 / 8.4, rtol=1e-12)  # exact: eigenvalue Lp
    assert m.spiral_lambda is None and m.dutch_zeta is None
    r = rate_modes(m, "I", "A")
    assert r.roll_mode == L1 and r.spiral is None and r.dutch_roll is None
    # Weaker dihedral effect (L_beta = -2 instead of -15.98) makes the spiral divergent.
    a = nelson_a()
    a[1, 0] = -2.0
    m = identify_modes(a, NAMES)
    assert m.spiral_lambda > 0 and m.spiral_time_to_half_s == math.inf
    assert_allclose(m.spiral_time_to_double_s, math.log(2) / m.spiral_lambda, rtol=1e-12)


def test_identify_modes_errors() -> None:
    with pytest.raises(ValueError, match="'p' and 'phi'"):
        identify_modes(np.eye(2), ("q", "theta"))
    with pytest.raises(ValueError, match="n = len"):
        identify_modes(np.eye(3), ("p", "phi"))


# --- Table VII: roll-mode time constant --------------------------------------
EPS = 1e-9


@pytest.mark.parametrize(
    "cls,cat,limits",
    [
        # MIL-F-8785C Table VII (docs/references.md), Levels 1/2/3 maximum tau_R (s)
        ("I", "A", (1.0, 1.4, 10.0)),
        ("IV", "A", (1.0, 1.4, 10.0)),
        ("II", "A", (1.4, 3.0, 10.0)),
        ("III", "A", (1.4, 3.0, 10.0)),
        ("I", "B", (1.4, 3.0, 10.0)),
        ("IV", "B", (1.4, 3.0, 10.0)),
        ("I", "C", (1.0, 1.4, 10.0)),
        ("II-C", "C", (1.0, 1.4, 10.0)),
        ("IV", "C", (1.0, 1.4, 10.0)),
        ("II-L", "C", (1.4, 3.0, 10.0)),
        ("III", "C", (1.4, 3.0, 10.0)),
    ],
)
def test_table_vii_boundaries(cls: str, cat: str, limits: tuple[float, float, float]) -> None:
    for level, limit in zip((L1, L2, L3), limits, strict=True):
        assert rate_roll_mode(limit, cls, cat) == level  # boundary belongs to the Level
        assert rate_roll_mode(limit - EPS, cls, cat) == level
        assert rate_roll_mode(limit + EPS, cls, cat) == Level(level + 1)
    assert rate_roll_mode(math.inf, cls, cat) == BAD


# --- Table VIII: spiral --------------------------------------------------------


@pytest.mark.parametrize(
    "cat,limits",
    # MIL-F-8785C (1980) Table VIII (docs/references.md): minimum time to double (s);
    # the older edition's 12/12/4 and 20/12/4 are NOT used.
    [("A", (12.0, 8.0, 4.0)), ("B", (20.0, 8.0, 4.0)), ("C", (12.0, 8.0, 4.0))],
)
def test_table_viii_boundaries(cat: str, limits: tuple[float, float, float]) -> None:
    for cls in ("I", "II", "III", "IV") if cat != "C" else ("I", "II-L", "III", "IV"):
        for level, limit in zip((L1, L2, L3), limits, strict=True):
            assert rate_spiral(limit, cls, cat) == level
            assert rate_spiral(limit + EPS, cls, cat) == level
            assert rate_spiral(limit - EPS, cls, cat) == Level(level + 1)
        assert rate_spiral(math.inf, cls, cat) == L1  # stable spiral
    # 10 s to double: Level 2 under the 1980 table (would be Level 3 under 12/12/4)
    assert rate_spiral(10.0, "I", cat) == L2


# --- Table VI: Dutch roll ------------------------------------------------------


@pytest.mark.parametrize(
    "cls,cat,row",
    [
        # MIL-F-8785C Table VI Level 1 minimum (zeta, zeta*wn, wn) (docs/references.md)
        ("I", "A", (0.19, 0.35, 1.0)),
        ("IV", "A", (0.19, 0.35, 1.0)),
        ("II", "B", (0.08, 0.15, 0.4)),
        ("I", "C", (0.08, 0.15, 1.0)),
        ("II-C", "C", (0.08, 0.15, 1.0)),
    ],
)
def test_table_vi_level1_boundaries(cls: str, cat: str, row: tuple[float, float, float]) -> None:
    z_min, zw_min, wn_min = row
    # wn large enough that the zeta minimum governs
    wn = max(wn_min, zw_min / z_min) * 2.0
    assert rate_dutch_roll(z_min, wn, cls, cat) == L1
    assert rate_dutch_roll(z_min - EPS, wn, cls, cat) == L2  # Level 2 needs only 0.02
    # zeta*wn governs: wn between wn_min and zw_min/z_min, zeta = zw_min/wn (>= z_min)
    wn_b = 0.5 * (wn_min + zw_min / z_min)
    z_b = zw_min / wn_b
    assert z_b > z_min and wn_b > wn_min
    assert rate_dutch_roll(z_b * (1 + 1e-12), wn_b, cls, cat) == L1
    assert rate_dutch_roll(z_b * (1 - 1e-9), wn_b, cls, cat) == L2
    # wn governs
    assert rate_dutch_roll(0.9, wn_min, cls, cat) == L1
    assert rate_dutch_roll(0.9, wn_min - EPS, cls, cat) == (L2 if wn_min > 0.4 else BAD)


def test_table_vi_levels_2_and_3() -> None:
    # MIL-F-8785C Table VI: Level 2 (0.02, 0.05, 0.4); Level 3 (0, none, 0.4) (docs/references.md)
    wn = 5.0  # zeta*wn = 5 zeta, so the zeta minimum governs
    assert rate_dutch_roll(0.02, wn, "I", "A") == L2
    assert rate_dutch_roll(0.02 - EPS, wn, "I", "A") == L3
    assert rate_dutch_roll(0.0, wn, "I", "A") == L3
    assert rate_dutch_roll(-EPS, wn, "I", "A") == BAD
    # zeta*wn governs Level 2: zeta = 0.1, wn = 0.5 -> 0.05 exactly
    assert rate_dutch_roll(0.1, 0.5 * (1 + 1e-12), "I", "B") == L2
    assert rate_dutch_roll(0.1, 0.5 * (1 - 1e-9), "I", "B") == L3
    assert rate_dutch_roll(0.5, 0.4, "I", "B") == L1
    assert rate_dutch_roll(0.5, 0.4 - EPS, "I", "B") == BAD


def test_phi_beta_correction() -> None:
    # MIL-F-8785C §3.3.1.1 (recalled from memory): zeta*wn min += 0.014 (wn^2|phi/beta| - 20)
    wn, ratio = 2.0, 10.0  # wn^2 |phi/beta| = 40 -> +0.28 on the 0.35 Level-1 minimum (Cat A)
    z_ok = (0.35 + 0.014 * 20) / wn
    assert rate_dutch_roll(z_ok, wn, "I", "A", phi_beta_ratio=ratio) == L1
    assert rate_dutch_roll(z_ok - 1e-6, wn, "I", "A", phi_beta_ratio=ratio) == L2
    assert rate_dutch_roll(z_ok - 1e-6, wn, "I", "A") == L1  # not applied by default
    assert rate_dutch_roll(0.3, wn, "I", "A", phi_beta_ratio=1.0) == L1  # below threshold


# --- Table IXa: roll performance, Class I ------------------------------------


@pytest.mark.parametrize(
    "cat,angle,limits",
    # MIL-F-8785C Table IXa, Class I (docs/references.md): bank change, time (s) Levels 1/2/3
    [("A", 60.0, (1.3, 1.7, 2.6)), ("B", 60.0, (1.7, 2.5, 3.4)), ("C", 30.0, (1.3, 1.8, 2.6))],
)
def test_table_ixa_boundaries(cat: str, angle: float, limits: tuple[float, float, float]) -> None:
    assert roll_performance_bank_change_deg(cat) == angle
    for level, limit in zip((L1, L2, L3), limits, strict=True):
        assert rate_roll_performance(limit, "I", cat) == level
        assert rate_roll_performance(limit - EPS, "I", cat) == level
        assert rate_roll_performance(limit + EPS, "I", cat) == Level(level + 1)
    assert rate_roll_performance(math.inf, "I", cat) == BAD


def test_rating_argument_errors() -> None:
    with pytest.raises(ValueError, match="Class I only"):
        rate_roll_performance(1.0, "IV", "A")
    with pytest.raises(ValueError, match="II-C"):
        rate_roll_mode(1.0, "II", "C")
    with pytest.raises(ValueError, match="category"):
        rate_roll_mode(1.0, "I", "D")
    with pytest.raises(ValueError, match="class"):
        rate_spiral(30.0, "V", "A")
    with pytest.raises(ValueError, match="roll_tau_s"):
        rate_roll_mode(-1.0, "I", "A")
    assert rate_roll_mode(1.2, "ii-l", "b") == L1  # case-insensitive; II-L means II outside Cat C
    assert str(L2) == "Level 2" and str(BAD) == "worse than Level 3"
