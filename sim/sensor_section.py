"""The ``[sensor]`` section (camera reader) and its ``[sensor.gyro]`` table."""

from __future__ import annotations

import math

from sensors.camera import CameraConfig
from sensors.gyro import GyroConfig

from .section import Section

__all__ = ["parse_sensor"]

_D = math.radians


def parse_sensor(sec: Section | None, *, base_step_s: float) -> tuple[CameraConfig, GyroConfig | None]:
    """Camera and optional gyro configuration, converted to SI."""
    if sec is None:
        return CameraConfig(), None
    cam = CameraConfig(
        frame_rate_hz=sec.number("frame_rate_hz", 30.0, lo=0.1, hi=1.0 / base_step_s),
        latency_s=sec.number("latency_s", 0.0, lo=0.0, hi=5.0),
        noise_rad=_D(sec.number("noise_deg", 0.0, lo=0.0, hi=30.0)),
        bias_rad=_D(sec.number("bias_deg", 0.0, lo=-45.0, hi=45.0)),
        scale=sec.number("scale", 1.0, lo=0.5, hi=2.0),
        quantization_rad=_D(sec.number("quantization_deg", 0.0, lo=0.0, hi=30.0)),
        range_rad=_D(sec.number("range_deg", 90.0, lo=1.0, hi=180.0)),
        dropout_prob=sec.number("dropout_prob", 0.0, lo=0.0, hi=1.0, hi_open=True),
    )
    g = sec.sub("gyro")
    gyro = None
    if g is not None:
        gyro = GyroConfig(
            rate_hz=g.number("rate_hz", min(100.0, 1.0 / base_step_s), lo=0.1, hi=1.0 / base_step_s),
            noise_rad_s=_D(g.number("noise_deg_s", 0.0, lo=0.0, hi=100.0)),
            bias_rad_s=_D(g.number("bias_deg_s", 0.0, lo=-100.0, hi=100.0)),
        )
        g.finish()
    sec.finish()
    return cam, gyro
