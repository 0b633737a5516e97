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
  + mean of the random extra latency + mean frame hold + exposure mid-point
  (half the exposure time). The mean frame hold is the mean age, beyond the
  latency, of the reading the controller uses at its ticks, computed from the
  scenario's frame and tick schedule on the base grid
  (:func:`schedule_stats`): half a frame period when frames and ticks are
  not locked (a zero-order hold at period ``T`` adds about ``T/2`` of delay,
  docs/references.md "Loop margins"), less when they are (e.g. 25 Hz frames
  arriving on 50 Hz ticks: 10 ms, not 20 ms, because the controller's own
  hold then adds nothing the frame hold has not). Capture-time jitter has
  zero mean and is left out.
* **Controller**: the PID's gains, derivative filter and derivative source;
  its sample hold (half the controller period) is carried by
  ``LoopParts.controller_dt_s``. The camera's scale factor multiplies every
  gain acting on the camera reading (it scales the loop gain on that path).
  A derivative taken from the camera is a backward difference of the two
  newest readings, centred half their capture interval earlier, and its
  filter (:mod:`controllers.pid`) advances only when a new reading arrives.
  So the D path has its own delay (mean over new-reading ticks of reading age
  + half the capture interval; ``LoopParts.derivative_delay_s`` carries the
  excess over the P path) and, when frames are slower than ticks, a lower
  effective filter corner ``f·T_tick/T_new`` (the discrete pole per update,
  ``exp(−2π f T_tick)``, applied once per new reading every ``T_new``).
* **Gyro**: effective delay of half its sample period.

Only PID controllers have a transfer function here; any other controller
gets its margins by experiment (:mod:`sim.analysis.empirical`).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np
from rollrig.sim.errors import ScenarioError
from rollrig.sim.scenario import Scenario

if TYPE_CHECKING:  # python-control (imported by linear_loop) costs about a second to import
    from .linear_loop import LoopParts

__all__ = [
    "CameraDelay",
    "ScheduleStats",
    "camera_delay",
    "schedule_stats",
    "has_linear_model",
    "loop_parts_from_scenario",
]


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
        Mean frame-hold delay: mean age of the reading used at the controller
        ticks, beyond the latency (half a frame period when frames and ticks
        are not locked).
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


@dataclass(frozen=True)
class ScheduleStats:
    """Reading ages on the deterministic frame and controller-tick schedule (s).

    Attributes
    ----------
    mean_age_s : s
        Mean age (since capture) of the newest reading at every tick.
    new_reading_age_s : s
        Mean age at the ticks that bring a new reading.
    new_reading_gap_s : s
        Mean capture interval between a new reading and the one before it.
    new_reading_interval_s : s
        Mean time between ticks that bring a new reading.
    tick_s : s
        Controller period.
    max_age_s : s
        Oldest reading used at any tick (compare with the PID's ``stale_after_s``).
    """

    mean_age_s: float
    new_reading_age_s: float
    new_reading_gap_s: float
    new_reading_interval_s: float
    tick_s: float
    max_age_s: float = 0.0


def schedule_stats(sc: Scenario, *, frames: int = 600) -> ScheduleStats:
    """Reading ages from the scenario's frame and tick schedule on its base grid.

    Frames are captured at ``round(f·T/dt)`` base steps and delivered
    ``round(latency/dt)`` steps later (latency + mean random extra latency);
    the controller ticks every ``round(1/(rate·dt))`` steps and uses the newest
    delivered reading — the same rounding as the stepping core, whose ticks
    fall on multiples of the controller period from step 0. Ticks before the
    first delivery and the first tenth of the rest are skipped.

    Parameters
    ----------
    sc : Scenario
    frames : int
        Frames in the horizon.

    Returns
    -------
    ScheduleStats
    """
    cam = sc.camera
    dt = sc.run.base_step_s
    period = 1.0 / float(cam.frame_rate_hz)
    jitter = float(getattr(cam, "latency_jitter_s", 0.0) or 0.0)
    latency = _scalar(cam.latency_s, "latency_s", sc.path) + jitter
    every = int(round(1.0 / (sc.controller.rate_hz * dt)))
    capture = np.rint(np.arange(frames) * period / dt).astype(np.int64)
    arrive = capture + int(round(latency / dt))
    # The core ticks at multiples of the controller period counted from step 0
    # (LoopSetup.tick_steps), not from the first frame's arrival.
    ticks = np.arange(0, int(arrive[-1]), every)
    ticks = ticks[ticks >= arrive[0]]
    newest = np.searchsorted(arrive, ticks, side="right") - 1
    keep = slice(ticks.size // 10, None)
    ticks, newest = ticks[keep], newest[keep]
    age = (ticks - capture[newest]) * dt
    is_new = np.concatenate([[False], np.diff(newest) > 0])
    idx = np.nonzero(is_new)[0]
    prev = newest[idx - 1]
    gap = (capture[newest[idx]] - capture[prev]) * dt
    interval = np.diff(ticks[idx]) * dt
    return ScheduleStats(
        mean_age_s=float(age.mean()),
        new_reading_age_s=float(age[idx].mean()),
        new_reading_gap_s=float(gap.mean()),
        new_reading_interval_s=float(interval.mean()) if interval.size else every * dt,
        tick_s=every * dt,
        max_age_s=float(age.max()),
    )


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
    latency = _scalar(cam.latency_s, "latency_s", sc.path)
    jitter = float(getattr(cam, "latency_jitter_s", 0.0) or 0.0)
    return CameraDelay(
        latency_s=latency,
        latency_jitter_mean_s=jitter,
        frame_hold_s=schedule_stats(sc).mean_age_s - latency - jitter,
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
            'allowed for analytic margins: "pid" (use the empirical margins)'
        )
    pid = sc.controller.pid
    scale = float(getattr(sc.camera, "scale", 1.0))
    gyro_rate = pid.derivative_source == "gyro" and sc.gyro is not None
    cam = camera_delay(sc)
    extra = 0.0
    filter_hz = pid.derivative_filter_hz
    if not gyro_rate and pid.kd_s != 0.0:
        st = schedule_stats(sc)
        # D path: reading age at new-reading ticks + half the difference interval, versus
        # the P path's mean age + half a tick (LoopParts adds the tick hold to both).
        d_path = st.new_reading_age_s + 0.5 * st.new_reading_gap_s
        # (rounded to 1 µs: a sub-microsecond delay is noise from the averaging)
        extra = max(0.0, round(d_path - st.mean_age_s - 0.5 * st.tick_s, 6))
        filter_hz = pid.derivative_filter_hz * st.tick_s / max(st.new_reading_interval_s, st.tick_s)
    from .linear_loop import LoopParts

    return LoopParts.from_plant(
        sc.plant,
        actuator_tau_s=sc.actuator.time_constant_s,
        camera_delay_s=cam.total_s,
        gyro_delay_s=0.5 / sc.gyro.rate_hz if sc.gyro is not None else 0.0,
        controller_dt_s=1.0 / sc.controller.rate_hz,
        kp=pid.kp * scale,
        ki_per_s=pid.ki_per_s * scale,
        kd_s=pid.kd_s * (1.0 if gyro_rate else scale),
        derivative_filter_hz=filter_hz,
        derivative_source="gyro" if gyro_rate else "measurement",
        derivative_delay_s=extra,
    )
