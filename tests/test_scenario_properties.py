"""Property tests: random scenario mutations never crash the loader or the CLI.

A mutation engine edits a valid scenario document at random — deletes a key,
replaces a value (anywhere, also inside lists and matrices) with a random TOML
value of a random type (strings, negative or huge numbers, nan, inf, booleans,
dates, lists, tables), renames a key or adds an unknown one. The loader must
then either return a :class:`~sim.scenario.Scenario` or raise
:class:`~sim.errors.ScenarioError` whose message is one line naming the file;
anything else is a bug. Scenarios that do load must run (shortened to 1 s)
without raising and without NaN in any metric.
"""

from __future__ import annotations

import contextlib
import copy
import datetime as dt
import io
import string
import tomllib

import numpy as np
from helpers import rich_docs, to_toml
from hypothesis import HealthCheck, event, given, settings
from hypothesis import strategies as st
from rollrig.sim.errors import ScenarioError
from rollrig.sim.scenario import Scenario, parse_scenario

BASES = rich_docs()

# every key name the valid documents use, so mutations can add or rename into
# real keys (e.g. both settling bands, or a gyro key in the wrong table)
_KEYS: set[str] = set()


def _collect_keys(node) -> None:
    if isinstance(node, dict):
        for k, v in node.items():
            _KEYS.add(k)
            _collect_keys(v)
    elif isinstance(node, list):
        for v in node:
            _collect_keys(v)


for _d in BASES:
    _collect_keys(_d)
KNOWN_KEYS = sorted(_KEYS)
CHOICE_WORDS = [
    "pid",
    "custom",
    "gyro",
    "measurement",
    "hold",
    "step",
    "sequence",
    "light-single",
    "small-uav",
    "roll-only",
    "matrices",
    "derivatives",
    "side",
    "roll",
    "light",
    "moderate",
    "severe",
    "p",
    "phi",
    "beta",
    "r",
    "",
]

_text = st.text(
    alphabet=st.characters(blacklist_categories=("Cs",)), max_size=12
)  # no lone surrogates: they cannot be written as UTF-8
_numbers = st.one_of(
    st.integers(min_value=-(2**70), max_value=2**70),
    st.sampled_from([0, 1, -1, 2, 10**400, -(10**400), 2**63, 0.0, -0.0, 1e-300, 1e300]),
    st.floats(allow_nan=True, allow_infinity=True),
    st.floats(min_value=-200, max_value=200),  # plausible values reach deeper checks
)
_scalars = st.one_of(
    _numbers,
    st.booleans(),
    _text,
    st.sampled_from(CHOICE_WORDS),
    st.dates(),
    st.times(),
    st.datetimes(min_value=dt.datetime(1900, 1, 1)),
)
toml_values = st.recursive(
    _scalars,
    lambda inner: st.one_of(
        st.lists(inner, max_size=5),
        st.dictionaries(st.one_of(st.sampled_from(KNOWN_KEYS), _text), inner, max_size=4),
    ),
    max_leaves=12,
)
# values a user might plausibly type: numbers (also 0, negative, large), words, flags
plausible_numbers = st.one_of(
    st.floats(min_value=-500, max_value=500),
    st.floats(min_value=0, max_value=2),
    st.integers(min_value=-5, max_value=200),
    st.sampled_from([0, 0.0, 1e-4, 1e4, 0.5, 3600.0]),
)
plausible_values = st.one_of(
    plausible_numbers,
    st.booleans(),
    st.sampled_from(CHOICE_WORDS),
)
new_keys = st.one_of(
    st.sampled_from(KNOWN_KEYS),
    st.text(alphabet=string.ascii_lowercase + "_", min_size=1, max_size=14),
    _text.filter(bool),
)


def _slots(node, out: list) -> list:
    """Every (container, key-or-index) pair in the document tree."""
    if isinstance(node, dict):
        for k, v in node.items():
            out.append((node, k))
            _slots(v, out)
    elif isinstance(node, list):
        for i, v in enumerate(node):
            out.append((node, i))
            _slots(v, out)
    return out


def _tables(node, out: list) -> list:
    if isinstance(node, dict):
        out.append(node)
        for v in node.values():
            _tables(v, out)
    elif isinstance(node, list):
        for v in node:
            _tables(v, out)
    return out


@st.composite
def mutants(draw, max_mutations: int = 3, plausible: bool = False) -> dict:
    """A valid document with 1..max_mutations random edits.

    ``plausible`` draws new values from :data:`plausible_values` (so more mutants
    load and reach the simulation) instead of any TOML value.
    """
    values = plausible_values if plausible else toml_values
    doc = copy.deepcopy(draw(st.sampled_from(BASES)))
    for _ in range(draw(st.integers(1, max_mutations))):
        ops = (
            ["delete", "replace", "replace", "replace"]
            if plausible
            else ["delete", "replace", "replace", "rename", "add"]
        )
        op = draw(st.sampled_from(ops))
        if op == "add":
            table = draw(st.sampled_from(_tables(doc, [])))
            table[draw(new_keys)] = draw(values)
            continue
        slots = _slots(doc, [])
        if not slots:
            doc["aircraft"] = draw(values)
            continue
        container, key = draw(st.sampled_from(slots))
        if op == "delete":
            del container[key]
        elif op == "replace" and plausible:  # keep the type, change the value
            old = container[key]
            if isinstance(old, bool):
                container[key] = draw(st.booleans())
            elif isinstance(old, (int, float)):
                container[key] = draw(plausible_numbers)
            elif isinstance(old, str):
                container[key] = draw(st.sampled_from(CHOICE_WORDS))
            else:
                container[key] = draw(values)
        elif op == "replace":
            container[key] = draw(values)
        elif isinstance(container, dict):  # rename
            new = draw(new_keys)
            if new not in container:
                container[new] = container.pop(key)
        else:  # a list element: swap it for another value instead
            container[key] = draw(values)
    return doc


def _load(doc: dict) -> Scenario | None:
    """Scenario, or None after a well-formed ScenarioError; anything else propagates."""
    try:
        return parse_scenario(doc, file="mutant.toml")
    except ScenarioError as exc:
        msg = str(exc)
        assert "\n" not in msg and msg.startswith("mutant.toml: "), msg
        event("rejected")
        return None


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(mutants())
def test_mutated_scenarios_load_or_raise_scenario_error(doc):
    sc = _load(doc)
    if sc is not None:
        event("loaded")
        assert isinstance(sc, Scenario)


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(mutants())
def test_mutated_files_through_cli_never_traceback(tmp_path_factory, doc):
    """The same mutants as TOML files through ``rollrig check``: exit 0 or 2, one line."""
    from rollrig.sim.cli.main import main

    path = tmp_path_factory.mktemp("mut") / "mutant.toml"
    path.write_text(to_toml(doc), encoding="utf-8")
    tomllib.loads(path.read_text(encoding="utf-8"))  # the test's writer made valid TOML
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = main(["check", str(path)])
    if code == 0:
        assert out.getvalue().startswith(f"{path}: ok") and err.getvalue() == ""
    else:
        assert code == 2
        line = err.getvalue()
        assert line.count("\n") == 1 and line.startswith(f"rollrig: error: {path}"), line
        assert "Traceback" not in line


@settings(max_examples=120, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(mutants(max_mutations=2, plausible=True), st.integers(0, 2**32 - 1))
def test_loaded_mutants_run_without_nan(doc, seed):
    """Every scenario that loads runs 1 s without raising; metrics never hold NaN."""
    from rollrig.sim.runner import run_scenario

    sc = _load(doc)
    if sc is None:
        return
    if sc.controller.kind == "custom":  # refused without --allow-code, in one line
        event("custom controller")
        return
    sc = sc.with_run(duration_s=1.0, runs=min(sc.run.runs, 2), seed=seed)
    out = run_scenario(sc)
    event("ran, diverged" if out.trace.diverged.any() else "ran")
    for key, values in out.metrics.items():
        values = np.asarray(values)
        assert values.shape == (out.trace.batch,), key
        if values.dtype.kind == "f":
            assert not np.isnan(values).any(), f"NaN in metric {key}: {values}"
