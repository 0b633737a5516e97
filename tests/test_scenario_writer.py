"""The scenario writer: every scenario, loaded or changed in memory, is written
to TOML that loads back to an equal scenario; the canonical hash identifies
what is simulated; comments of the user's file survive a rewrite."""

from __future__ import annotations

import copy
import dataclasses
import tomllib

import numpy as np
import pytest
from helpers import BUNDLED, SCENARIO_DIR, rich_docs
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose
from rollrig.sim.scenario import Scenario, load_scenario, parse_scenario
from rollrig.sim.scenario_writer import (
    UnwritableScenario,
    canonical_hash,
    canonical_json,
    scenario_to_toml,
    write_scenario,
)


def _reload(sc: Scenario, **kw) -> Scenario:
    return parse_scenario(tomllib.loads(scenario_to_toml(sc, **kw)), file="<written>")


def _assert_equal_scenarios(a: Scenario, b: Scenario) -> None:
    """Equal as simulated: canonical documents agree, and every array to the last bits."""
    assert canonical_json(a) == canonical_json(b)
    assert a.title == b.title and a.story == b.story
    assert_allclose(b.plant.a, a.plant.a, rtol=1e-14, atol=0)
    assert_allclose(b.plant.b_control, a.plant.b_control, rtol=1e-14, atol=0)
    assert_allclose(b.plant.b_disturbance, a.plant.b_disturbance, rtol=1e-14, atol=0)
    assert_allclose(b.x0, a.x0, rtol=1e-14, atol=1e-300)
    assert_allclose(b.command.banks_rad, a.command.banks_rad, rtol=1e-14, atol=1e-300)
    for field in ("camera", "gyro", "actuator", "criteria", "run"):
        fa, fb = getattr(a, field), getattr(b, field)
        if fa is None:
            assert fb is None
            continue
        for f in dataclasses.fields(fa):
            va, vb = getattr(fa, f.name), getattr(fb, f.name)
            if isinstance(va, float):
                assert vb == pytest.approx(va, rel=1e-14, abs=1e-300), (field, f.name)


@pytest.mark.parametrize("path", BUNDLED, ids=[p.stem for p in BUNDLED])
def test_bundled_scenarios_round_trip(path):
    sc = load_scenario(path)
    _assert_equal_scenarios(sc, _reload(sc))
    # and once more: writing the reloaded scenario changes nothing
    assert scenario_to_toml(_reload(sc)) == scenario_to_toml(sc)


@pytest.mark.parametrize("i", range(len(rich_docs())))
def test_every_section_and_model_kind_round_trips(i):
    sc = parse_scenario(rich_docs()[i], file="<doc>")
    _assert_equal_scenarios(sc, _reload(sc))


@settings(max_examples=60, deadline=None)
@given(
    latency=st.floats(0.0, 0.5),
    noise=st.floats(0.0, 5.0),
    kp=st.floats(0.01, 10.0),
    bank=st.floats(-60.0, 60.0),
    band=st.floats(0.5, 20.0),
    seed=st.integers(0, 2**63 - 1),
)
def test_random_valid_scenarios_round_trip(latency, noise, kp, bank, band, seed):
    doc = copy.deepcopy(rich_docs()[0])
    doc["sensor"] = dict(doc.get("sensor", {}), latency_s=latency, noise_deg=noise)
    doc["controller"]["kp"] = kp
    doc["command"] = {"profile": "hold", "bank_deg": bank}
    doc["criteria"] = {"settling_band_pct": band}
    doc.setdefault("run", {})["seed"] = seed
    sc = parse_scenario(doc, file="<random>")
    _assert_equal_scenarios(sc, _reload(sc))


def test_scenario_changed_in_memory_is_written():
    sc = load_scenario(BUNDLED[0])
    pid = dataclasses.replace(sc.controller.pid, kp=0.123, kd_s=0.045)
    tuned = dataclasses.replace(sc, controller=dataclasses.replace(sc.controller, pid=pid))
    back = _reload(tuned)
    assert back.controller.pid.kp == 0.123 and back.controller.pid.kd_s == 0.045
    assert canonical_hash(back) == canonical_hash(tuned) != canonical_hash(sc)


def test_hash_ignores_title_and_story_but_not_physics():
    sc = load_scenario(BUNDLED[0])
    renamed = dataclasses.replace(sc, title="another name", story="told differently")
    assert canonical_hash(renamed) == canonical_hash(sc)
    later = dataclasses.replace(
        sc, camera=dataclasses.replace(sc.camera, latency_s=sc.camera.latency_s + 0.001)
    )
    assert canonical_hash(later) != canonical_hash(sc)
    assert len(canonical_hash(sc)) == 64


def test_per_run_arrays_hash_but_cannot_be_written():
    sc = load_scenario(BUNDLED[0])
    arr = dataclasses.replace(sc, camera=dataclasses.replace(sc.camera, latency_s=np.array([0.05, 0.1])))
    assert canonical_hash(arr) != canonical_hash(sc)
    with pytest.raises(UnwritableScenario, match="per-run array"):
        scenario_to_toml(arr)


def test_template_keeps_comments_and_readable_forms(tmp_path):
    text = next(p for p in BUNDLED if "turbulence" in p.read_text()).read_text()
    assert "#" in text
    sc = parse_scenario(tomllib.loads(text), file="<t>")
    pid = dataclasses.replace(sc.controller.pid, kp=sc.controller.pid.kp * 1.5)
    tuned = dataclasses.replace(sc, controller=dataclasses.replace(sc.controller, pid=pid))
    out = scenario_to_toml(tuned, template=text)
    # unchanged sections are the user's own text, comments included
    for line in text.splitlines():
        if line.strip().startswith("[disturbance.turbulence]"):
            assert line in out
    kept_comments = [ln for ln in text.splitlines() if ln.strip().startswith("#")]
    assert sum(c in out for c in kept_comments) >= 0.8 * len(kept_comments)
    back = parse_scenario(tomllib.loads(out), file="<out>")
    assert back.controller.pid.kp == pytest.approx(pid.kp, rel=1e-15)
    assert canonical_hash(back) == canonical_hash(tuned)
    path = write_scenario(tuned, tmp_path / "tuned.toml", template=text)
    assert path.read_text() == out
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".")]


def test_preset_models_are_written_by_name():
    checked = 0
    for path in BUNDLED:
        sc = load_scenario(path)
        model = tomllib.loads(path.read_text())["aircraft"]["model"]
        written = tomllib.loads(scenario_to_toml(sc))["aircraft"]["model"]
        if model in ("light-single", "small-uav"):
            assert written == model
            checked += 1
    assert checked, "no bundled scenario flies a preset airframe: nothing was checked"


@pytest.mark.parametrize("kind", ["cascade", "lqg", "smith"])
def test_bundled_controller_kinds_round_trip(kind):
    """A scenario flying each bundled controller file writes back to an equal scenario."""
    from rollrig.sim.controller_section import load_controller_file

    sc = load_scenario(SCENARIO_DIR / "lossy-camera-turn.toml")
    spec = load_controller_file(
        SCENARIO_DIR / "controllers" / f"{kind}.toml",
        base_step_s=sc.run.base_step_s,
        aileron_limit_rad=sc.actuator.limit_rad,
    )
    flown = dataclasses.replace(sc, controller=spec)
    back = _reload(flown)
    _assert_equal_scenarios(flown, back)
    assert back.controller.kind == kind and back.controller.label == spec.label
    for name, value in spec.params.items():
        if isinstance(value, float):
            assert back.controller.params[name] == pytest.approx(value, rel=1e-14), name
        else:
            assert back.controller.params[name] == value, name
