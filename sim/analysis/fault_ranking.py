"""Which camera fault hurts the loop most?

For each fault the scenario's camera (and gyro) actually has — latency, slow
frames, jitter, exposure smear, noise, wandering error, bias, scale error,
quantisation or class-based reading, wild readings, lost frames, gyro errors —
the scenario's Monte Carlo set is run three ways, always with the same seed:

* with every fault (the scenario as written),
* with that one fault removed,
* with that fault alone (every other one removed).

Each random stage draws from its own per-run stream, so removing one fault
leaves every other fault's draws — and the turbulence — unchanged (common
random numbers). The per-run difference of a metric between "every fault" and
"this fault removed" therefore isolates what the fault costs, and its mean
comes with a paired Student-t interval (:func:`rollrig.sim.stats.paired_difference`,
shared with ``rollrig compare``); the table is built in
:mod:`rollrig.sim.report.fault_table`. Faults are ranked by that cost;
where "removed" and "alone" disagree, faults interact.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
from rollrig.sensors.camera import CameraConfig

from ..metrics import METRIC_INFO
from ..runner import run_scenario
from ..scenario import Scenario
from ..stats import MetricSummary, paired_difference, summarize

__all__ = ["Fault", "FaultEffect", "FaultRanking", "active_faults", "rank_faults"]

_DEG = 180.0 / math.pi


@dataclass(frozen=True)
class Fault:
    """One camera or gyro fault: how to describe it and how to remove it."""

    name: str
    setting: str
    remove: Callable[[Scenario], Scenario]


def _camera(sc: Scenario, **changes) -> Scenario:
    return dataclasses.replace(sc, camera=dataclasses.replace(sc.camera, **changes))


def _ms(x) -> str:
    return f"{1000 * float(np.max(x)):.3g} ms"


def active_faults(sc: Scenario) -> list[Fault]:
    """The faults present in a scenario's sensor section, with their removal."""
    c: CameraConfig = sc.camera
    base_rate = 1.0 / sc.run.base_step_s
    out: list[Fault] = []
    add = lambda name, setting, **ch: out.append(Fault(name, setting, lambda s: _camera(s, **ch)))  # noqa: E731
    lat = float(np.max(c.latency_s))
    if lat > 0 or c.latency_jitter_s > 0:
        extra = f" + random {_ms(c.latency_jitter_s)}" if c.latency_jitter_s > 0 else ""
        add("processing latency", f"{_ms(lat)}{extra}", latency_s=0.0, latency_jitter_s=0.0)
    if c.frame_rate_hz < base_rate - 1e-9:
        add("frame rate", f"{c.frame_rate_hz:g} Hz (removed: every base step)", frame_rate_hz=base_rate)
    if c.jitter_s > 0:
        add("capture jitter", f"{_ms(c.jitter_s)} std", jitter_s=0.0)
    if c.exposure_s > 0:
        add("exposure smear", _ms(c.exposure_s), exposure_s=0.0)
    if c.noise_rad > 0:
        add("white noise", f"{c.noise_rad * _DEG:.3g}° std", noise_rad=0.0)
    if c.wander_rad > 0:
        add("wandering error", f"{c.wander_rad * _DEG:.3g}° std, {c.wander_time_s:g} s", wander_rad=0.0)
    if c.bias_rad != 0:
        add("mount bias", f"{c.bias_rad * _DEG:+.3g}°", bias_rad=0.0)
    if c.scale != 1.0:
        add("scale error", f"× {c.scale:g}", scale=1.0)
    if c.classifier is not None:
        add(
            "class-based reading",
            f"{c.classifier.class_width_rad * _DEG:.3g}° classes, {c.classifier.decode}",
            classifier=None,
            quantization_rad=0.0,
        )
    elif c.quantization_rad > 0:
        add("quantisation", f"{c.quantization_rad * _DEG:.3g}° steps", quantization_rad=0.0)
    if c.outlier_prob > 0:
        add("wild readings", f"{c.outlier_prob:g} of frames, ~{c.outlier_rad * _DEG:.3g}°", outlier_prob=0.0)
    lost = float(np.max(c.dropout_prob))
    if lost > 0 or c.bursts is not None:
        parts = [f"{lost:g} independent"] if lost > 0 else []
        if c.bursts is not None:
            parts.append(f"{float(np.max(c.bursts.loss_rate)):g} in bursts of {c.bursts.mean_burst_frames:g}")
        add("lost frames", ", ".join(parts), dropout_prob=0.0, bursts=None)
    g = sc.gyro
    if g is not None and (g.noise_rad_s > 0 or g.bias_rad_s != 0 or g.bias_drift_rad_s > 0):
        out.append(
            Fault(
                "gyro errors",
                f"noise {g.noise_rad_s * _DEG:.3g}°/s, bias {g.bias_rad_s * _DEG:+.3g}°/s, "
                f"drift {g.bias_drift_rad_s * _DEG:.3g}°/s",
                lambda s: dataclasses.replace(
                    s, gyro=dataclasses.replace(s.gyro, noise_rad_s=0.0, bias_rad_s=0.0, bias_drift_rad_s=0.0)
                ),
            )
        )
    return out


@dataclass(frozen=True)
class FaultEffect:
    """What one fault costs, in the units of the ranked metric (SI)."""

    fault: Fault
    without: MetricSummary
    alone: MetricSummary
    cost: MetricSummary  # per-run (every fault − this fault removed), paired


@dataclass(frozen=True)
class FaultRanking:
    scenario: Scenario
    metric: str
    every: MetricSummary
    ideal: MetricSummary
    effects: list[FaultEffect]  # most harmful first
    runs: int


def _values(sc: Scenario, metric: str, allow_code: bool) -> tuple[np.ndarray, np.ndarray]:
    out = run_scenario(sc, allow_code=allow_code)
    if metric not in out.metrics:
        raise KeyError(metric)
    return np.asarray(out.metrics[metric], float), out.trace.diverged


def rank_faults(sc: Scenario, metric: str = "rms_error_rad", *, allow_code: bool = False) -> FaultRanking:
    """Run the scenario with each fault removed and alone; rank by cost."""
    info = METRIC_INFO[metric]
    runs = np.arange(sc.run.runs)
    worse = info.larger_is_worse
    faults = active_faults(sc)
    ideal_sc = sc
    for f in faults:
        ideal_sc = f.remove(ideal_sc)
    every, div_e = _values(sc, metric, allow_code)
    ideal, div_i = _values(ideal_sc, metric, allow_code)
    effects = []
    for f in faults:
        without, div_w = _values(f.remove(sc), metric, allow_code)
        alone_sc = sc
        for other in faults:
            if other is not f:
                alone_sc = other.remove(alone_sc)
        alone, div_a = _values(alone_sc, metric, allow_code)
        effects.append(
            FaultEffect(
                fault=f,
                without=summarize(without, runs, worse, div_w),
                alone=summarize(alone, runs, worse, div_a),
                cost=paired_difference(
                    every, without, runs, excluded_a=div_e, excluded_b=div_w, sign=1.0 if worse else -1.0
                ),
            )
        )
    effects.sort(key=lambda e: -e.cost.mean if math.isfinite(e.cost.mean) else math.inf)
    return FaultRanking(
        sc,
        metric,
        summarize(every, runs, worse, div_e),
        summarize(ideal, runs, worse, div_i),
        effects,
        int(runs.size),
    )
