"""A sweep's plan: its definition (what is recorded and compared on resume),
its points, and how the points are cut into chunks (batches)."""

from __future__ import annotations

import hashlib
import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
from rollrig.sim.errors import ScenarioError, UserInputError

from .axes import Axis, design_points, parse_set
from .chunk import JUDGES
from .keys import check_key, scenario_with, set_dotted, signature

__all__ = ["SweepPlan", "plan_sweep", "scenario_hash", "load_doc", "DEFAULT_CHUNK_RUNS"]

#: Batch members per chunk (points × runs); bounds a chunk's memory (a full
#: trace of 2000 runs × 60 s at 100 Hz is a few hundred MB).
DEFAULT_CHUNK_RUNS = 2000


def scenario_hash(doc: dict, file: str = "<scenario>") -> str:
    """Canonical hash of a scenario document (:func:`rollrig.sim.scenario_writer.canonical_hash`).

    It identifies what is simulated: comments, layout, key order or an
    explicit default do not change it.
    """
    from rollrig.sim.scenario import parse_scenario
    from rollrig.sim.scenario_writer import canonical_hash

    return canonical_hash(parse_scenario(doc, file=file))


@dataclass(frozen=True)
class SweepPlan:
    """Everything needed to run (or resume) a sweep.

    Attributes
    ----------
    file : str
        Scenario path (as given).
    doc : dict
        Scenario document with ``--runs``/``--seed`` applied.
    axes : list of Axis
    coords : (n_points, n_axes) float
        Swept values of every point (point id = row).
    definition : dict
        What makes two sweeps the same (recorded in ``sweep.json``).
    chunks : list of dict
        Payloads for :func:`rollrig.sim.sweep.chunk.run_chunk`, all points.
    """

    file: str
    doc: dict
    axes: list[Axis]
    coords: np.ndarray
    definition: dict
    chunks: list[dict] = field(default_factory=list)

    @property
    def keys(self) -> list[str]:
        return [a.key for a in self.axes]

    @property
    def n_points(self) -> int:
        return int(self.coords.shape[0])

    def chunks_without(self, done: set[int]) -> list[dict]:
        """The chunks still to run, finished points removed (empty chunks dropped)."""
        out = []
        for c in self.chunks:
            pts = [p for p in c["points"] if p[0] not in done]
            if pts:
                out.append(dict(c, points=pts))
        return out


def plan_sweep(
    file: str,
    doc: dict,
    sets: list[str],
    *,
    design: str = "grid",
    n_points: int | None = None,
    design_seed: int = 0,
    runs: int | None = None,
    seed: int | None = None,
    judge: str = "criteria",
    excitation_deg: float = 1.0,
    window_s: float = 8.0,
    base_step_s: float = 0.005,
    chunk_runs: int = DEFAULT_CHUNK_RUNS,
    allow_code: bool = False,
) -> SweepPlan:
    """Check the options against the scenario and lay out points and chunks.

    Every point's scenario is validated here, before anything runs, so a
    swept value out of range is a one-line error and not a failure half way.
    """
    if not sets:
        raise UserInputError("no --set KEY=SPEC given; allowed: e.g. --set sensor.latency_s=0:0.3:13")
    if judge not in JUDGES:
        raise UserInputError(f"--judge {judge}: allowed: {', '.join(JUDGES)}")
    if chunk_runs < 1:
        raise UserInputError(f"--chunk-runs {chunk_runs}: allowed: ≥ 1")
    if judge == "stability":
        if not 0.0 < excitation_deg <= 30.0:
            raise UserInputError(f"--excitation-deg {excitation_deg:g}: allowed: 0 < value ≤ 30")
        if not 0.1 <= window_s <= 600.0:
            raise UserInputError(f"--window-s {window_s:g}: allowed: 0.1 ≤ value ≤ 600")
    axes = [parse_set(s, need_count=design == "grid") for s in sets]
    seen = set()
    for a in axes:
        if a.key in seen:
            raise UserInputError(f"--set {a.key}: given twice; allowed: one --set per key")
        seen.add(a.key)
    scenario_with(doc, {}, file=file)  # the file itself is valid (its own one-line error)
    base = doc
    if runs is not None:
        base = set_dotted(base, "run.runs", int(runs))
    if seed is not None:
        base = set_dotted(base, "run.seed", int(seed))
    try:
        scenario_with(base, {}, file=file)
    except ScenarioError:
        if runs is not None:
            raise UserInputError(f"--runs {runs}: allowed: 1 ≤ runs ≤ 100000") from None
        raise UserInputError(f"--seed {seed}: allowed: seed ≥ 0") from None
    for a in axes:
        check_key(base, a.key, a.values[0] if a.values else a.low, file=file)
    coords = design_points(axes, design, n_points, design_seed)
    keys = [a.key for a in axes]
    groups: dict = {}  # points whose scenarios may share a batch
    for i, row in enumerate(coords):
        try:
            sc = scenario_with(base, dict(zip(keys, row.tolist(), strict=True)), file=file)
        except ScenarioError as exc:
            vals = ", ".join(f"{k}={v:g}" for k, v in zip(keys, row, strict=True))
            raise UserInputError(f"sweep point {i} ({vals}): {exc}") from None
        groups.setdefault(signature(sc), []).append(i)

    definition = {
        "format": "rollrig-sweep/1",
        "scenario_sha256_canonical": scenario_hash(doc, file),
        "axes": [a.to_json() for a in axes],
        "design": design,
        "points": int(coords.shape[0]),
        "design_seed": int(design_seed),
        "runs": runs,
        "seed": seed,
        "judge": judge,
        "stability": (
            {"excitation_deg": excitation_deg, "window_s": window_s, "base_step_s": base_step_s}
            if judge == "stability"
            else None
        ),
        "coords_sha256": hashlib.sha256(np.ascontiguousarray(coords).tobytes()).hexdigest(),
    }
    plan = SweepPlan(file=file, doc=base, axes=axes, coords=coords, definition=definition)
    runs_per_point = scenario_with(base, {}, file=file).run.runs
    chunks = _chunks(plan, list(groups.values()), runs_per_point, chunk_runs, allow_code)
    return SweepPlan(file=file, doc=base, axes=axes, coords=coords, definition=definition, chunks=chunks)


def _chunks(
    plan: SweepPlan, groups: list[list[int]], runs: int, chunk_runs: int, allow_code: bool
) -> list[dict]:
    """Cut each group of points that may share a batch into chunks of at most ``chunk_runs`` members."""
    keys = plan.keys
    per_chunk = max(1, chunk_runs // runs)
    d = plan.definition
    common: dict[str, Any] = {
        "doc": plan.doc,
        "file": plan.file,
        "keys": keys,
        "judge": d["judge"],
        "stability": d["stability"],
        "allow_code": allow_code,
    }
    out = []
    for members in groups:
        n = math.ceil(len(members) / per_chunk)
        for part in np.array_split(np.asarray(members), n):
            pts = [[int(i), plan.coords[i].tolist()] for i in part]
            out.append(dict(common, points=pts))
    return out


def load_doc(path: str) -> tuple[dict, str]:
    """Scenario document and text of a file (one-line errors as ``load_scenario``)."""
    import tomllib

    p = Path(path)
    try:
        text = p.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise ScenarioError(f"{p}: no such scenario file") from None
    except UnicodeDecodeError:
        raise ScenarioError(f"{p}: is not UTF-8 text") from None
    except OSError as exc:
        raise ScenarioError(f"{p}: cannot be read ({exc.strerror})") from None
    try:
        return tomllib.loads(text), text
    except tomllib.TOMLDecodeError as exc:
        raise ScenarioError(f"{p}: is not valid TOML: {exc}") from None
