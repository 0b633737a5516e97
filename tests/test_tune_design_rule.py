"""The tuner against the published roll-loop design rule, and its determinism.

Roll-only model ``φ/δa = a2 / (s (s + a1))`` with an ideal camera (every
base step, no latency, noise or loss), an instant servo and a PD loop. The
design rule (Beard & McLain, *Small Unmanned Aircraft*, 2012, §6.3.1) sets
``kp = δa_max / e_max`` (the bandwidth, ``ωn = √(a2 kp)``) and
``kd = (2 ζ ωn − a1) / a2`` (the damping). Holding ``kp`` at the rule's
value fixes the bandwidth target; the tuner then chooses ``kd`` by ITAE alone.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from rollrig.sim.tuning.design_rule import roll_design_rule
from rollrig.sim.tuning.search import prepare, tune
from rollrig.sim.tuning.spec import load_tuning

A1, A2 = 2.0, 30.0
ROLL_ONLY = f"""
[aircraft]
model = "roll-only"
roll_damping_per_s = {A1}
aileron_power_per_s2 = {A2}

[actuator]
time_constant_s = 0.0
limit_deg = 20.0
rate_limit_deg_s = 10000.0

[sensor]
frame_rate_hz = 100.0

[controller]
kind = "pid"
rate_hz = 100.0
kp = 1.0            # = δa_max / e_max = 20° / 20°: the rule's kp
ki_per_s = 0.0
kd_s = 0.05
derivative_filter_hz = 50.0

[command]
profile = "step"
to_deg = 20.0
at_s = 0.1

[run]
duration_s = 2.5
base_step_s = 0.01
seed = 1

[tune]
gains = ["kd_s"]
seeds = 1
population = 6
generations = 6
seed = 4

[tune.bounds]
kd_s = [0.0, 0.6]

[tune.weights]
itae = 1.0

[tune.constraints]
min_pass_rate = 0.0
delay_margin_multiple = 0.0
"""


@pytest.fixture(scope="module")
def roll_only(tmp_path_factory):
    f = tmp_path_factory.mktemp("rule") / "roll.toml"
    f.write_text(ROLL_ONLY)
    sc, spec, _ = load_tuning(f)
    return sc, spec


@pytest.fixture(scope="module")
def tuned(roll_only):
    sc, spec = roll_only
    return tune(prepare(sc, spec))


def _itae_optimal_zeta() -> float:
    """Second method: the damping ratio minimising ITAE of ωn²/(s² + 2ζωn s + ωn²),
    from SciPy's continuous step response (about 0.75; commonly rounded to 0.7)."""
    from scipy import integrate, optimize, signal

    wn = math.sqrt(A2 * 1.0)
    t = np.linspace(0.0, 2.4, 12001)

    def itae(z: float) -> float:
        _, y = signal.step(signal.TransferFunction([wn**2], [1.0, 2 * z * wn, wn**2]), T=t)
        return float(integrate.trapezoid(t * np.abs(1.0 - y), t))

    return float(optimize.minimize_scalar(itae, bounds=(0.4, 1.0), method="bounded").x)


def test_rule_gains_from_the_formula(roll_only):
    sc, _ = roll_only
    rule = roll_design_rule(sc)
    wn = math.sqrt(A2 * 1.0)  # |a2| δa_max / e_max with δa_max = e_max = 20°
    assert rule.exact
    assert rule.kp == pytest.approx(1.0, rel=1e-12)
    assert rule.omega_n_rad_s == pytest.approx(wn, rel=1e-12)
    assert rule.kd_s == pytest.approx((2 * 0.707 * wn - A1) / A2, rel=1e-12)


def test_tuner_lands_on_the_design_rule(roll_only, tuned):
    """The tuned kd equals the rule's kd for the damping ITAE prefers, within 2 %.

    ITAE prefers ζ* ≈ 0.75 here (computed independently above); the rule's own
    ζ = 0.707 gives a kd 8 % lower (dkd/dζ = 2ωn/a2), so against the published
    rule the tuned kd is within 10 %. The 2 % covers the sampled loop (100 Hz
    ticks, a 50 Hz derivative filter: a few ms of extra lag) and the search's
    finite budget; the tuner does not see the rule's value except as one of
    its six starting candidates.
    """
    sc, _ = roll_only
    assert tuned.feasible
    kd = float(tuned.best[0])
    zeta_star = _itae_optimal_zeta()
    assert 0.70 < zeta_star < 0.80
    assert kd == pytest.approx(roll_design_rule(sc, zeta=zeta_star).kd_s, rel=0.02)
    assert kd == pytest.approx(roll_design_rule(sc).kd_s, rel=0.10)


def test_same_seed_same_gains(roll_only, tuned):
    sc, spec = roll_only
    again = tune(prepare(sc, spec))
    np.testing.assert_array_equal(again.best, tuned.best)
    assert [h.best_fitness for h in again.history] == [h.best_fitness for h in tuned.history]


def test_ctrl_c_keeps_the_best_so_far(roll_only, tuned):
    """A KeyboardInterrupt during generation 2 ends the search with the best of
    the generations before it (the same as an uninterrupted run's history there)."""
    sc, spec = roll_only

    def stop_at_two(gen) -> None:
        if gen.index == 2:
            raise KeyboardInterrupt

    cut = tune(prepare(sc, spec), on_generation=stop_at_two)
    assert cut.interrupted
    assert len(cut.history) == 3
    assert cut.best_fitness == tuned.history[2].best_fitness
    assert cut.best_fitness >= tuned.best_fitness
