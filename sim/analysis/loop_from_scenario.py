"""Assemble the linear bank-hold loop (:class:`LoopParts`) from a scenario.

The loop is broken at the aileron command, exactly where
:meth:`sim.core.Stepper.reset` inserts its margin perturbations
(``input_gain``, ``input_delay_s``), so analytic and simulated margins
measure the same thing.

Pieces taken from the scenario
------------------------------
* **Plant**: the scenario's full linear lateral model, aileron input only,
  with the rudder held fixed (rudder loop open: no yaw damper or
  turn-coordinator is modelled). For a roll-only model this *is* the
  aileron-to-bank path ``a2 / (s (s + a1))``.
* **Actuator**: the first-order servo lag; position and rate limits are
  left out (a linear analysis assumes they do not bind).
* **Camera effective delay** (:class:`CameraDelay`): processing latency
  + mean of the random extra latency + mean frame hold (half a frame period:
  a zero-order hold at period ``T`` adds about ``T/2`` of delay,
  REFERENCES.md "Loop margins") + exposure mid-point (half the exposure time).
  Capture-time jitter has zero mean and is left out.
* **Controller**: the PID's gains, derivative filter and derivative source;
  its sample hold (half the controller period) is carried by
  ``LoopParts.controller_dt_s``. A derivative taken from the camera is a
  backward difference of successive new readings, which lags the
  proportional term by half the interval between them (half of the longer of
  the frame and controller periods): ``LoopParts.derivative_delay_s``. The
  camera's scale factor multiplies every gain acting on the camera reading
  (it scales the loop gain on that path).
* **Gyro**: effective delay of half its sample period.

Only PID controllers have a transfer function here; any other controller
gets its margins by experiment (:mod:`sim.analysis.empirical`).
"""

from __future__ import annotations

from dataclasses import dataclass

from sim.errors import ScenarioError
from sim.scenario import Scenario

from .linear_loop import LoopParts

__all__ = ["CameraDelay", "camera_delay", "has_linear_model", "loop_parts_from_scenario"]


@dataclass(frozen=True)
class CameraDelay:
    """The camera's effective delay, part by part (all in seconds).

    Attributes
    ----------
    latency_s : s
        Fixed processing latency, capture to delivery.
    latency_jitter_mean_s : s
        Mean of the random extra latency per frame.
    frame_hold_s : s
        Mean frame-hold delay, half a frame period.
    exposure_mid_s : s
        Exposure mid-point, half the exposure time.
    """

    latency_s: float
    latency_jitter_mean_s: float
    frame_hold_s: float
    exposure_mid_s: float

    @property
    def total_s(self) -> float:
        """Sum of the parts, s."""
        return self.latency_s + self.latency_jitter_mean_s + self.frame_hold_s + self.exposure_mid_s


def _scalar(value: object, name: str, file: str) -> float:
    try:
        return float(value)  # type: ignore[arg-type]
    except TypeError:
        raise ScenarioError(
            f"{file}: [sensor] {name} varies per run; allowed for the linear loop: one value"
        ) from None


def camera_delay(sc: Scenario) -> CameraDelay:
    """Effective delay of the scenario's camera reader.

    Parameters
    ----------
    sc : Scenario

    Returns
    -------
    CameraDelay
    """
    cam = sc.camera
    return CameraDelay(
        latency_s=_scalar(cam.latency_s, "latency_s", sc.path),
        latency_jitter_mean_s=float(getattr(cam, "latency_jitter_s", 0.0) or 0.0),
        frame_hold_s=0.5 / float(cam.frame_rate_hz),
        exposure_mid_s=0.5 * float(getattr(cam, "exposure_s", 0.0) or 0.0),
    )


def has_linear_model(sc: Scenario) -> bool:
    """Whether the scenario's controller has a transfer function here (PID only)."""
    return sc.controller.kind == "pid" and sc.controller.pid is not None


def loop_parts_from_scenario(sc: Scenario) -> LoopParts:
    """The scenario's loop, broken at the aileron command.

    Parameters
    ----------
    sc : Scenario
        Must use a PID controller (``[controller] kind = "pid"``).

    Returns
    -------
    LoopParts

    Raises
    ------
    ScenarioError
        If the controller is not a PID.
    """
    if not has_linear_model(sc):
        raise ScenarioError(
            f"{sc.path}: [controller] kind = {sc.controller.kind!r} has no linear model; "
            "allowed for analytic margins: \"pid\" (use the empirical margins)"
        )
    pid = sc.controller.pid
    scale = float(getattr(sc.camera, "scale", 1.0))
    gyro_rate = pid.derivative_source == "gyro" and sc.gyro is not None
    kd_scale = 1.0 if gyro_rate else scale
    return LoopParts.from_plant(
        sc.plant,
        actuator_tau_s=sc.actuator.time_constant_s,
        camera_delay_s=camera_delay(sc).total_s,
        gyro_delay_s=0.5 / sc.gyro.rate_hz if sc.gyro is not None else 0.0,
        controller_dt_s=1.0 / sc.controller.rate_hz,
        kp=pid.kp * scale,
        ki_per_s=pid.ki_per_s * scale,
        kd_s=pid.kd_s * kd_scale,
        derivative_filter_hz=pid.derivative_filter_hz,
        derivative_source="gyro" if gyro_rate else "measurement",
        derivative_delay_s=0.0 if gyro_rate else 0.5 * max(
            1.0 / float(sc.camera.frame_rate_hz), 1.0 / sc.controller.rate_hz),
    )

