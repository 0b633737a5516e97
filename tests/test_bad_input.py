"""User mistakes: one line naming file, key and allowed range; exit 2; no traceback.

Every case runs the real command line in-process (``rollrig check FILE`` or
``rollrig run FILE --no-files``) on a scenario that differs from a valid one by
one mistake, and checks the whole contract: exit status 2, exactly one line on
stderr, that line names the file and the key (and the allowed range or values
where one exists), nothing on it looks like a traceback, and ``--out`` folders
are never left half written.
"""

from __future__ import annotations

import datetime
import sys
import tomllib
from collections.abc import Callable
from pathlib import Path

import pytest
from helpers import (
    MINIMAL_SCENARIO,
    derivatives_aircraft,
    matrices_aircraft,
    minimal_doc,
    rich_docs,
    to_toml,
)
from rollrig.sim.errors import ScenarioError, UserInputError

TRACEBACK_MARKS = ("Traceback", 'File "', "Error:", "raise ")


def assert_one_line_error(code: int, out: str, err: str, *fragments: str) -> str:
    """Exit 2, one stderr line holding every fragment, no traceback; return the line."""
    assert code == 2, f"exit status {code}, stderr={err!r}"
    assert err.endswith("\n") and err.count("\n") == 1, f"not exactly one line: {err!r}"
    line = err.strip()
    assert line.startswith("rollrig: error: "), line
    for mark in TRACEBACK_MARKS:
        assert mark not in err and mark not in out, f"traceback-like text {mark!r} in {err!r}"
    for frag in fragments:
        assert frag in line, f"{frag!r} missing from {line!r}"
    return line


def test_toml_writer_round_trips():
    """The test-side TOML writer reproduces every document it is given."""
    for doc in rich_docs():
        assert tomllib.loads(to_toml(doc)) == doc
    odd = {
        "t": {
            "x": float("inf"),
            "y": -float("inf"),
            "s": 'quote " and \\ and \n',
            "weird key": [1, 2.5, True],
            "inline": [{"a": 1}],
        }
    }
    back = tomllib.loads(to_toml(odd))
    assert back["t"]["s"] == odd["t"]["s"] and back["t"]["x"] == float("inf")


# ---------------------------------------------------------------- one mistake each
def _set(section: str, key: str, value) -> Callable[[dict], None]:
    def f(doc: dict) -> None:
        doc.setdefault(section, {})[key] = value

    return f


def _del(section: str, key: str | None = None) -> Callable[[dict], None]:
    def f(doc: dict) -> None:
        if key is None:
            del doc[section]
        else:
            del doc[section][key]

    return f


def _then(*fs: Callable[[dict], None]) -> Callable[[dict], None]:
    def f(doc: dict) -> None:
        for g in fs:
            g(doc)

    return f


def _rename(section: str, old: str, new: str) -> Callable[[dict], None]:
    def f(doc: dict) -> None:
        doc[section][new] = doc[section].pop(old)

    return f


def _matrices(**changes) -> Callable[[dict], None]:
    def f(doc: dict) -> None:
        doc["aircraft"] = matrices_aircraft()
        doc["aircraft"].pop("b_disturbance")
        for k, v in changes.items():
            if v is None:
                doc["aircraft"].pop(k, None)
            else:
                doc["aircraft"][k] = v

    return f


def _sequence(times, banks) -> Callable[[dict], None]:
    def f(doc: dict) -> None:
        doc["command"] = {"profile": "sequence", "times_s": times, "banks_deg": banks}

    return f


UNSTABLE_A = [[0.5, 0.0], [1.0, 0.0]]  # roll mode at +0.5 1/s: doubles in 1.4 s

# (id, mutation of the minimal document, fragments the one line must hold)
CASES: list[tuple[str, Callable[[dict], None], tuple[str, ...]]] = [
    # unknown keys, with the nearest valid one suggested
    (
        "unknown key",
        _rename("sensor", "latency_s", "latncy_s"),
        ("[sensor] latncy_s", "did you mean 'latency_s'?"),
    ),
    (
        "unknown section",
        lambda d: d.__setitem__("sensr", d.pop("sensor")),
        ("sensr", "did you mean 'sensor'?"),
    ),
    (
        "unknown key with a newline",
        _set("sensor", "bad\nkey", 1.0),
        ("[sensor] 'bad\\nkey'", "not a known key"),
    ),
    (
        "unknown nested key",
        _set("sensor", "gyro", {"rate_hz": 100.0, "nois_deg_s": 0.1}),
        ("[sensor.gyro] nois_deg_s", "did you mean 'noise_deg_s'?"),
    ),
    (
        "unknown model",
        _set("aircraft", "model", "roll_only"),
        ("[aircraft] model", "did you mean 'roll-only'?", "allowed:", "'light-single'"),
    ),
    (
        "unknown choice",
        _set("command", "profile", "stepp"),
        ("[command] profile", "did you mean 'step'?", "'hold', 'step', 'sequence'"),
    ),
    # wrong types
    (
        "string for number",
        _set("sensor", "latency_s", "0.04"),
        ("[sensor] latency_s", "must be a number", "str", "allowed: 0 ≤ latency_s ≤ 5"),
    ),
    (
        "bool for number",
        _set("controller", "kp", True),
        ("[controller] kp", "must be a number", "bool", "allowed: 0 ≤ kp ≤ 100"),
    ),
    (
        "table for number",
        _set("sensor", "noise_deg", {"value": 1.0}),
        ("[sensor] noise_deg", "must be a number", "allowed: 0 ≤ noise_deg ≤ 30"),
    ),
    (
        "list for number",
        _set("run", "duration_s", [1.0, 2.0]),
        ("[run] duration_s", "must be a number", "allowed: 0 < duration_s ≤ 3600"),
    ),
    (
        "date for number",
        _set("command", "at_s", datetime.date(2024, 1, 2)),
        ("[command] at_s", "must be a number", "allowed: 0 ≤ at_s < 2"),
    ),
    (
        "number for string",
        _set("aircraft", "model", 3),
        ("[aircraft] model", "must be a string", "allowed: 'light-single'"),
    ),
    ("number for bool", _matrices(allow_unstable=1), ("[aircraft] allow_unstable", "true or false")),
    (
        "fraction for whole number",
        _set("run", "runs", 2.5),
        ("[run] runs", "whole number", "allowed: 1 ≤ runs ≤ 100000"),
    ),
    ("wrong section type", lambda d: d.__setitem__("sensor", 3), ("sensor", "must be a table")),
    ("section as array of tables", lambda d: d.__setitem__("run", [{"runs": 2}]), ("run", "must be a table")),
    (
        "string in number list",
        _sequence(["0", "1"], [0.0, 5.0]),
        ("[command] times_s", "must hold numbers", "'0'"),
    ),
    (
        "bool in number list",
        _sequence([0.0, 1.0], [0.0, True]),
        ("[command] banks_deg", "must hold numbers", "True"),
    ),
    # non-finite literals
    (
        "nan literal",
        _set("sensor", "noise_deg", float("nan")),
        ("[sensor] noise_deg", "finite", "allowed: 0 ≤ noise_deg ≤ 30"),
    ),
    (
        "inf literal",
        _set("sensor", "bias_deg", float("inf")),
        ("[sensor] bias_deg", "finite", "allowed: -45 ≤ bias_deg ≤ 45"),
    ),
    (
        "-inf literal",
        _set("controller", "kd_s", -float("inf")),
        ("[controller] kd_s", "finite", "0 ≤ kd_s ≤ 100"),
    ),
    (
        "nan in matrix",
        _matrices(
            a=[
                [-1.0, 0.0, 0.0, 0.0],
                [0.0, float("nan"), 0.0, 0.0],
                [0.0, 0.0, -1.0, 0.0],
                [0.0, 1.0, 0.0, 0.0],
            ]
        ),
        ("[aircraft] a", "finite"),
    ),
    ("huge integer", _set("controller", "kp", 10**400), ("[controller] kp", "too large", "0 ≤ kp ≤ 100")),
    ("huge integer in list", _sequence([0, 10**400], [0.0, 5.0]), ("[command] times_s", "list of numbers")),
    # out of range
    (
        "negative latency",
        _set("sensor", "latency_s", -0.05),
        ("[sensor] latency_s", "-0.05", "allowed: 0 ≤ latency_s ≤ 5"),
    ),
    (
        "zero frame rate",
        _set("sensor", "frame_rate_hz", 0.0),
        ("[sensor] frame_rate_hz", "allowed: 0.1 ≤ frame_rate_hz ≤ 100"),
    ),
    (
        "frame rate above base rate",
        _set("sensor", "frame_rate_hz", 400.0),
        ("[sensor] frame_rate_hz", "≤ 100"),
    ),
    (
        "controller rate not whole fraction",
        _set("controller", "rate_hz", 30.0),
        ("[controller] rate_hz", "= 30", "allowed: 100/n Hz"),
    ),
    (
        "negative duration",
        _set("run", "duration_s", -1.0),
        ("[run] duration_s", "allowed: 0 < duration_s ≤ 3600"),
    ),
    (
        "duration shorter than two steps",
        _set("run", "duration_s", 0.01),
        ("[run] duration_s", "two base steps", "allowed: duration_s ≥ 0.02"),
    ),
    ("zero runs", _set("run", "runs", 0), ("[run] runs", "allowed: 1 ≤ runs ≤ 100000")),
    ("negative seed", _set("run", "seed", -3), ("[run] seed", "0 ≤ seed")),
    (
        "base step too large",
        _set("run", "base_step_s", 0.5),
        ("[run] base_step_s", "0.0001 ≤ base_step_s ≤ 0.1"),
    ),
    (
        "dropout probability one",
        _set("sensor", "dropout_prob", 1.0),
        ("[sensor] dropout_prob", "0 ≤ dropout_prob < 1"),
    ),
    (
        "zero aileron limit",
        _set("actuator", "limit_deg", 0.0),
        ("[actuator] limit_deg", "0 < limit_deg ≤ 60"),
    ),
    ("step time after end", _set("command", "at_s", 5.0), ("[command] at_s", "0 ≤ at_s < 2")),
    ("bank beyond 90", _set("initial", "bank_deg", 120.0), ("[initial] bank_deg", "-90 ≤ bank_deg ≤ 90")),
    (
        "derivative filter above Nyquist",
        _set("controller", "derivative_filter_hz", 40.0),
        ("[controller] derivative_filter_hz", "≤ 25"),
    ),
    # missing keys and sections
    ("missing aircraft", _del("aircraft"), ("aircraft", "required")),
    ("missing kp", _del("controller", "kp"), ("[controller] kp", "required")),
    ("missing to_deg", _del("command", "to_deg"), ("[command] to_deg", "required")),
    # cross-key rules
    (
        "gyro derivative without gyro",
        _set("controller", "derivative", "gyro"),
        ("[controller] derivative", "[sensor.gyro]", "allowed"),
    ),
    (
        "settling band both ways",
        _set("criteria", "settling_band_deg", 1.0),
        ("[criteria] settling_band_deg", "settling_band_pct", "allowed: one of them"),
    ),
    (
        "sequence not increasing",
        _sequence([0.0, 1.0, 1.0], [0.0, 5.0, 0.0]),
        ("[command] times_s", "strictly increasing", "allowed:"),
    ),
    (
        "sequence lengths differ",
        _sequence([0.0, 1.0], [5.0]),
        ("[command] banks_deg", "one per entry of times_s"),
    ),
    ("sequence beyond duration", _sequence([0.0, 3.0], [0.0, 5.0]), ("[command] times_s", "0 ≤ times_s ≤ 2")),
    (
        "roll moment step without time",
        _set("disturbance", "roll_moment_step_deg_s2", 2.0),
        ("[disturbance] roll_moment_step_time_s", "required"),
    ),
    (
        "sideslip on a model without beta",
        _set("initial", "sideslip_deg", 2.0),
        ("[initial] sideslip_deg", "not a known key"),
    ),
    # user models
    (
        "matrices non-square a",
        _matrices(a=[[-1.0, 0.0, 0.0], [0.0, -1.0, 0.0], [0.0, 0.0, -1.0], [0.0, 1.0, 0.0]]),
        ("[aircraft] a", "4x3", "square"),
    ),
    ("matrices ragged a", _matrices(a=[[-1.0, 0.0], [0.0]]), ("[aircraft] a", "list of numbers")),
    ("matrices b wrong rows", _matrices(b=[[0.0], [28.0]]), ("[aircraft] b", "2x1", "4xn")),
    (
        "matrices b three columns",
        _matrices(b=[[0.0, 0, 0], [28.0, 0, 0], [0.0, 0, 0], [0.0, 0, 0]]),
        ("[aircraft] b", "3 columns", "1 (aileron) or 2"),
    ),
    ("states without phi", _matrices(states=["beta", "p", "r", "bank"]), ("[aircraft] states", '"phi"')),
    ("states missing", _matrices(states=None), ("[aircraft] states", '"phi"')),
    ("states repeat a name", _matrices(states=["p", "p", "phi", "r"]), ("[aircraft] states", "distinct")),
    ("matrices without airspeed", _matrices(airspeed_mps=None), ("[aircraft] airspeed_mps", "required")),
    (
        "unstable user model",
        _matrices(a=UNSTABLE_A, b=[[10.0], [0.0]], states=["p", "phi"], span_m=None),
        ("[aircraft] a", "unstable", "0.5", "allowed: real parts ≤ 0.1 1/s", "allow_unstable = true"),
    ),
    (
        "derivatives missing one",
        lambda d: d.__setitem__(
            "aircraft", {k: v for k, v in derivatives_aircraft().items() if k != "l_p_per_s"}
        ),
        ("[aircraft] l_p_per_s", "required"),
    ),
    (
        "turbulence without gust inputs",
        _then(_matrices(), _set("disturbance", "turbulence", {"intensity": "light", "altitude_ft": 500})),
        ("[disturbance] turbulence", "no gust inputs", "allowed here"),
    ),
    (
        "turbulence without wing span",
        _set("disturbance", "turbulence", {"intensity": "light", "altitude_ft": 500}),
        ("[disturbance] turbulence", "span_m", "allowed"),
    ),
    (
        "custom class path malformed",
        lambda d: d.__setitem__("controller", {"kind": "custom", "class": "justamodule", "rate_hz": 50.0}),
        ("[controller] class", "package.module:ClassName"),
    ),
]


@pytest.mark.parametrize("mutate, fragments", [c[1:] for c in CASES], ids=[c[0] for c in CASES])
@pytest.mark.parametrize("command", ["check", "run"])
def test_one_mistake_one_line(cli, write_doc, mutate, fragments, command):
    doc = minimal_doc()
    mutate(doc)
    path = write_doc(doc)
    args = [command, path] + (["--no-files"] if command == "run" else [])
    code, out, err = cli(args)
    line = assert_one_line_error(code, out, err, str(path), *fragments)
    # the same mistake through the library raises the project's error type
    from rollrig.sim.scenario import load_scenario

    with pytest.raises(ScenarioError) as info:
        load_scenario(path)
    assert str(info.value) in line


def test_user_model_unstable_accepted_when_allowed(cli, write_doc):
    """The unstable model above loads and runs with ``allow_unstable = true``."""
    doc = minimal_doc()
    _matrices(a=UNSTABLE_A, b=[[10.0], [0.0]], states=["p", "phi"], span_m=None)(doc)
    doc["aircraft"]["allow_unstable"] = True
    path = write_doc(doc)
    code, out, err = cli(["check", path])
    assert (code, err) == (0, "")
    assert f"{path}: ok" in out
    code, out, err = cli(["run", path, "--no-files", "--format", "csv"])
    assert code == 0, err


def test_user_model_barely_stable_is_accepted(cli, write_doc):
    """Growth at 0.05 1/s (below the 0.1 1/s threshold) needs no permission."""
    doc = minimal_doc()
    _matrices(a=[[0.05, 0.0], [1.0, 0.0]], b=[[10.0], [0.0]], states=["p", "phi"], span_m=None)(doc)
    code, out, err = cli(["check", write_doc(doc)])
    assert code == 0, err


# ---------------------------------------------------------------- file-level mistakes
def test_malformed_toml(cli, write_doc):
    path = write_doc(MINIMAL_SCENARIO.replace("[sensor]", "[sensor", 1))
    line = assert_one_line_error(*cli(["check", path]), str(path), "not valid TOML")
    lineno = MINIMAL_SCENARIO.splitlines().index("[sensor]") + 1
    assert f"line {lineno}" in line  # tomllib names where the broken header is


def test_duplicate_key_is_malformed_toml(cli, write_doc):
    path = write_doc(MINIMAL_SCENARIO.replace("latency_s = 0.04", "latency_s = 0.04\nlatency_s = 0.1"))
    assert_one_line_error(*cli(["run", path, "--no-files"]), str(path), "not valid TOML")


@pytest.mark.parametrize("literal", ["nan", "+inf", "-inf", "-nan"])
def test_nonfinite_toml_literals(cli, write_doc, literal):
    path = write_doc(MINIMAL_SCENARIO.replace("latency_s = 0.04", f"latency_s = {literal}"))
    assert_one_line_error(
        *cli(["check", path]), str(path), "[sensor] latency_s", "finite", "allowed: 0 ≤ latency_s ≤ 5"
    )


def test_missing_file(cli, tmp_path):
    path = tmp_path / "nope.toml"
    assert_one_line_error(*cli(["check", path]), str(path), "no such scenario file")
    assert_one_line_error(*cli(["run", path, "--no-files"]), str(path), "no such scenario file")


def test_folder_given_as_file(cli, tmp_path):
    assert_one_line_error(*cli(["check", tmp_path]), str(tmp_path), "cannot be read")


def test_not_utf8(cli, write_doc):
    path = write_doc(b'[aircraft]\nmodel = "\xff\xfe"\n')
    assert_one_line_error(*cli(["check", path]), str(path), "UTF-8")


def test_empty_file(cli, write_doc):
    path = write_doc("")
    assert_one_line_error(*cli(["check", path]), str(path), "aircraft", "required")


def test_check_reports_the_bad_file(cli, write_doc):
    good = write_doc(MINIMAL_SCENARIO, "good.toml")
    bad = write_doc(MINIMAL_SCENARIO.replace("kp = 0.4", "kp = -1"), "bad.toml")
    code, out, err = cli(["check", bad, good])
    first, summary = err.splitlines()
    assert_one_line_error(code, "", first + "\n", str(bad), "[controller] kp", "0 ≤ kp ≤ 100")
    assert summary == "rollrig: 1 of 2 files failed"
    assert f"{good}: ok" in out  # checked although an earlier file failed


# ---------------------------------------------------------------- command-line mistakes
@pytest.mark.parametrize(
    "extra, fragments",
    [
        (["--runs", "0"], ("--runs 0", "allowed: 1 ≤ runs ≤ 100000")),
        (["--runs", "1000000"], ("--runs 1000000", "allowed: 1 ≤ runs ≤ 100000")),
        (["--seed", "-1"], ("--seed -1", "0 ≤ seed ≤ 2^63")),
        (["--replay", "2"], ("--replay 2", "allowed: 0 ≤ N < 2")),
        (["--replay", "-1"], ("--replay -1", "allowed: 0 ≤ N < 2")),
        (["--runs", "3", "--replay", "3"], ("--replay 3", "0 ≤ N < 3")),
        (["--runs", "abc"], ("--runs", "invalid int value")),
        (["--format", "xml"], ("--format", "csv")),
        (["--bogus"], ("--bogus",)),
    ],
    ids=[
        "runs0",
        "runs-huge",
        "seed-neg",
        "replay-high",
        "replay-neg",
        "replay-with-runs",
        "runs-not-int",
        "format",
        "unknown-option",
    ],
)
def test_bad_options(cli, write_doc, extra, fragments):
    path = write_doc(MINIMAL_SCENARIO)
    assert_one_line_error(*cli(["run", path, "--no-files", *extra]), *fragments)


def test_no_command_and_no_file(cli):
    assert_one_line_error(*cli([]), "COMMAND")
    assert_one_line_error(*cli(["run"]), "FILE")


def test_out_exists_without_force(cli, write_doc, tmp_path):
    path = write_doc(MINIMAL_SCENARIO)
    out = tmp_path / "out"
    out.mkdir()
    (out / "keep.txt").write_text("mine")
    assert_one_line_error(*cli(["run", path, "--out", out]), str(out), "exists", "--force")
    assert sorted(p.name for p in out.iterdir()) == ["keep.txt"]


def test_out_is_a_file(cli, write_doc, tmp_path):
    path = write_doc(MINIMAL_SCENARIO)
    f = tmp_path / "afile"
    f.write_text("x")
    assert_one_line_error(*cli(["run", path, "--out", f, "--force"]), str(f), "not a folder")
    assert f.read_text() == "x"


def test_out_below_a_file(cli, write_doc, tmp_path):
    """``--out some_file/sub``: refused up front in one line, not an OSError traceback."""
    path = write_doc(MINIMAL_SCENARIO)
    f = tmp_path / "afile"
    f.write_text("x")
    assert_one_line_error(*cli(["run", path, "--out", f / "sub"]), str(f), "not a folder")
    assert f.read_text() == "x"


# ---------------------------------------------------------------- user code needs permission
CONTROLLER_MODULE = """
import pathlib
import numpy as np
pathlib.Path({marker!r}).write_text("imported")

class Prop:
    def __init__(self, gain=1.0):
        self.gain = gain
    def reset(self, batch):
        self.batch = batch
    def step(self, obs):
        return np.clip(self.gain * (obs.bank_cmd - obs.bank), -0.3, 0.3)
"""


@pytest.fixture
def user_controller(tmp_path, monkeypatch):
    """A user module on sys.path that leaves a marker file when imported."""
    name = "rollrig_test_user_ctl"
    marker = tmp_path / "imported.txt"
    (tmp_path / f"{name}.py").write_text(CONTROLLER_MODULE.format(marker=str(marker)))
    monkeypatch.syspath_prepend(str(tmp_path))
    monkeypatch.delitem(sys.modules, name, raising=False)
    yield name, marker
    sys.modules.pop(name, None)


def _custom_doc(module: str) -> dict:
    doc = minimal_doc()
    doc["controller"] = {
        "kind": "custom",
        "class": f"{module}:Prop",
        "rate_hz": 50.0,
        "params": {"gain": 0.5},
    }
    return doc


def test_custom_controller_refused_without_allow_code(cli, write_doc, user_controller, tmp_path):
    module, marker = user_controller
    path = write_doc(_custom_doc(module))
    out = tmp_path / "out"
    assert_one_line_error(*cli(["run", path, "--out", out]), str(path), "[controller] class", "--allow-code")
    assert module not in sys.modules and not marker.exists(), "user code was imported"
    assert not out.exists()


def test_custom_controller_runs_with_allow_code(cli, write_doc, user_controller):
    module, marker = user_controller
    path = write_doc(_custom_doc(module))
    code, out, err = cli(["run", path, "--no-files", "--allow-code", "--format", "json"])
    assert code == 0, err
    assert marker.exists()


def test_custom_controller_bad_params_and_missing_class(cli, write_doc, user_controller):
    module, _ = user_controller
    doc = _custom_doc(module)
    doc["controller"]["params"] = {"gian": 0.5}
    path = write_doc(doc, "params.toml")
    assert_one_line_error(
        *cli(["run", path, "--no-files", "--allow-code"]), str(path), "[controller.params]", "gian"
    )
    doc = _custom_doc(module)
    doc["controller"]["class"] = f"{module}:Nope"
    path = write_doc(doc, "nope.toml")
    assert_one_line_error(
        *cli(["run", path, "--no-files", "--allow-code"]),
        str(path),
        "[controller] class",
        "cannot be imported",
    )


# ---------------------------------------------------------------- no half-written folders
def _leftovers(folder: Path) -> list[str]:
    return sorted(p.name for p in folder.iterdir() if ".partial-" in p.name or ".old-" in p.name)


def test_load_failure_writes_nothing(cli, write_doc, tmp_path):
    path = write_doc(MINIMAL_SCENARIO.replace("latency_s = 0.04", "latency_s = -1"))
    out = tmp_path / "runs" / "out"
    assert_one_line_error(*cli(["run", path, "--out", out, "--plot"]), "[sensor] latency_s")
    assert not out.exists()
    assert not out.parent.exists() or _leftovers(out.parent) == []


def _failing_writer(exc: BaseException):
    def write(folder, outcome, **kwargs):
        (folder / "manifest.json").write_text("{}")  # something half written
        raise exc

    return write


@pytest.mark.parametrize(
    "exc, code",
    [(UserInputError("disk quota: allowed: less"), 2), (KeyboardInterrupt(), 130)],
    ids=["user-error", "ctrl-c"],
)
def test_failure_while_writing_leaves_no_folder(cli, write_doc, tmp_path, monkeypatch, exc, code):
    import rollrig.sim.report.run_files as run_files

    monkeypatch.setattr(run_files, "write_run_files", _failing_writer(exc))
    path = write_doc(MINIMAL_SCENARIO)
    out = tmp_path / "out"
    got, _, err = cli(["run", path, "--out", out])
    assert got == code and err.count("\n") == 1 and "Traceback" not in err
    assert not out.exists()
    assert _leftovers(tmp_path) == []


def test_crash_while_plotting_leaves_no_folder(write_doc, tmp_path, monkeypatch):
    """Even an unexpected exception (a bug, so it propagates) cleans the temp folder."""
    import rollrig.sim.report.plots as plots
    from rollrig.sim.cli.main import main

    def boom(*a, **k):
        raise RuntimeError("plotting bug")

    monkeypatch.setattr(plots, "plot_aileron", boom)
    path = write_doc(MINIMAL_SCENARIO)
    out = tmp_path / "out"
    with pytest.raises(RuntimeError, match="plotting bug"):
        main(["run", str(path), "--out", str(out), "--plot", "--format", "csv"])
    assert not out.exists()
    assert _leftovers(tmp_path) == []


def test_failed_forced_rewrite_keeps_old_folder(cli, write_doc, tmp_path, monkeypatch):
    import rollrig.sim.report.run_files as run_files

    path = write_doc(MINIMAL_SCENARIO)
    out = tmp_path / "out"
    out.mkdir()
    (out / "old.txt").write_text("previous result")
    monkeypatch.setattr(run_files, "write_run_files", _failing_writer(UserInputError("x: allowed: y")))
    code, _, _ = cli(["run", path, "--out", out, "--force"])
    assert code == 2
    assert (out / "old.txt").read_text() == "previous result"
    assert _leftovers(tmp_path) == []
