"""The ``[tune]`` section: what to tune, over which degradations, judged how.

.. code-block:: toml

    [tune]
    gains = ["kp", "ki_per_s", "kd_s"]  # PID gains searched (others stay as in [controller])
    seeds = 3                 # seeds per degradation case (common random numbers)
    lhs_cases = 8             # Latin-hypercube points inside the ranges
    corners = "auto"          # "all" (2^k), "extremes" (all-low, all-high), "none";
                              # auto: all for k ≤ 4 axes, else extremes
    aggregate = "cvar"        # mean | worst | cvar  (over the cases' seed-mean scores)
    cvar_fraction = 0.25      # tail share for cvar
    population = 16           # candidates per generation (≥ 5)
    generations = 12          # differential-evolution generations (the budget)
    seed = 1                  # search seed (DE, Latin hypercube)
    held_back_cases = 8       # validation cases (off-grid, never searched)
    held_back_seeds = 3       # ... and their seeds (other seed indices)
    chunk_runs = 4096         # largest batch simulated at once

    [tune.bounds]             # search box per gain (defaults: see DEFAULT_BOUNDS_RULE)
    kp = [0.05, 2.0]

    [tune.degrade]            # ranges [lo, hi] or lists { values = [...] }
    latency_s = [0.05, 0.20]
    frame_rate_hz = { values = [10, 15] }
    noise_deg = [0.2, 1.0]
    loss_rate = [0.0, 0.2]

    [tune.weights]            # score weights (defaults: DEFAULT_WEIGHTS)
    itae = 1.0
    overshoot = 0.5
    settling = 0.5
    aileron = 0.25

    [tune.constraints]
    gain_margin_db = 6.0      # MIL-F-9490D §3.1.3.6
    phase_margin_deg = 45.0   # MIL-F-9490D §3.1.3.6
    delay_margin_multiple = 1.0   # delay margin ≥ this × worst-case camera delay
    min_pass_rate = 0.9       # share of all runs meeting every [criteria] limit
    bank_limit = true         # no run may exceed [criteria] bank_limit_deg

Every key has a default; the section itself is optional (a file without one
tunes the three PID gains over ±50 % of its camera's latency and noise).
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np

from ..errors import ScenarioError, UserInputError
from ..scenario import Scenario, parse_scenario
from ..section import Section, read_toml_file

__all__ = [
    "Axis",
    "TuneSpec",
    "AXES",
    "GAINS",
    "DEFAULT_WEIGHTS",
    "load_tuning",
    "parse_tune",
    "with_overrides",
]

#: Degradation axes: file key -> (lowest, highest) allowed value, and what it changes.
AXES: dict[str, tuple[float, float, str]] = {
    "latency_s": (0.0, 5.0, "camera processing latency (s)"),
    "frame_rate_hz": (0.1, 1000.0, "camera frame rate (Hz)"),
    "noise_deg": (0.0, 30.0, "white reading noise, std (deg)"),
    "quantization_deg": (0.0, 30.0, "reading rounding step (deg)"),
    "bias_deg": (-45.0, 45.0, "mount bias (deg)"),
    "scale": (0.5, 2.0, "reading scale factor (1)"),
    "loss_rate": (0.0, 0.9, "share of frames lost (bursty if [sensor.bursts] or burst_frames)"),
    "burst_frames": (1.0, 1000.0, "mean length of a run of lost frames (frames)"),
    "turbulence_scale": (0.0, 10.0, "multiplier on the Dryden turbulence σ (1)"),
}

#: PID gains the tuner can search, with their largest allowed value ([controller] ranges).
GAINS: dict[str, float] = {"kp": 100.0, "ki_per_s": 100.0, "kd_s": 100.0}

#: Score weights when the file gives none. Each term is normalised by the starting
#: gains' value on the nominal case, so the start scores about 1 there.
DEFAULT_WEIGHTS: dict[str, float] = {"itae": 1.0, "overshoot": 0.5, "settling": 0.5, "aileron": 0.25}
WEIGHT_KEYS = ("itae", "overshoot", "settling", "aileron", "rms_error")
AGGREGATES = ("mean", "worst", "cvar")


@dataclass(frozen=True)
class Axis:
    """One degradation axis.

    Attributes
    ----------
    name : str
        File key (unit in the name), one of :data:`AXES`.
    lo, hi : float
        Range in file units (``lo < hi``), or the smallest and largest listed value.
    values : tuple of float or None
        Listed values (a discrete axis), or ``None`` for a continuous range.
    """

    name: str
    lo: float
    hi: float
    values: tuple[float, ...] | None = None

    def from_unit(self, u: np.ndarray) -> np.ndarray:
        """Map points of [0, 1) onto the axis (a listed axis picks a value)."""
        u = np.asarray(u, float)
        if self.values is None:
            return self.lo + u * (self.hi - self.lo)
        vals = np.asarray(self.values)
        return vals[np.minimum((u * vals.size).astype(int), vals.size - 1)]


@dataclass(frozen=True)
class Constraints:
    """Constraint thresholds (see module docstring)."""

    gain_margin_db: float = 6.0
    phase_margin_deg: float = 45.0
    delay_margin_multiple: float = 1.0
    min_pass_rate: float = 0.9
    bank_limit: bool = True


@dataclass(frozen=True)
class TuneSpec:
    """A validated ``[tune]`` section (file units for the degradation axes)."""

    file: str
    gains: tuple[str, ...]
    bounds: dict[str, tuple[float, float]]
    axes: tuple[Axis, ...]
    seeds: int = 3
    lhs_cases: int = 8
    corners: str = "auto"
    aggregate: str = "cvar"
    cvar_fraction: float = 0.25
    population: int = 16
    generations: int = 12
    seed: int = 1
    held_back_cases: int = 8
    held_back_seeds: int = 3
    chunk_runs: int = 4096
    weights: dict[str, float] = field(default_factory=lambda: dict(DEFAULT_WEIGHTS))
    weights_given: bool = False
    constraints: Constraints = field(default_factory=Constraints)


def load_tuning(path: str | Path) -> tuple[Scenario, TuneSpec, str]:
    """Read a scenario file with an optional ``[tune]`` section.

    Returns
    -------
    scenario, spec, text
        The scenario (without the ``[tune]`` section), its tuning spec and
        the file's text (for writing the tuned file back).
    """
    p = Path(path)
    raw, text, doc = read_toml_file(p, "scenario file")
    tune = doc.pop("tune", {})
    sc = parse_scenario(doc, file=str(p), sha256=hashlib.sha256(raw).hexdigest())
    return sc, parse_tune(tune, sc, file=str(p)), text


def _default_axes(sc: Scenario) -> tuple[Axis, ...]:
    lat = float(np.max(sc.camera.latency_s))
    noise = float(np.degrees(sc.camera.noise_rad))
    axes = []
    if lat > 0:
        axes.append(Axis("latency_s", 0.5 * lat, 1.5 * lat))
    if noise > 0:
        axes.append(Axis("noise_deg", 0.5 * noise, 1.5 * noise))
    return tuple(axes)


def parse_tune(table: dict, sc: Scenario, *, file: str) -> TuneSpec:
    """Validate a ``[tune]`` table against the scenario it tunes."""
    sec = Section(table, file=file, path="tune")
    if sc.controller.kind != "pid" or sc.controller.pid is None:
        raise ScenarioError(
            f'{file}: [controller] kind = "{sc.controller.kind}" has no gains the tuner knows; allowed: "pid"'
        )
    gains_raw = sec._get("gains", list(GAINS))  # a list of names: no typed getter for it
    if not isinstance(gains_raw, list) or not gains_raw or not all(isinstance(g, str) for g in gains_raw):
        raise sec.error("gains", f"must be a non-empty list of gain names; allowed: {', '.join(GAINS)}")
    for g in gains_raw:
        if g not in GAINS:
            raise sec.error(
                "gains", f"names {g!r}, which the PID controller does not have; allowed: {', '.join(GAINS)}"
            )
    if len(set(gains_raw)) != len(gains_raw):
        raise sec.error("gains", "names a gain twice; allowed: each gain once")
    gains = tuple(gains_raw)

    bounds = {}
    b = sec.sub("bounds")
    pid = sc.controller.pid
    start = {"kp": pid.kp, "ki_per_s": pid.ki_per_s, "kd_s": pid.kd_s}
    from .design_rule import roll_design_rule

    rule = roll_design_rule(sc)
    rule_gain = {"kp": rule.kp, "kd_s": rule.kd_s} if rule is not None else {}
    for g in GAINS:
        if b is not None and b.has(g):
            if g not in gains:
                raise b.error(g, f"bounds a gain that is not tuned; allowed: one of gains = {list(gains)}")
            lo, hi = _pair(b, g, 0.0, GAINS[g])
        else:
            floor = {"kp": 1.0, "ki_per_s": 0.5, "kd_s": 0.2}[g]
            lo, hi = 0.0, min(GAINS[g], max(3.0 * start[g], 1.5 * rule_gain.get(g, 0.0), floor))
        bounds[g] = (lo, hi)
    if b is not None:
        b.finish()

    axes = []
    d = sec.sub("degrade")
    if d is not None:
        for name, (lo_ok, hi_ok, _) in AXES.items():
            if not d.has(name):
                continue
            value = d._get(name, None)
            if isinstance(value, dict):
                lst = Section(value, file=file, path=f"tune.degrade.{name}")
                vals = lst.array("values", shape=(None,), lo=lo_ok, hi=hi_ok)
                lst.finish()
                if vals.size == 0:
                    raise lst.error("values", "is empty; allowed: one or more values")
                vals = np.unique(vals)
                axes.append(Axis(name, float(vals[0]), float(vals[-1]), tuple(vals.tolist())))
            else:
                lo, hi = _pair(d, name, lo_ok, hi_ok)
                axes.append(Axis(name, lo, hi))
        d.finish()
        if not axes:
            raise ScenarioError(f"{file}: [tune.degrade] names no axis; allowed keys: {', '.join(AXES)}")
    else:
        axes = list(_default_axes(sc))
    _check_axes(axes, sc, file)

    w = sec.sub("weights")
    weights = dict(DEFAULT_WEIGHTS)
    given = w is not None
    if w is not None:
        weights = {k: w.number(k, 0.0, lo=0.0, hi=1000.0) for k in WEIGHT_KEYS}
        w.finish()
        if not any(v > 0 for v in weights.values()):
            raise w.error("itae", f"all weights are 0; allowed: at least one of {', '.join(WEIGHT_KEYS)} > 0")
    c = sec.sub("constraints")
    cons = Constraints()
    if c is not None:
        cons = Constraints(
            gain_margin_db=c.number("gain_margin_db", 6.0, lo=0.0, hi=40.0),
            phase_margin_deg=c.number("phase_margin_deg", 45.0, lo=0.0, hi=90.0),
            delay_margin_multiple=c.number("delay_margin_multiple", 1.0, lo=0.0, hi=100.0),
            min_pass_rate=c.number("min_pass_rate", 0.9, lo=0.0, hi=1.0),
            bank_limit=c.boolean("bank_limit", True),
        )
        c.finish()
    spec = TuneSpec(
        file=file,
        gains=gains,
        bounds=bounds,
        axes=tuple(axes),
        seeds=sec.integer("seeds", 3, lo=1, hi=1000),
        lhs_cases=sec.integer("lhs_cases", 8, lo=0, hi=10_000),
        corners=sec.string("corners", "auto", choices=("auto", "all", "extremes", "none")),
        aggregate=sec.string("aggregate", "cvar", choices=AGGREGATES),
        cvar_fraction=sec.number("cvar_fraction", 0.25, lo=0.0, hi=1.0, lo_open=True),
        population=sec.integer("population", 16, lo=5, hi=10_000),
        generations=sec.integer("generations", 12, lo=1, hi=100_000),
        seed=sec.integer("seed", 1, lo=0, hi=2**63 - 1),
        held_back_cases=sec.integer("held_back_cases", 8, lo=1, hi=10_000),
        held_back_seeds=sec.integer("held_back_seeds", 3, lo=1, hi=1000),
        chunk_runs=sec.integer("chunk_runs", 4096, lo=1, hi=1_000_000),
        weights=weights,
        weights_given=given,
        constraints=cons,
    )
    sec.finish()
    return spec


def _pair(sec: Section, key: str, lo_ok: float, hi_ok: float) -> tuple[float, float]:
    """A ``[lo, hi]`` range with ``lo < hi``, both within the allowed limits."""
    arr = sec.array(key, shape=(2,), lo=lo_ok, hi=hi_ok)
    if not arr[0] < arr[1]:
        raise sec.error(
            key,
            f"= [{arr[0]:g}, {arr[1]:g}] is empty or inverted; allowed: [lo, hi] with "
            f"{lo_ok:g} ≤ lo < hi ≤ {hi_ok:g}",
        )
    return float(arr[0]), float(arr[1])


def _check_axes(axes: list[Axis], sc: Scenario, file: str) -> None:
    names = {a.name: a for a in axes}
    where = f"{file}: [tune.degrade]"
    fr = names.get("frame_rate_hz")
    if fr is not None and fr.hi > 1.0 / sc.run.base_step_s + 1e-9:
        raise ScenarioError(
            f"{where} frame_rate_hz reaches {fr.hi:g} Hz; allowed: ≤ {1.0 / sc.run.base_step_s:g} Hz "
            "(the base rate)"
        )
    if "turbulence_scale" in names and not any(hasattr(d, "params") for d in sc.disturbances):
        raise ScenarioError(
            f"{where} turbulence_scale: the scenario has no [disturbance.turbulence] to scale; "
            "allowed: only with turbulence"
        )
    loss = names.get("loss_rate")
    bursty = "burst_frames" in names or sc.camera.bursts is not None
    if loss is not None and not bursty and loss.hi >= 1.0:
        raise ScenarioError(f"{where} loss_rate reaches {loss.hi:g}; allowed: < 1")
    if bursty:
        max_loss = loss.hi if loss is not None else float(np.max(sc.camera.bursts.loss_rate))
        bf = names.get("burst_frames")
        min_burst = bf.lo if bf is not None else sc.camera.bursts.mean_burst_frames
        need = max_loss / (1.0 - max_loss)
        if min_burst < need:
            raise ScenarioError(
                f"{where} burst_frames: {min_burst:g} frames is too short for loss_rate {max_loss:g}; "
                f"allowed: burst_frames ≥ {need:.3g} (= π/(1 − π))"
            )


def with_overrides(spec: TuneSpec, **changes) -> TuneSpec:
    """The spec with command-line overrides applied (``None`` leaves a field as is).

    Raises
    ------
    UserInputError
        For a budget of zero or another value out of range.
    """
    limits = {
        "generations": (1, 100_000),
        "population": (5, 10_000),
        "seeds": (1, 1000),
        "seed": (0, 2**63 - 1),
        "lhs_cases": (0, 10_000),
    }
    out = {}
    for key, value in changes.items():
        if value is None:
            continue
        if key in limits:
            lo, hi = limits[key]
            if not lo <= value <= hi:
                opt = "--" + key.replace("_", "-")
                extra = " (a budget of zero searches nothing)" if value <= 0 else ""
                raise UserInputError(f"{opt} {value}: allowed: {lo} ≤ {key} ≤ {hi}{extra}")
        out[key] = value
    return replace(spec, **out) if out else spec
