"""Scenario parameters by dotted key: set them in a document, check them, and
know which can vary from run to run inside one batch.

A dotted key names a value of the scenario file: ``sensor.latency_s`` is
``latency_s`` in ``[sensor]``, ``sensor.bursts.loss_rate`` is ``loss_rate`` in
``[sensor.bursts]``. Values are set on the parsed TOML document (a dict) and
the document is validated again by :func:`rollrig.sim.scenario.parse_scenario`,
so a swept value gets the same range check and one-line error as a value
typed into the file.
"""

from __future__ import annotations

import copy
import re
from collections.abc import Iterable, Mapping
from dataclasses import replace
from typing import Any

import numpy as np
from rollrig.sim.errors import ScenarioError, UserInputError
from rollrig.sim.scenario import Scenario, parse_scenario

__all__ = [
    "NOT_SWEEPABLE",
    "PER_RUN_KEYS",
    "set_dotted",
    "get_dotted",
    "check_key",
    "scenario_with",
    "is_per_run",
    "stack_per_run",
]

#: Keys that are numbers in the file but must not be swept: the Monte Carlo
#: seed and run count define the common random numbers every point shares.
NOT_SWEEPABLE = {
    "run.seed": "the Monte Carlo seed is shared by every point (common random numbers); use --seed",
    "run.runs": "every point runs the same Monte Carlo set; use --runs",
}


def _camera(field: str):
    def get(sc: Scenario):
        return getattr(sc.camera, field)

    def put(sc: Scenario, value: np.ndarray) -> Scenario:
        return replace(sc, camera=replace(sc.camera, **{field: value}))

    return get, put


def _bursts_loss():
    def get(sc: Scenario):
        return None if sc.camera.bursts is None else sc.camera.bursts.loss_rate

    def put(sc: Scenario, value: np.ndarray) -> Scenario:
        b = replace(sc.camera.bursts, loss_rate=value)
        return replace(sc, camera=replace(sc.camera, bursts=b))

    return get, put


def _pid(field: str):
    def get(sc: Scenario):
        return None if sc.controller.pid is None else getattr(sc.controller.pid, field)

    def put(sc: Scenario, value: np.ndarray) -> Scenario:
        pid = replace(sc.controller.pid, **{field: value})
        return replace(sc, controller=replace(sc.controller, pid=pid))

    return get, put


#: Dotted keys whose value the stepping core takes per run, as a ``(batch,)``
#: array: points differing only in these share one batch. Each maps to a
#: getter and a setter of the parsed :class:`Scenario` (SI values).
PER_RUN_KEYS = {
    "sensor.latency_s": _camera("latency_s"),
    "sensor.dropout_prob": _camera("dropout_prob"),
    "sensor.bursts.loss_rate": _bursts_loss(),
    "controller.kp": _pid("kp"),
    "controller.ki_per_s": _pid("ki_per_s"),
    "controller.kd_s": _pid("kd_s"),
}


def get_dotted(doc: Mapping[str, Any], key: str) -> Any:
    """The value at ``key`` in a document, or ``None`` when absent."""
    node: Any = doc
    for part in key.split("."):
        if not isinstance(node, Mapping) or part not in node:
            return None
        node = node[part]
    return node


def set_dotted(doc: dict, key: str, value: Any) -> dict:
    """A deep copy of ``doc`` with ``key`` set to ``value`` (tables created as needed)."""
    out = copy.deepcopy(doc)
    node = out
    parts = key.split(".")
    for part in parts[:-1]:
        nxt = node.get(part)
        if nxt is None:
            nxt = node[part] = {}
        elif not isinstance(nxt, dict):
            raise UserInputError(
                f"--set {key}: {part!r} is a value, not a table; allowed: a dotted key to a value"
            )
        node = nxt
    node[parts[-1]] = value
    return out


_UNKNOWN = re.compile(
    r"\[(?P<path>[^\]]*)\] (?P<key>\S+): is not a known key(?:; did you mean '(?P<hint>[^']+)'\?)?"
)


def _dotted_hint(key: str, message: str) -> str | None:
    """The closest valid dotted key, read from the validator's "did you mean" message."""
    m = _UNKNOWN.search(message)
    if m is None or m.group("hint") is None:
        return None
    path = "" if m.group("path") == "top level" else m.group("path")
    parts = key.split(".")
    depth = 0 if not path else len(path.split("."))
    if depth >= len(parts):
        return None
    parts[depth] = m.group("hint")
    return ".".join(parts)


def scenario_with(doc: dict, values: Mapping[str, float], *, file: str, sha256: str = "") -> Scenario:
    """Parse ``doc`` with the dotted keys of ``values`` set (validated)."""
    d = doc
    for key, v in values.items():
        d = set_dotted(d, key, v)
    return parse_scenario(d, file=file, sha256=sha256)


def check_key(doc: dict, key: str, probe: float, *, file: str) -> None:
    """Check that ``key`` is a sweepable number of the scenario.

    Raises
    ------
    UserInputError
        One line: an unknown key (with the closest valid key), a key that is
        not a number (a table, a string, a list) or a key reserved for the
        Monte Carlo set.
    """
    if not re.fullmatch(r"[A-Za-z0-9_\-]+(\.[A-Za-z0-9_\-]+)+", key):
        raise UserInputError(f"--set {key}: not a dotted key; allowed: section.key, e.g. sensor.latency_s")
    if key in NOT_SWEEPABLE:
        raise UserInputError(f"--set {key}: not sweepable: {NOT_SWEEPABLE[key]}")
    current = get_dotted(doc, key)
    if current is not None and (isinstance(current, bool) or not isinstance(current, int | float)):
        kind = "a table" if isinstance(current, dict) else type(current).__name__
        raise UserInputError(
            f"--set {key}: not sweepable: it is {kind} in {file}; allowed: keys holding a number"
        )
    try:
        scenario_with(doc, {key: probe}, file=file)
    except ScenarioError as exc:
        msg = str(exc)
        hint = _dotted_hint(key, msg)
        if "is not a known key" in msg:
            near = f"; closest valid key: {hint}" if hint else ""
            raise UserInputError(f"--set {key}: unknown key{near}") from None
        if re.search(r"must be (a string|true or false|an? (array|table|list))", msg):
            raise UserInputError(f"--set {key}: not sweepable: {msg}") from None
        raise UserInputError(f"--set {key}={probe:g}: {msg}") from None


def is_per_run(keys: Iterable[str]) -> dict[str, bool]:
    """Whether each key can differ between runs of one batch."""
    return {k: k in PER_RUN_KEYS for k in keys}


def stack_per_run(scenarios: list[Scenario], keys: Iterable[str], runs: int) -> Scenario:
    """One scenario whose per-run keys hold ``(len(scenarios) × runs,)`` arrays.

    Point ``i`` occupies batch members ``i·runs … (i+1)·runs − 1``. Every
    other field is taken from the first scenario (the caller groups points so
    that they agree there).
    """
    out = scenarios[0]
    for key in keys:
        get, put = PER_RUN_KEYS[key]
        vals = [get(sc) for sc in scenarios]
        if any(v is None for v in vals):
            continue
        out = put(out, np.repeat(np.asarray(vals, dtype=float), runs))
    return out
