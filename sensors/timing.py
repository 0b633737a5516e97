"""Camera frame timing on the base-step grid: capture, latency, delivery.

Timing does not depend on the aircraft, so it is computed once per batch.
Frame ``f`` is due at ``f·T`` (``T = 1/frame_rate``) plus a white timing
jitter (std ``jitter_s``, clipped to ``±0.45 T`` so frames keep their order),
snapped to the base grid. Its reading is delivered after a processing latency
``latency_s`` plus a random extra part, exponentially distributed with mean
``latency_jitter_s`` (processing time can only be longer than the fastest
case). Frames are delivered in order: a frame never overtakes the one before
it (the reader processes one frame at a time).

At a controller tick that does not line up with frames, the newest reading
is on average ``latency + T/2`` old (the delivery buffer's mean delay).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

__all__ = ["FramePlan", "plan_frames", "n_frames_for"]


@dataclass(frozen=True)
class FramePlan:
    """When frames are captured and delivered, for a batch of runs.

    Attributes
    ----------
    capture_step : (batch, n_frames) int
        Base step at which each frame is captured (non-decreasing).
    deliver_step : (batch, n_frames) int
        Base step at which each reading reaches the autopilot (non-decreasing
        along frames: delivery is in order).
    """

    capture_step: np.ndarray
    deliver_step: np.ndarray

    @property
    def n_frames(self) -> int:
        return int(self.capture_step.shape[1])

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
        # bin each delivery by the first queried step at or after it, count per
        # run and bin, then a running sum over the queries: O(frames + queries)
        nq = steps.size
        order = np.argsort(steps, kind="stable")
        srt = steps[order]
        bins = np.searchsorted(srt, d, side="left")  # (batch, n): 0..nq
        flat = (bins + (np.arange(batch) * (nq + 1))[:, None]).ravel()
        count = np.bincount(flat, minlength=batch * (nq + 1)).reshape(batch, nq + 1)
        upto = np.cumsum(count[:, :nq], axis=1)  # delivered at or before each sorted query
        out = np.empty((nq, batch), dtype=np.int64)
        out[order] = upto.T - 1
        return out


def plan_frames(
    frame_rate_hz: float,
    dt: float,
    n_steps: int,
    batch: int,
    *,
    latency_s=0.0,
    jitter_eps: np.ndarray | None = None,
    jitter_s: float = 0.0,
    latency_extra_s: np.ndarray | None = None,
) -> FramePlan:
    """Capture and delivery steps for frames in ``[0, n_steps·dt]``.

    Parameters
    ----------
    frame_rate_hz : Hz
        Nominal frame rate.
    dt : s
        Base step.
    n_steps : int
        Steps in the run.
    batch : int
        Runs in the batch.
    latency_s : s, float or (batch,)
        Fixed processing latency.
    jitter_eps : (batch, n_frames) or None
        Standard normal draws for the capture-time jitter.
    jitter_s : s, float or (batch,)
        Standard deviation of the capture-time jitter.
    latency_extra_s : (batch, n_frames) s or None
        Random extra latency of each frame.

    Notes
    -----
    Capture times are snapped to the base grid (error at most ``dt/2``).
    Frames whose capture falls after the last step are dropped from the plan
    (the plan keeps the frame count of the nominal schedule, so the arrays
    stay rectangular: a late frame is captured at the last step instead).
    """
    n_frames = n_frames_for(frame_rate_hz, dt, n_steps)
    period = 1.0 / frame_rate_hz
    t_nom = np.arange(n_frames) * period
    js = np.asarray(jitter_s, dtype=float)
    if jitter_eps is not None and np.any(js > 0):
        js = js[:, None] if js.ndim == 1 else js  # per run: a column
        jit = np.clip(js * jitter_eps, -0.45 * period, 0.45 * period)
        t_cap = np.clip(t_nom + jit, 0.0, None)
        cap = np.rint(t_cap / dt).astype(np.int64)
        cap = np.minimum(np.maximum.accumulate(cap, axis=1), n_steps)
    else:
        cap = np.broadcast_to(np.rint(t_nom / dt).astype(np.int64), (batch, n_frames)).copy()
    lat = np.asarray(latency_s, dtype=float)
    lag = np.rint((lat[:, None] if lat.ndim == 1 else lat) / dt).astype(np.int64)
    deliver = cap + lag
    if latency_extra_s is not None:
        deliver = deliver + np.rint(latency_extra_s / dt).astype(np.int64)
        deliver = np.maximum.accumulate(deliver, axis=1)  # in order
    return FramePlan(capture_step=cap, deliver_step=np.broadcast_to(deliver, cap.shape).copy())


def n_frames_for(frame_rate_hz: float, dt: float, n_steps: int) -> int:
    """Number of nominal frames whose due time is within the run."""
    period = 1.0 / frame_rate_hz
    n = int(math.floor(n_steps * dt / period + 1e-9)) + 1
    while n > 0 and round((n - 1) * period / dt) > n_steps:
        n -= 1
    return n
