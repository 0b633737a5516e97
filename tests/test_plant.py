"""Tests of sim.plant: validation, exact ZOH discretisation, ODE cross-checks."""

from __future__ import annotations

import control
import numpy as np
import pytest
from numpy.testing import assert_allclose
from rollrig.sim.plant import (
    DiscretePlant,
    LinearPlant,
    check_plant,
    continuous_response,
    discretize,
    modes,
)
from rollrig.sim.presets import PRESETS, roll_only


def _step_zoh(dp: DiscretePlant, x0: np.ndarray, u: np.ndarray, d: np.ndarray) -> np.ndarray:
    """States on the grid from the discrete model (rows: time)."""
    xs = [x0]
    for k in range(u.shape[0]):
        xs.append(dp.ad @ xs[-1] + dp.bd_control @ u[k] + dp.bd_disturbance @ d[k])
    return np.array(xs)


@pytest.mark.parametrize("preset", sorted(PRESETS))
def test_zoh_matches_solve_ivp(preset: str) -> None:
    # Second method: scipy.integrate.solve_ivp (DOP853, rtol 1e-12) over each
    # held-input interval; random piecewise-constant inputs of realistic size.
    plant = PRESETS[preset]()
    dt, n_steps = 0.02, 150  # 3 s
    rng = np.random.default_rng(12345)
    u = rng.uniform(-0.1, 0.1, size=(n_steps, 2))  # rad
    d = rng.normal(0.0, [2.0, 0.05, 0.05, 0.5], size=(n_steps, 4))
    x0 = rng.normal(0.0, 0.05, size=plant.n_states)
    t = dt * np.arange(n_steps + 1)
    ref = continuous_response(plant, t, u, d, x0)
    ours = _step_zoh(discretize(plant, dt), x0, u, d)
    assert_allclose(ours, ref, rtol=1e-9, atol=1e-12)


@pytest.mark.parametrize("preset", sorted(PRESETS))
@pytest.mark.parametrize("dt", [0.001, 0.01, 0.05])
def test_zoh_matches_python_control(preset: str, dt: float) -> None:
    # Second method: python-control c2d(method='zoh').
    plant = PRESETS[preset]()
    n = plant.n_states
    b = np.hstack([plant.b_control, plant.b_disturbance])
    sysd = control.c2d(control.ss(plant.a, b, np.eye(n), np.zeros((n, 6))), dt, method="zoh")
    dp = discretize(plant, dt)
    assert dp.dt == dt
    assert_allclose(dp.ad, sysd.A, rtol=1e-10, atol=1e-13)
    assert_allclose(dp.bd_control, sysd.B[:, :2], rtol=1e-10, atol=1e-13)
    assert_allclose(dp.bd_disturbance, sysd.B[:, 2:], rtol=1e-10, atol=1e-13)


def test_roll_only_step_analytic() -> None:
    # Analytic solution of p' = -a1 p + a2 da, phi' = p from rest, step da:
    # p = (a2 da / a1)(1 - e^{-a1 t}); phi = (a2 da / a1)(t - (1 - e^{-a1 t}) / a1).
    a1, a2, da = 4.0, 30.0, 0.05
    plant = roll_only(a1, a2)
    dt, n_steps = 0.01, 200
    t = dt * np.arange(n_steps + 1)
    u = np.tile([da, 0.0], (n_steps, 1))
    x = _step_zoh(discretize(plant, dt), np.zeros(2), u, np.zeros((n_steps, 4)))
    p_ss = a2 * da / a1
    assert_allclose(x[:, 0], p_ss * (1 - np.exp(-a1 * t)), rtol=1e-11, atol=1e-14)
    assert_allclose(x[:, 1], p_ss * (t - (1 - np.exp(-a1 * t)) / a1), rtol=1e-11, atol=1e-14)


def test_zoh_is_exact_for_any_step_length() -> None:
    # Semigroup property of the exact ZOH: two steps of dt with the same held
    # input equal one step of 2 dt (true for the exact map, false for Euler/Tustin).
    plant = PRESETS["light-single"]()
    d1, d2 = discretize(plant, 0.05), discretize(plant, 0.1)
    assert_allclose(d1.ad @ d1.ad, d2.ad, rtol=1e-12, atol=1e-14)
    assert_allclose(d1.ad @ d1.bd_control + d1.bd_control, d2.bd_control, rtol=1e-12, atol=1e-14)


def test_modes_sorted_and_match_numpy() -> None:
    plant = PRESETS["small-uav"]()
    ev = modes(plant)
    assert_allclose(ev, np.sort_complex(np.linalg.eigvals(plant.a)), rtol=1e-12)
    assert np.all(np.diff(ev.real) >= 0)


def _good_kwargs() -> dict:
    return {
        "name": "t",
        "a": np.array([[-2.0, 0.0], [1.0, 0.0]]),
        "b_control": np.array([[3.0, 0.0], [0.0, 0.0]]),
        "b_disturbance": np.array([[0.0, 2.0, 0.0, 1.0], [0.0, 0.0, 0.0, 0.0]]),
        "state_names": ("p", "phi"),
        "airspeed_mps": 20.0,
    }


@pytest.mark.parametrize(
    ("key", "value", "fragment"),
    [
        ("a", np.zeros((2, 3)), "square"),
        ("a", np.array([[np.nan, 0.0], [1.0, 0.0]]), "non-finite"),
        ("b_control", np.zeros((2, 1)), "b_control"),
        ("b_disturbance", np.zeros((2, 3)), "b_disturbance"),
        ("b_disturbance", np.full((2, 4), np.inf), "non-finite"),
        ("state_names", ("p",), "state_names"),
        ("state_names", ("p", "bank"), "'phi'"),
        ("state_names", ("roll", "phi"), "'p'"),
        ("state_names", ("p", "p"), "repeat"),
        ("airspeed_mps", 0.0, "airspeed"),
        ("airspeed_mps", float("nan"), "airspeed"),
        ("span_m", -1.0, "span"),
        ("a", [["x", 1], [1, 0]], "numeric"),
    ],
)
def test_check_plant_rejects(key: str, value: object, fragment: str) -> None:
    kwargs = _good_kwargs()
    kwargs[key] = value
    with pytest.raises(ValueError, match=fragment):
        LinearPlant(**kwargs)


def test_plant_is_valid_and_read_only() -> None:
    plant = LinearPlant(**_good_kwargs())
    check_plant(plant)  # does not raise
    assert (plant.n_states, plant.p_index, plant.phi_index) == (2, 0, 1)
    with pytest.raises(ValueError):
        plant.a[0, 0] = 1.0  # arrays are read-only copies


@pytest.mark.parametrize("dt", [0.0, -0.01, float("inf")])
def test_discretize_rejects_bad_dt(dt: float) -> None:
    with pytest.raises(ValueError, match="dt"):
        discretize(LinearPlant(**_good_kwargs()), dt)
