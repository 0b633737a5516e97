"""Camera reader: turns the true bank angle into delayed, degraded readings.

The model has two halves.

*Timing* (:func:`plan_frames`) does not depend on the aircraft, so it is
computed once per batch: when each frame is captured and when its reading is
delivered to the autopilot, on the base-step grid. Frames are delivered in
order; a frame captured at step ``c`` with latency ``L`` arrives at step
``c + round(L / dt)``.

*Reading errors* (:func:`read_frames`) act on the bank angle seen at capture:
a chain of small pure stages over batch arrays (scale and bias, noise,
quantisation, measuring range, lost frames). Random draws for every frame are
made up front, one stream per stage, so a stage added later never shifts the
draws of another.

At a controller tick the autopilot sees the newest delivered reading; if it is
invalid, the last valid one is kept and its age grows (see
:class:`CameraReader`).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np

__all__ = [
    "CameraConfig",
    "FramePlan",
    "plan_frames",
    "frame_draws",
    "read_frames",
    "quantize",
    "CameraReader",
]

RngFor = Callable[[str], Sequence[np.random.Generator]]


@dataclass(frozen=True)
class CameraConfig:
    """Camera-reader parameters (SI units).

    Parameters
    ----------
    frame_rate_hz : Hz
        Frames captured per second.
    latency_s : s
        Fixed processing latency from capture to delivery.
    noise_rad : rad
        Standard deviation of white reading noise.
    bias_rad : rad
        Constant reading offset (camera mounted crooked).
    scale : 1
        Reading scale factor (1 = perfect; 1.02 = zoomed 2 % in).
    quantization_rad : rad
        Rounding step of the reading (0 = none).
    range_rad : rad
        Largest |bank| the reader can read; beyond it a reading is invalid.
    dropout_prob : 1
        Probability that a frame is lost, independently of other frames.
    """

    frame_rate_hz: float = 30.0
    latency_s: float = 0.0
    noise_rad: float = 0.0
    bias_rad: float = 0.0
    scale: float = 1.0
    quantization_rad: float = 0.0
    range_rad: float = math.radians(90.0)
    dropout_prob: float = 0.0


# --------------------------------------------------------------------- timing
@dataclass(frozen=True)
class FramePlan:
    """When frames are captured and delivered, for a batch of runs.

    Attributes
    ----------
    capture_step : (batch, n_frames) int
        Base step at which each frame is captured.
    deliver_step : (batch, n_frames) int
        Base step at which each reading reaches the autopilot (non-decreasing
        along frames: delivery is in order).
    """

    capture_step: np.ndarray
    deliver_step: np.ndarray

    @property
    def n_frames(self) -> int:
        return int(self.capture_step.shape[1])

    def captures_by_step(self) -> dict[int, tuple[np.ndarray | slice, np.ndarray | int]]:
        """Map base step -> (rows, frame indices) captured at that step."""
        cap = self.capture_step
        batch, n = cap.shape
        out: dict[int, tuple[np.ndarray | slice, np.ndarray | int]] = {}
        if np.all(cap == cap[:1]):  # every run captures on the same steps
            for f, k in enumerate(cap[0]):
                out[int(k)] = (slice(None), f)
            return out
        steps = cap.ravel()
        order = np.argsort(steps, kind="stable")
        rows = np.repeat(np.arange(batch), n)[order]
        frames = np.tile(np.arange(n), batch)[order]
        uniq, start = np.unique(steps[order], return_index=True)
        bounds = np.append(start, steps.size)
        for j, k in enumerate(uniq):
            sl = slice(bounds[j], bounds[j + 1])
            out[int(k)] = (rows[sl], frames[sl])
        return out

    def latest_delivered(self, steps: np.ndarray) -> np.ndarray:
        """Index of the newest frame delivered at or before each step.

        Returns ``(len(steps), batch)`` ints, ``-1`` where nothing has arrived.
        """
        d = self.deliver_step
        batch, n = d.shape
        steps = np.asarray(steps)
        if np.all(d == d[:1]):  # same timing in every run: one search serves all
            one = np.searchsorted(d[0], steps, side="right") - 1
            return np.repeat(one[:, None], batch, axis=1)
        span = int(max(d.max(initial=0), steps.max(initial=0))) + 2
        offset = (np.arange(batch) * span)[:, None]
        flat = (d + offset).ravel()
        query = (np.asarray(steps)[None, :] + offset).ravel()
        pos = np.searchsorted(flat, query, side="right")
        idx = pos.reshape(batch, -1) - 1 - np.arange(batch)[:, None] * n
        idx[idx < 0] = -1
        return idx.T.copy()


def plan_frames(cfg: CameraConfig, dt: float, n_steps: int, batch: int) -> FramePlan:
    """Capture and delivery steps for frames in ``[0, n_steps * dt]``.

    Frame ``f`` is captured at ``round(f / frame_rate / dt)`` (timing snapped to
    the base grid, error at most ``dt/2``) and delivered ``round(latency/dt)``
    steps later.
    """
    period = 1.0 / cfg.frame_rate_hz
    n_frames = int(math.floor(n_steps * dt / period + 1e-9)) + 1
    cap = np.rint(np.arange(n_frames) * period / dt).astype(np.int64)
    cap = cap[cap <= n_steps]
    lag = int(round(cfg.latency_s / dt))
    cap2 = np.broadcast_to(cap, (batch, cap.size)).copy()
    return FramePlan(capture_step=cap2, deliver_step=cap2 + lag)


# ----------------------------------------------------------- reading errors
def frame_draws(cfg: CameraConfig, n_frames: int, rng_for: RngFor) -> dict[str, np.ndarray]:
    """Random draws for every frame of every run, one stream per stage.

    Returns arrays of shape ``(batch, n_frames)``.
    """
    draws: dict[str, np.ndarray] = {}
    if cfg.noise_rad > 0:
        draws["noise"] = np.stack([g.standard_normal(n_frames) for g in rng_for("camera.noise")])
    if cfg.dropout_prob > 0:
        draws["lost"] = np.stack(
            [g.random(n_frames) < cfg.dropout_prob for g in rng_for("camera.dropout")]
        )
    return draws


def quantize(x: np.ndarray, step: float) -> np.ndarray:
    """Round to the nearest multiple of ``step`` (no-op for ``step <= 0``)."""
    if step <= 0:
        return x
    return np.round(x / step) * step


def read_frames(
    bank: np.ndarray, cfg: CameraConfig, draws: dict[str, np.ndarray]
) -> tuple[np.ndarray, np.ndarray]:
    """Readings and validity for frames whose true bank is ``bank``.

    ``draws`` holds this frame's random draws (same shape as ``bank``).
    Stages, in order: scale and bias, white noise, quantisation, measuring
    range (invalid beyond it), lost frames.
    """
    value = cfg.scale * bank + cfg.bias_rad
    if "noise" in draws:
        value = value + cfg.noise_rad * draws["noise"]
    value = quantize(value, cfg.quantization_rad)
    valid = np.abs(value) <= cfg.range_rad
    if "lost" in draws:
        valid &= ~draws["lost"]
    return value, valid


# ------------------------------------------------------------- runtime shell
class CameraReader:
    """The stateful shell the stepping core drives.

    Call :meth:`reset` once per batch, :meth:`capture` at every base step that
    has captures, and :meth:`read` at every controller tick.
    """

    def __init__(self, cfg: CameraConfig, dt: float) -> None:
        self.cfg = cfg
        self.dt = float(dt)

    def reset(
        self, n_steps: int, tick_steps: np.ndarray, batch: int, rng_for: RngFor
    ) -> None:
        self.plan = plan_frames(self.cfg, self.dt, n_steps, batch)
        n = self.plan.n_frames
        self.draws = frame_draws(self.cfg, n, rng_for)
        self.captures = self.plan.captures_by_step()
        self._latest = self.plan.latest_delivered(np.asarray(tick_steps))
        # one spare column (index -1) stands for "no frame yet": never valid
        self.values = np.zeros((batch, n + 1))
        self.valid = np.zeros((batch, n + 1), dtype=bool)
        self.capture_time = np.full((batch, n + 1), -np.inf)
        self.capture_time[:, :n] = self.plan.capture_step * self.dt
        self._last_value = np.zeros(batch)
        self._last_time = np.full(batch, -np.inf)
        self._rows = np.arange(batch)
        self._tick = 0

    def capture(self, k: int, bank: np.ndarray) -> None:
        """Capture the frames due at base step ``k`` from true bank (batch,)."""
        hit = self.captures.get(k)
        if hit is None:
            return
        rows, frames = hit
        draws = {name: d[rows, frames] for name, d in self.draws.items()}
        value, valid = read_frames(bank[rows], self.cfg, draws)
        self.values[rows, frames] = value
        self.valid[rows, frames] = valid

    def read(self, t: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """(bank, valid, age) at the next controller tick, time ``t``."""
        idx = self._latest[self._tick]
        self._tick += 1
        valid = self.valid[self._rows, idx]
        self._last_value = np.where(valid, self.values[self._rows, idx], self._last_value)
        self._last_time = np.where(valid, self.capture_time[self._rows, idx], self._last_time)
        return self._last_value, valid, t - self._last_time
