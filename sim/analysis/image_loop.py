"""The image-level closed loop, and how well the fitted statistical camera model stands in for it.

:func:`image_scenario` turns a scenario's camera into the image-level one: its
statistical reading errors (noise, wander, bias, scale, rounding, wild
readings, classifier) are switched off and every frame is rendered, degraded
and read instead; its timing plan (frame rate, jitter, exposure, latency,
losses) and measuring range stay. :func:`surrogate_fidelity` runs the same
Monte Carlo set (same seed: same turbulence, timing and losses) through the
image-level loop and through the statistical model that ``read-test`` fitted,
and compares the metric means with their 95 % Student-t intervals.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

from rollrig.sensors.image_stage import ImageStageSpec

__all__ = ["image_scenario", "surrogate_fidelity", "FidelityRow", "Fidelity", "FIDELITY_METRICS"]

#: metrics compared (those every command profile has)
FIDELITY_METRICS = ("rms_error_rad", "max_abs_error_rad", "aileron_rms_rad", "time_outside_band_s")


def image_scenario(sc, reader, *, size_px: int = 64, degradations=(), bits: int = 8, colour: bool = False):
    """The scenario with an image-level camera (statistical reading errors off, timing kept)."""
    cam = replace(
        sc.camera,
        noise_rad=0.0,
        wander_rad=0.0,
        bias_rad=0.0,
        scale=1.0,
        quantization_rad=0.0,
        outlier_prob=0.0,
        classifier=None,
        image=ImageStageSpec(
            reader=reader, size_px=size_px, colour=colour, degradations=tuple(degradations), bits=bits
        ),
    )
    return replace(sc, camera=cam)


@dataclass(frozen=True)
class FidelityRow:
    """One metric: mean and 95 % interval in each loop, and whether the intervals overlap."""

    metric: str
    image_mean: float
    image_ci: tuple[float, float]
    model_mean: float
    model_ci: tuple[float, float]
    agree: bool


@dataclass(frozen=True)
class Fidelity:
    rows: list[FidelityRow]
    runs: int
    image_seconds: float
    model_seconds: float


def surrogate_fidelity(sc_image, sc_model, runs: int, metrics=FIDELITY_METRICS) -> Fidelity:
    """Run both loops over the same ``runs`` and compare metric means (95 % intervals overlap = agree)."""
    import time

    from ..runner import run_scenario

    out = {}
    secs = {}
    for name, sc in (("image", sc_image), ("model", sc_model)):
        t0 = time.perf_counter()
        out[name] = run_scenario(sc.with_run(runs=runs)).summaries()
        secs[name] = time.perf_counter() - t0
    rows = []
    for m in metrics:
        a, b = out["image"].get(m), out["model"].get(m)
        if a is None or b is None:
            continue
        ok = bool(a.ci95_low <= b.ci95_high and b.ci95_low <= a.ci95_high)
        if not all(math.isfinite(v) for v in (a.mean, b.mean)):
            ok = a.mean == b.mean
        rows.append(FidelityRow(m, a.mean, (a.ci95_low, a.ci95_high), b.mean, (b.ci95_low, b.ci95_high), ok))
    return Fidelity(rows, runs, secs["image"], secs["model"])
