"""The image-level closed loop: exact replay, agreement with an ideal camera, and surrogate fidelity."""

from __future__ import annotations

import numpy as np
import pytest
from helpers import minimal_doc
from numpy.testing import assert_array_equal
from rollrig.sensors.readers import MomentReader
from rollrig.sim.analysis.image_loop import image_scenario, surrogate_fidelity
from rollrig.sim.analysis.read_test import ReadTestSpec, fitted_scenario, run_read_test
from rollrig.sim.runner import run_scenario
from rollrig.sim.scenario import parse_scenario


def _scenario(**run):
    doc = minimal_doc()
    doc["sensor"] = {"frame_rate_hz": 25.0, "latency_s": 0.04, "dropout_prob": 0.05}
    doc["run"].update(run)
    return parse_scenario(doc, file="loop.toml")


def test_clean_pictures_read_like_an_ideal_camera_with_the_same_timing():
    sc = _scenario(runs=3)
    img = run_scenario(image_scenario(sc, MomentReader(64)))
    ideal = run_scenario(sc)  # statistical model with no reading error: the same timing and losses
    assert_array_equal(img.trace.valid, ideal.trace.valid)
    seen = np.isfinite(ideal.trace.age)
    # the moment reader reads clean 64 px pictures to ~0.05° (test_readers); the 8-bit ADC adds little
    assert np.max(np.abs(img.trace.bank_meas - ideal.trace.bank_meas)[seen]) < np.radians(0.2)


def test_run_alone_equals_run_in_batch():
    sc = image_scenario(_scenario(runs=4), MomentReader(64), degradations=(("noise", 0.05), ("glare", 0.5)))
    batch = run_scenario(sc)
    alone = run_scenario(sc, run_indices=[2])
    assert_array_equal(alone.trace.bank_meas[0], batch.trace.bank_meas[2])
    assert_array_equal(alone.trace.valid[0], batch.trace.valid[2])


def test_surrogate_fidelity_at_small_size():
    # read-test at the operating condition, fit the statistical model, then run both loops
    reader = MomentReader(64)
    spec = ReadTestSpec(
        banks_deg=tuple(np.linspace(-30.0, 30.0, 31)),
        kinds={"noise": (0.0, 0.05)},
        draws=6,
        operating=(("noise", 0.05),),
    )
    fit = run_read_test(spec, reader).fits[0]
    sc = _scenario(duration_s=4.0)
    fid = surrogate_fidelity(
        image_scenario(sc, reader, degradations=(("noise", 0.05),)), fitted_scenario(sc, fit), runs=12
    )
    assert {r.metric for r in fid.rows} >= {"rms_error_rad", "aileron_rms_rad"}
    # pixel noise makes a white, bank-independent reading error: the fitted model should stand in for it
    disagree = [r.metric for r in fid.rows if not r.agree]
    assert not disagree, disagree
    for r in fid.rows:
        assert r.image_mean == pytest.approx(r.model_mean, rel=0.1, abs=1e-3)


def test_restarted_run_reads_pictures_as_a_fresh_run():
    """A row restarted mid-batch (the engine's per-row restart) reads the same pictures as a fresh run."""
    from rollrig.sim.build import build_setup, make_controller
    from rollrig.sim.core import Stepper

    sc = image_scenario(_scenario(), MomentReader(64), degradations=(("noise", 0.05),))
    setup = build_setup(sc)

    def fresh(run, n):
        st, ctrl = Stepper(setup), make_controller(sc.controller)
        obs = st.reset(3, [run])
        ctrl.reset(1)
        out = []
        for _ in range(n):
            out.append((obs.bank[0], obs.valid[0]))
            obs = st.advance(ctrl.step(obs))
        return out

    st, ctrl = Stepper(setup), make_controller(sc.controller)
    obs = st.reset(3, [0, 1])
    ctrl.reset(2)
    for _ in range(23):
        obs = st.advance(ctrl.step(obs))
    obs = st.restart([1], [5])
    ctrl.reset_rows([1])
    seen = []
    for _ in range(40):
        seen.append((obs.bank[1], obs.valid[1]))
        obs = st.advance(ctrl.step(obs))
    assert seen == fresh(5, 40)
