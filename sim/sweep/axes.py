"""Sweep axes from ``--set KEY=SPEC`` and the designs that place points on them.

Specs
-----
``a:b:n``
    ``n`` evenly spaced values from ``a`` to ``b`` (both included).
``log:a:b:n``
    ``n`` values spaced evenly in ``log`` from ``a`` to ``b`` (``a, b > 0``).
``v1,v2,...``
    the listed values.
``v``
    one value (a fixed override shared by every point).

For a Latin-hypercube or random design a range needs no count (``a:b`` or
``log:a:b``; a count is ignored): the design draws ``--points`` values in it.
A list is sampled as a set of levels.

Designs
-------
``grid``
    every combination (the first axis varies slowest).
``lhs``
    Latin hypercube (``scipy.stats.qmc.LatinHypercube``, seeded): each axis's
    range is cut into ``points`` equal slices and every slice is used once.
``random``
    independent uniform draws (``scipy.stats.qmc`` scaling, seeded numpy
    generator).
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass

import numpy as np
from rollrig.sim.errors import UserInputError

__all__ = ["Axis", "parse_set", "design_points", "DESIGNS", "MAX_POINTS"]

DESIGNS = ("grid", "lhs", "random")
MAX_POINTS = 100_000
MAX_LEVELS = 10_000


@dataclass(frozen=True)
class Axis:
    """One swept key.

    Attributes
    ----------
    key : str
        Dotted scenario key (units in its name).
    kind : {"range", "log", "list"}
    values : tuple of float
        Grid values (range/log with a count, or the listed values).
    low, high : float
        Range ends (range/log); min/max of the values for a list.
    spec : str
        The text as given (recorded in the sweep definition).
    """

    key: str
    kind: str
    values: tuple[float, ...]
    low: float
    high: float
    spec: str

    def to_json(self) -> dict:
        return {"key": self.key, "kind": self.kind, "values": list(self.values), "spec": self.spec}


def _num(text: str, option: str) -> float:
    try:
        v = float(text)
    except ValueError:
        raise UserInputError(
            f"{option}: {text!r} is not a number; allowed: a:b:n, log:a:b:n or v1,v2,..."
        ) from None
    if not math.isfinite(v):
        raise UserInputError(f"{option}: {text!r} is not a finite number")
    return v


def _count(text: str, option: str) -> int:
    try:
        n = int(text)
    except ValueError:
        raise UserInputError(
            f"{option}: count {text!r} is not a whole number; allowed: 1 ≤ n ≤ {MAX_LEVELS}"
        ) from None
    if n < 1:
        raise UserInputError(f"{option}: empty range (count {n}); allowed: 1 ≤ n ≤ {MAX_LEVELS}")
    if n > MAX_LEVELS:
        raise UserInputError(f"{option}: count {n} too large; allowed: 1 ≤ n ≤ {MAX_LEVELS}")
    return n


def parse_set(text: str, *, need_count: bool = True) -> Axis:
    """Parse one ``KEY=SPEC`` option (see the module docstring).

    Parameters
    ----------
    text : str
        ``KEY=SPEC`` as typed.
    need_count : bool
        Whether a range must carry a count (grid design).
    """
    if "=" not in text:
        raise UserInputError(f"--set {text}: missing '='; allowed: KEY=a:b:n, KEY=log:a:b:n or KEY=v1,v2,...")
    key, spec = (s.strip() for s in text.split("=", 1))
    option = f"--set {key}={spec}"
    if not key:
        raise UserInputError(f"{option}: missing key; allowed: a dotted key such as sensor.latency_s")
    if not spec:
        raise UserInputError(f"{option}: empty range; allowed: a:b:n, log:a:b:n or v1,v2,...")
    if ":" in spec:
        parts = spec.split(":")
        log = parts[0].strip().lower() == "log"
        if log:
            parts = parts[1:]
        if len(parts) not in (2, 3):
            raise UserInputError(f"{option}: allowed: a:b:n, log:a:b:n (a:b without n for lhs/random)")
        a, b = _num(parts[0], option), _num(parts[1], option)
        if len(parts) == 2 and need_count:
            raise UserInputError(f"{option}: a grid range needs a count; allowed: a:b:n (n ≥ 1)")
        n = _count(parts[2], option) if len(parts) == 3 else 0
        if log and (a <= 0 or b <= 0):
            raise UserInputError(f"{option}: a log range needs positive ends; allowed: 0 < a, 0 < b")
        if n >= 2 and a == b:
            raise UserInputError(
                f"{option}: empty range (both ends {a:g}); allowed: a ≠ b, or a single value"
            )
        if n == 0:
            values: tuple[float, ...] = ()
        elif n == 1:
            values = (a,)
        else:
            values = tuple(float(v) for v in (np.geomspace(a, b, n) if log else np.linspace(a, b, n)))
        return Axis(key, "log" if log else "range", values, min(a, b), max(a, b), spec)
    items = [s.strip() for s in spec.split(",")]
    if not any(items):
        raise UserInputError(f"{option}: empty list; allowed: v1,v2,...")
    if not all(items):
        raise UserInputError(f"{option}: an empty entry in the list; allowed: v1,v2,...")
    vals = tuple(_num(s, option) for s in items)
    if len(set(vals)) != len(vals):
        raise UserInputError(f"{option}: a value is listed twice; allowed: distinct values")
    return Axis(key, "list", vals, min(vals), max(vals), spec)


def design_points(axes: list[Axis], design: str, n_points: int | None, seed: int) -> np.ndarray:
    """Point coordinates ``(n_points, n_axes)`` of a design.

    Parameters
    ----------
    axes : list of Axis
    design : {"grid", "lhs", "random"}
    n_points : int or None
        Number of points (lhs/random; ignored for grid).
    seed : int
        Seed of the lhs/random draws.
    """
    if design not in DESIGNS:
        raise UserInputError(f"--design {design}: allowed: {', '.join(DESIGNS)}")
    if design == "grid":
        total = math.prod(len(a.values) for a in axes)
        if total > MAX_POINTS:
            raise UserInputError(f"the grid has {total} points; allowed: at most {MAX_POINTS}")
        return np.array(list(itertools.product(*(a.values for a in axes))), dtype=float).reshape(
            total, len(axes)
        )
    if n_points is None or not 1 <= n_points <= MAX_POINTS:
        raise UserInputError(f"--points {n_points}: a {design} design needs 1 ≤ --points ≤ {MAX_POINTS}")
    from scipy.stats import qmc

    d = len(axes)
    if design == "lhs":
        u = qmc.LatinHypercube(d=d, rng=np.random.default_rng(seed)).random(n_points)
    else:
        u = np.random.default_rng(seed).random((n_points, d))
    out = np.empty_like(u)
    for j, ax in enumerate(axes):
        if ax.kind == "list":
            levels = np.asarray(ax.values)
            out[:, j] = levels[np.minimum((u[:, j] * levels.size).astype(int), levels.size - 1)]
        elif ax.kind == "log":
            out[:, j] = (
                np.exp(qmc.scale(u[:, j : j + 1], [math.log(ax.low)], [math.log(ax.high)])[:, 0])
                if ax.low < ax.high
                else ax.low
            )
        else:
            out[:, j] = qmc.scale(u[:, j : j + 1], [ax.low], [ax.high])[:, 0] if ax.low < ax.high else ax.low
    return out
