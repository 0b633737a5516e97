"""Scenario parameters by dotted key: set them in a document, check them, and
know which can vary from run to run inside one batch.

Points whose scenarios differ only in numeric fields that the stepping core
takes per run (:data:`rollrig.sim.params.PER_RUN`) share one batch
(:func:`signature`, :func:`stack_per_run`).

A dotted key names a value of the scenario file: ``sensor.latency_s`` is
``latency_s`` in ``[sensor]``, ``sensor.bursts.loss_rate`` is ``loss_rate`` in
``[sensor.bursts]``. Values are set on the parsed TOML document (a dict) and
the document is validated again by :func:`rollrig.sim.scenario.parse_scenario`,
so a swept value gets the same range check and one-line error as a value
typed into the file.
"""

from __future__ import annotations

import copy
import dataclasses
import re
from collections.abc import Mapping
from dataclasses import replace
from typing import Any

import numpy as np
from rollrig.sim.errors import ScenarioError, UserInputError
from rollrig.sim.scenario import Scenario, parse_scenario

__all__ = [
    "NOT_SWEEPABLE",
    "set_dotted",
    "get_dotted",
    "check_key",
    "scenario_with",
    "signature",
    "stack_per_run",
]

#: Keys that are numbers in the file but must not be swept: the Monte Carlo
#: seed and run count define the common random numbers every point shares.
NOT_SWEEPABLE = {
    "run.seed": "the Monte Carlo seed is shared by every point (common random numbers); use --seed",
    "run.runs": "every point runs the same Monte Carlo set; use --runs",
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


_SKIP = frozenset({"path", "sha256", "title", "story"})
#: Per-run in the core but read as one value by the metrics (limits of the
#: servo): points differing there run in separate batches.
_SHARED_HERE = frozenset({("ActuatorSpec", "limit_rad"), ("ActuatorSpec", "rate_limit_rad_s")})


def _per_run_fields(obj) -> frozenset[str]:
    from rollrig.sim.params import PER_RUN

    cls = type(obj).__name__
    return frozenset(n for n in PER_RUN.get(cls, ()) if (cls, n) not in _SHARED_HERE)


def _is_num(v: Any) -> bool:
    return (isinstance(v, int | float | np.floating | np.integer) and not isinstance(v, bool)) or (
        isinstance(v, np.ndarray) and v.ndim == 0
    )


def signature(obj: Any) -> Any:
    """A hashable description of everything a batch must share.

    Numeric fields that the core takes per run (``rollrig.sim.params.PER_RUN``)
    are left out, so two points' scenarios with equal signatures can run as
    members of one batch. Scenarios whose controller is not the bundled PID
    (model-based or user controllers may read the scenario themselves) never
    share a batch with another point.
    """
    if isinstance(obj, Scenario) and obj.controller.kind != "pid":
        return ("own batch", id(obj))
    if obj is None or isinstance(obj, str | bool | int | float):
        return obj
    if isinstance(obj, np.ndarray):
        return ("array", obj.shape, obj.dtype.str, obj.tobytes())
    if dataclasses.is_dataclass(obj) and not isinstance(obj, type):
        per = _per_run_fields(obj)
        items = []
        for f in dataclasses.fields(obj):
            if f.name in _SKIP:
                continue
            v = getattr(obj, f.name)
            items.append((f.name, "per run" if f.name in per and _is_num(v) else signature(v)))
        return (type(obj).__name__, tuple(items))
    if isinstance(obj, tuple | list):
        return tuple(signature(o) for o in obj)
    if isinstance(obj, Mapping):
        return tuple(sorted((str(k), signature(v)) for k, v in obj.items()))
    return repr(obj)


def stack_per_run(scenarios: list[Scenario], runs: int) -> Scenario:
    """One scenario for a batch of points that share a :func:`signature`.

    Point ``i`` occupies batch members ``i·runs … (i+1)·runs − 1``: every
    per-run field on which the points differ becomes a ``(len(scenarios) ×
    runs,)`` array; every other field is the first scenario's (equal in all).
    """
    return _stack(scenarios, runs)


def _stack(objs: list, runs: int):
    first = objs[0]
    if dataclasses.is_dataclass(first) and not isinstance(first, type):
        per = _per_run_fields(first)
        changes = {}
        for f in dataclasses.fields(first):
            if f.name in _SKIP or not f.init:
                continue
            vals = [getattr(o, f.name) for o in objs]
            if f.name in per and _is_num(vals[0]):
                if any(v != vals[0] for v in vals[1:]):
                    changes[f.name] = np.repeat(np.asarray(vals, dtype=float), runs)
            else:
                new = _stack(vals, runs)
                if new is not vals[0]:
                    changes[f.name] = new
        return replace(first, **changes) if changes else first
    if (
        isinstance(first, tuple)
        and first
        and all(isinstance(o, tuple) and len(o) == len(first) for o in objs)
    ):
        items = tuple(_stack([o[i] for o in objs], runs) for i in range(len(first)))
        return items if any(a is not b for a, b in zip(items, first, strict=True)) else first
    return first
