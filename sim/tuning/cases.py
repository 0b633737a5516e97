"""Degradation cases: the nominal point, the corners, a Latin hypercube, a held-back set.

A case is one value per degradation axis (file units). The search set is the
scenario's own (nominal) values, the corners of the ranges and a scrambled
Latin-hypercube sample of them (:class:`scipy.stats.qmc.LatinHypercube`);
every case is run with the same seed indices, so candidates and cases see
identical noise, losses and turbulence draws (common random numbers). The
held-back set is a second Latin hypercube from another stream, drawn over the
whole hull of each axis (off the listed values of a discrete axis) and run
with other seed indices; the search never sees it.
"""

from __future__ import annotations

import dataclasses
import itertools
import math
from dataclasses import dataclass

import numpy as np
from rollrig.sensors.camera import BurstConfig

from ..scenario import Scenario
from .spec import Axis, TuneSpec

__all__ = [
    "CaseSet",
    "HELD_BACK_SEED_OFFSET",
    "nominal_values",
    "search_cases",
    "held_back_cases",
    "scenario_for_case",
    "worst_delay_values",
]

#: Held-back runs use seed indices from here on (the search uses 0, 1, ...).
HELD_BACK_SEED_OFFSET = 1_000_000


@dataclass(frozen=True)
class CaseSet:
    """Degradation cases and the seed indices each is run with.

    Attributes
    ----------
    names : tuple of str
        Axis names (columns of ``values``).
    values : (C, k) float
        Axis values per case, file units.
    kinds : tuple of str
        ``"nominal"``, ``"corner"``, ``"lhs"`` or ``"held-back"`` per case.
    seed_indices : (S,) int
        Run indices (random streams) every case is run with.
    """

    names: tuple[str, ...]
    values: np.ndarray
    kinds: tuple[str, ...]
    seed_indices: np.ndarray

    @property
    def n_cases(self) -> int:
        return int(self.values.shape[0])

    def row(self, i: int) -> dict[str, float]:
        return dict(zip(self.names, self.values[i].tolist(), strict=True))

    def label(self, i: int) -> str:
        parts = [f"{n}={v:.3g}" for n, v in self.row(i).items()]
        return f"{self.kinds[i]} " + ", ".join(parts)


def _bursty(sc: Scenario, names) -> bool:
    return "burst_frames" in names or sc.camera.bursts is not None


def nominal_values(sc: Scenario, axes: tuple[Axis, ...]) -> np.ndarray:
    """The scenario's own value on each axis (file units)."""
    cam = sc.camera
    names = [a.name for a in axes]
    bursty = _bursty(sc, names)
    loss = (
        float(np.max(cam.bursts.loss_rate))
        if cam.bursts is not None
        else (0.0 if bursty else float(np.max(cam.dropout_prob)))
    )
    own = {
        "latency_s": float(np.max(cam.latency_s)),
        "frame_rate_hz": cam.frame_rate_hz,
        "noise_deg": math.degrees(cam.noise_rad),
        "quantization_deg": math.degrees(cam.quantization_rad),
        "bias_deg": math.degrees(cam.bias_rad),
        "scale": cam.scale,
        "loss_rate": loss,
        "burst_frames": cam.bursts.mean_burst_frames if cam.bursts is not None else 1.0,
        "turbulence_scale": 1.0,
    }
    return np.array([own[n] for n in names], dtype=float)


def search_cases(spec: TuneSpec, sc: Scenario) -> CaseSet:
    """Nominal + corners + Latin hypercube, seed indices ``0 … seeds-1``."""
    axes = spec.axes
    k = len(axes)
    rows = [nominal_values(sc, axes)]
    kinds = ["nominal"]
    mode = spec.corners
    if mode == "auto":
        mode = "all" if k <= 4 else "extremes"
    if k and mode == "all":
        for bits in itertools.product((0, 1), repeat=k):
            rows.append([a.hi if b else a.lo for a, b in zip(axes, bits, strict=True)])
            kinds.append("corner")
    elif k and mode == "extremes":
        rows += [[a.lo for a in axes], [a.hi for a in axes]]
        kinds += ["corner", "corner"]
    if k and spec.lhs_cases:
        from scipy.stats import qmc

        u = qmc.LatinHypercube(d=k, seed=np.random.default_rng([spec.seed, 1])).random(spec.lhs_cases)
        for point in u:
            rows.append([a.from_unit(x) for a, x in zip(axes, point, strict=True)])
            kinds.append("lhs")
    values = np.array(rows, dtype=float).reshape(len(rows), k)
    return CaseSet(tuple(a.name for a in axes), values, tuple(kinds), np.arange(spec.seeds))


def held_back_cases(spec: TuneSpec, sc: Scenario) -> CaseSet:
    """Validation cases the search never sees: a Latin hypercube over each axis's
    whole hull (continuous even for a listed axis) from its own stream, run with
    seed indices from :data:`HELD_BACK_SEED_OFFSET`."""
    axes = spec.axes
    k = len(axes)
    seeds = HELD_BACK_SEED_OFFSET + np.arange(spec.held_back_seeds)
    if not k:
        return CaseSet((), np.zeros((1, 0)), ("held-back",), seeds)
    from scipy.stats import qmc

    u = qmc.LatinHypercube(d=k, seed=np.random.default_rng([spec.seed, 2])).random(spec.held_back_cases)
    values = np.column_stack([a.lo + u[:, j] * (a.hi - a.lo) for j, a in enumerate(axes)])
    return CaseSet(tuple(a.name for a in axes), values, ("held-back",) * len(values), seeds)


def worst_delay_values(spec: TuneSpec, sc: Scenario) -> np.ndarray:
    """The case with the slowest, highest-gain camera in the set: largest latency,
    lowest frame rate, largest scale; other axes at their nominal values."""
    vals = nominal_values(sc, spec.axes)
    for j, a in enumerate(spec.axes):
        if a.name in ("latency_s", "scale"):
            vals[j] = max(vals[j], a.hi)
        elif a.name == "frame_rate_hz":
            vals[j] = min(vals[j], a.lo)
    return vals


def _value(v, f=lambda x: x):
    """A case value: a float for one value, a float array for one value per run."""
    return float(f(v)) if np.ndim(v) == 0 else f(np.asarray(v, float))


def scenario_for_case(sc: Scenario, values: dict[str, float | np.ndarray]) -> Scenario:
    """The scenario with one case's degradations applied.

    Axes in :data:`sim.tuning.batch.PER_RUN_AXES` may be ``(batch,)`` arrays
    (one value per run); ``frame_rate_hz`` takes one value.
    """
    cam = sc.camera
    ch: dict = {}
    if "latency_s" in values:
        ch["latency_s"] = _value(values["latency_s"])
    for key, attr in (
        ("noise_deg", "noise_rad"),
        ("quantization_deg", "quantization_rad"),
        ("bias_deg", "bias_rad"),
    ):
        if key in values:
            ch[attr] = _value(values[key], np.radians)
    if "frame_rate_hz" in values:
        ch["frame_rate_hz"] = float(values["frame_rate_hz"])
    if "scale" in values:
        ch["scale"] = _value(values["scale"])
    if _bursty(sc, values):
        old = cam.bursts or BurstConfig(loss_rate=0.0, mean_burst_frames=1.0)
        ch["bursts"] = BurstConfig(
            loss_rate=_value(values.get("loss_rate", old.loss_rate)),
            mean_burst_frames=_value(values.get("burst_frames", old.mean_burst_frames)),
        )
    elif "loss_rate" in values:
        ch["dropout_prob"] = _value(values["loss_rate"])
    out = dataclasses.replace(sc, camera=dataclasses.replace(cam, **ch)) if ch else sc
    if "turbulence_scale" in values:
        f = _value(values["turbulence_scale"])
        dist = []
        for d in out.disturbances:
            if hasattr(d, "params") and hasattr(d.params, "sigma_w_mps"):
                p = dataclasses.replace(
                    d.params, sigma_v_mps=f * d.params.sigma_v_mps, sigma_w_mps=f * d.params.sigma_w_mps
                )
                d = dataclasses.replace(d, params=p) if dataclasses.is_dataclass(d) else type(d)(p)
            dist.append(d)
        out = dataclasses.replace(out, disturbances=tuple(dist))
    return out
