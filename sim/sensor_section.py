"""The ``[sensor]`` section (camera reader) and its sub-tables.

Keys (units in the names; every stage is off by default)::

    [sensor]
    frame_rate_hz = 30.0        # frames per second
    jitter_s = 0.0              # std of capture-time jitter (white, per frame)
    exposure_s = 0.0            # exposure; the reading is the bank averaged over it
    latency_s = 0.0             # fixed processing latency
    latency_jitter_s = 0.0      # mean of an exponential extra latency per frame
    noise_deg = 0.0             # white reading noise, std
    wander_deg = 0.0            # slowly wandering error (Gauss-Markov), std
    wander_time_s = 2.0         # ... and its correlation time
    bias_deg = 0.0              # crooked mount
    scale = 1.0                 # zoom error (1.02 = reads 2 % large)
    quantization_deg = 0.0      # rounding step of the reading
    outlier_prob = 0.0          # probability of a wild reading
    outlier_deg = 20.0          # mean size of a wild reading's error
    range_deg = 90.0            # measuring range
    beyond_range = "invalid"    # or "saturate": clip to the range, stay valid
    dropout_prob = 0.0          # independent frame losses

    [sensor.classifier]         # a classification-style reader
    class_width_deg = 2.0
    sharpness = 4.0             # softmax of -sharpness·(offset/width)²
    decode = "best"             # or "weighted"

    [sensor.bursts]             # bursty losses (two-state chain, e.g. glare)
    loss_rate = 0.1             # stationary fraction of frames lost
    mean_burst_frames = 4.0     # mean length of a run of lost frames

    [sensor.gyro]               # optional rate gyro
    rate_hz = 100.0
    noise_deg_s = 0.0
    bias_deg_s = 0.0
    bias_drift_deg_s = 0.0      # Gauss-Markov bias drift, std
    bias_drift_time_s = 100.0   # ... and its correlation time
"""

from __future__ import annotations

import math

from rollrig.sensors.camera import BurstConfig, CameraConfig, ClassifierConfig
from rollrig.sensors.gyro import GyroConfig

from .section import Section

__all__ = ["parse_sensor"]

_D = math.radians


def parse_sensor(sec: Section | None, *, base_step_s: float) -> tuple[CameraConfig, GyroConfig | None]:
    """Camera and optional gyro configuration, converted to SI."""
    if sec is None:
        return CameraConfig(), None
    rate = sec.number("frame_rate_hz", 30.0, lo=0.1, hi=1.0 / base_step_s)
    period = 1.0 / rate
    range_deg = sec.number("range_deg", 90.0, lo=1.0, hi=180.0)
    classifier = None
    c = sec.sub("classifier")
    if c is not None:
        classifier = ClassifierConfig(
            class_width_rad=_D(c.number("class_width_deg", 2.0, lo=0.01, hi=min(30.0, range_deg))),
            sharpness=c.number("sharpness", 4.0, lo=0.01, hi=1000.0),
            decode=c.string("decode", "best", choices=("best", "weighted")),
        )
        c.finish()
    bursts = None
    b = sec.sub("bursts")
    if b is not None:
        loss = b.number("loss_rate", lo=0.0, hi=0.9)
        burst = b.number("mean_burst_frames", lo=1.0, hi=1000.0)
        if burst < loss / (1.0 - loss):  # else P(good -> bad) = π/(b(1 − π)) would exceed 1
            raise b.error(
                "mean_burst_frames",
                f"= {burst:g} is too short for loss_rate {loss:g}; "
                f"allowed: mean_burst_frames ≥ {loss / (1.0 - loss):.3g} (= π/(1 − π))",
            )
        bursts = BurstConfig(loss_rate=loss, mean_burst_frames=burst)
        b.finish()
    cam = CameraConfig(
        frame_rate_hz=rate,
        jitter_s=sec.number("jitter_s", 0.0, lo=0.0, hi=0.5 * period),
        exposure_s=sec.number("exposure_s", 0.0, lo=0.0, hi=period),
        latency_s=sec.number("latency_s", 0.0, lo=0.0, hi=5.0),
        latency_jitter_s=sec.number("latency_jitter_s", 0.0, lo=0.0, hi=5.0),
        noise_rad=_D(sec.number("noise_deg", 0.0, lo=0.0, hi=30.0)),
        wander_rad=_D(sec.number("wander_deg", 0.0, lo=0.0, hi=30.0)),
        wander_time_s=sec.number("wander_time_s", 2.0, lo=0.01, hi=3600.0),
        bias_rad=_D(sec.number("bias_deg", 0.0, lo=-45.0, hi=45.0)),
        scale=sec.number("scale", 1.0, lo=0.5, hi=2.0),
        quantization_rad=_D(sec.number("quantization_deg", 0.0, lo=0.0, hi=30.0)),
        outlier_prob=sec.number("outlier_prob", 0.0, lo=0.0, hi=0.5),
        outlier_rad=_D(sec.number("outlier_deg", 20.0, lo=0.0, hi=180.0)),
        range_rad=_D(range_deg),
        beyond_range=sec.string("beyond_range", "invalid", choices=("invalid", "saturate")),
        dropout_prob=sec.number("dropout_prob", 0.0, lo=0.0, hi=1.0, hi_open=True),
        classifier=classifier,
        bursts=bursts,
    )
    g = sec.sub("gyro")
    gyro = None
    if g is not None:
        gyro = GyroConfig(
            rate_hz=g.number("rate_hz", min(100.0, 1.0 / base_step_s), lo=0.1, hi=1.0 / base_step_s),
            noise_rad_s=_D(g.number("noise_deg_s", 0.0, lo=0.0, hi=100.0)),
            bias_rad_s=_D(g.number("bias_deg_s", 0.0, lo=-100.0, hi=100.0)),
            bias_drift_rad_s=_D(g.number("bias_drift_deg_s", 0.0, lo=0.0, hi=100.0)),
            bias_drift_time_s=g.number("bias_drift_time_s", 100.0, lo=0.01, hi=1e6),
        )
        g.finish()
    sec.finish()
    return cam, gyro
