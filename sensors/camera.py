"""Camera reader: turns the true bank angle into delayed, degraded readings.

The model has two halves.

*Timing* (:mod:`sensors.timing`) does not depend on the aircraft, so it is
computed once per batch: when each frame is captured (frame rate, jitter) and
when its reading is delivered (fixed plus random latency, in order).

*Reading errors* (:mod:`sensors.stages`) act at capture on the captured rows.
Every random draw is made up front, one stream per stage
(``rng_for("camera.<stage>")``), so adding a stage never shifts another's
draws; time-correlated stages (wandering error, bursty losses) generate their
whole per-frame sequence at reset. The bank-independent errors (bias, white
noise, wander, outliers) are summed into one per-frame offset at reset, so a
capture costs the same few array operations however many stages are on.

Stages at capture, in order:

1. exposure: the bank averaged over the exposure that ends at capture
   (trapezoid over base steps; a fast roll smears; lag of half the exposure);
2. scale and bias, then white noise, wandering error and wild readings;
3. a classification-style reader (optional): class scores, then ``best``
   or ``weighted`` decoding; the confidence output is the top class score;
4. rounding quantiser;
5. measuring range: beyond it the reading is flagged invalid
   (``beyond_range="invalid"``, default) or clipped (``"saturate"``);
6. lost frames: independent and/or bursty (two-state chain) losses.

At a controller tick the autopilot sees the newest delivered reading; if it
is invalid, the last valid one is kept and its age grows (see
:class:`CameraReader`).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np

from . import stages
from .stages import quantize
from .timing import FramePlan, n_frames_for, plan_frames

__all__ = [
    "CameraConfig",
    "ClassifierConfig",
    "BurstConfig",
    "FramePlan",
    "plan_frames",
    "frame_draws",
    "frame_offsets",
    "read_frames",
    "quantize",
    "CameraReader",
]

RngFor = Callable[[str], Sequence[np.random.Generator]]


@dataclass(frozen=True)
class ClassifierConfig:
    """A classification-style reader (scores angle classes, decodes a reading).

    Parameters
    ----------
    class_width_rad : rad
        Spacing of class centres (``k·width`` over the measuring range).
    sharpness : 1
        Score sharpness: scores are a softmax of ``-sharpness·(offset/width)²``.
    decode : {"best", "weighted"}
        ``best``: top class's centre (steps of the width); ``weighted``:
        score-weighted mean of centres (smooth, biased towards centres,
        compressed near the ends of the range).
    """

    class_width_rad: float = math.radians(2.0)
    sharpness: float = 4.0
    decode: str = "best"

    def __post_init__(self) -> None:
        if self.decode not in ("best", "weighted"):
            raise ValueError(f"decode = {self.decode!r}; allowed: 'best', 'weighted'")


@dataclass(frozen=True)
class BurstConfig:
    """Bursty frame losses from a two-state good/bad chain (Gilbert–Elliott).

    Parameters
    ----------
    loss_rate : 1, float or (batch,)
        Stationary fraction of frames lost, ``p/(p+r)``.
    mean_burst_frames : frames
        Mean length of a run of lost frames, ``1/r`` (≥ 1).
    """

    loss_rate: float | np.ndarray = 0.1
    mean_burst_frames: float = 3.0


@dataclass(frozen=True)
class CameraConfig:
    """Camera-reader parameters (SI units).

    ``latency_s`` and ``dropout_prob`` (and ``bursts.loss_rate``) accept a
    float or a ``(batch,)`` array (one value per run) when built in code.

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
        Largest |bank| the reader can read.
    dropout_prob : 1
        Probability that a frame is lost, independently of other frames.
    jitter_s : s
        Standard deviation of the capture-time jitter (white, per frame).
    exposure_s : s
        Exposure time; the reading is the bank averaged over it.
    latency_jitter_s : s
        Mean of the random extra latency (exponential) of each frame.
    wander_rad : rad
        Stationary std of the slowly wandering (Gauss–Markov) error.
    wander_time_s : s
        Correlation time of the wandering error.
    outlier_prob : 1
        Probability that a frame gives a wild reading.
    outlier_rad : rad
        Mean size of a wild reading's error (random sign).
    beyond_range : {"invalid", "saturate"}
        What a reading beyond the range does.
    classifier : ClassifierConfig or None
        Classification-style reader, when set.
    bursts : BurstConfig or None
        Bursty losses, when set (in addition to ``dropout_prob``).
    image : sensors.image_stage.ImageStageSpec or None
        Image-level stage, when set: each frame's bank is what an image reader
        reads from a rendered, degraded picture (see :mod:`sensors.image_stage`).
    """

    frame_rate_hz: float = 30.0
    latency_s: float | np.ndarray = 0.0
    noise_rad: float = 0.0
    bias_rad: float = 0.0
    scale: float = 1.0
    quantization_rad: float = 0.0
    range_rad: float = math.radians(90.0)
    dropout_prob: float | np.ndarray = 0.0
    jitter_s: float = 0.0
    exposure_s: float = 0.0
    latency_jitter_s: float = 0.0
    wander_rad: float = 0.0
    wander_time_s: float = 2.0
    outlier_prob: float = 0.0
    outlier_rad: float = 0.0
    beyond_range: str = "invalid"
    classifier: ClassifierConfig | None = None
    bursts: BurstConfig | None = None
    image: object | None = None  # sensors.image_stage.ImageStageSpec: read rendered pictures

    def __post_init__(self) -> None:
        if self.beyond_range not in ("invalid", "saturate"):
            raise ValueError(f"beyond_range = {self.beyond_range!r}; allowed: 'invalid', 'saturate'")
        if self.frame_rate_hz <= 0:
            raise ValueError(f"frame_rate_hz = {self.frame_rate_hz}; allowed: > 0")
        for name in ("latency_s", "dropout_prob"):
            v = np.asarray(getattr(self, name), dtype=float)
            if v.ndim > 1 or np.any(v < 0) or not np.all(np.isfinite(v)):
                raise ValueError(f"{name}: allowed: a float ≥ 0 or a (batch,) array of them")
        if np.any(np.asarray(self.dropout_prob) >= 1):
            raise ValueError("dropout_prob: allowed: 0 ≤ dropout_prob < 1")


def _per_run(value, batch: int, name: str) -> np.ndarray | float:
    a = np.asarray(value, dtype=float)
    if a.ndim == 0:
        return float(a)
    if a.shape != (batch,):
        raise ValueError(f"{name} has shape {a.shape}; allowed: a float or shape ({batch},)")
    return a


def _any_positive(x) -> bool:
    return bool(np.any(np.asarray(x) > 0))


# ----------------------------------------------------------- random draws
def frame_draws(cfg: CameraConfig, n_frames: int, rng_for: RngFor) -> dict[str, np.ndarray]:
    """Random draws for every frame of every run, one stream per stage.

    Returns arrays of shape ``(batch, n_frames)`` (``outliers``:
    ``(batch, 2, n_frames)``); only stages that are switched on draw.
    """

    def stack(stream: str, draw) -> np.ndarray:
        gens = rng_for(stream)
        out = np.empty((len(gens), n))
        for row, g in zip(out, gens, strict=True):
            draw(g, row)
        return out

    n = n_frames
    draws: dict[str, np.ndarray] = {}
    if cfg.noise_rad > 0:
        draws["noise"] = stack("camera.noise", lambda g, o: g.standard_normal(out=o))
    if _any_positive(cfg.dropout_prob):
        draws["dropout"] = stack("camera.dropout", lambda g, o: g.random(out=o))
    if cfg.jitter_s > 0:
        draws["jitter"] = stack("camera.jitter", lambda g, o: g.standard_normal(out=o))
    if cfg.latency_jitter_s > 0:
        draws["latency"] = stack("camera.latency", lambda g, o: g.standard_exponential(out=o))
    if cfg.wander_rad > 0:
        draws["wander"] = stack("camera.wander", lambda g, o: g.standard_normal(out=o))
    if cfg.outlier_prob > 0 and cfg.outlier_rad > 0:
        u = np.stack([g.random((2, n)) for g in rng_for("camera.outliers")])
        draws["outliers"] = u
    if cfg.bursts is not None and _any_positive(cfg.bursts.loss_rate):
        draws["bursts"] = stack("camera.bursts", lambda g, o: g.random(out=o))
    return draws


def frame_offsets(cfg: CameraConfig, draws: dict[str, np.ndarray], batch: int, n: int) -> np.ndarray | float:
    """Bank-independent error of every frame: bias + noise + wander + wild readings.

    Returns ``(batch, n)`` rad, or the bias alone (a float) when no random
    stage is on.
    """
    parts = []
    if "noise" in draws:
        parts.append(stages.white_noise(draws["noise"], cfg.noise_rad))
    if "wander" in draws:
        parts.append(
            stages.gauss_markov(draws["wander"], cfg.wander_rad, cfg.wander_time_s, 1.0 / cfg.frame_rate_hz)
        )
    if "outliers" in draws:
        o = draws["outliers"]
        parts.append(stages.outlier_offsets(o[:, 0], o[:, 1], cfg.outlier_prob, cfg.outlier_rad))
    if not parts:
        return float(cfg.bias_rad)
    total = parts[0] + cfg.bias_rad
    for p in parts[1:]:
        total += p
    return total


def frame_losses(cfg: CameraConfig, draws: dict[str, np.ndarray], batch: int) -> np.ndarray | None:
    """Lost-frame mask ``(batch, n)`` from independent and bursty losses, or None."""
    lost = None
    if "dropout" in draws:
        lost = stages.independent_losses(draws["dropout"], _per_run(cfg.dropout_prob, batch, "dropout_prob"))
    if "bursts" in draws:
        b = stages.burst_losses(
            draws["bursts"],
            _per_run(cfg.bursts.loss_rate, batch, "bursts.loss_rate"),
            cfg.bursts.mean_burst_frames,
        )
        lost = b if lost is None else lost | b
    return lost


def read_frames(
    bank: np.ndarray, cfg: CameraConfig, offset, centres: np.ndarray | None = None
) -> tuple[np.ndarray, np.ndarray, np.ndarray | None]:
    """Readings, in-range flags and confidence for frames whose (exposed) bank is ``bank``.

    ``offset`` is the frames' bank-independent error (see :func:`frame_offsets`).
    Losses are applied by the caller. Returns ``(reading, in_range,
    confidence)``; confidence is ``None`` without a classifier.
    """
    value = bank * cfg.scale + offset if cfg.scale != 1.0 else bank + offset
    conf = None
    c = cfg.classifier
    if c is not None:
        if centres is None:
            centres = stages.class_centres(c.class_width_rad, cfg.range_rad)
        value, conf = stages.classify(value, centres, c.class_width_rad, c.sharpness, c.decode)
    value = quantize(value, cfg.quantization_rad)
    value, ok = stages.limit_range(value, cfg.range_rad, cfg.beyond_range)
    return value, ok, conf


# ------------------------------------------------------------- runtime shell
class CameraReader:
    """The stateful shell the stepping core drives.

    Call :meth:`reset` once per batch, handing it the driver's
    ``(n_steps + 1, batch)`` record of true bank (row ``k`` written by the end
    of step ``k``), then :meth:`read` at every controller tick. Nothing runs
    per base step: at a tick, the newest delivered frame's reading is
    computed from the bank recorded at its capture step (a frame is delivered
    after it is captured, so that row is always written). The stages are pure
    functions of that bank and the frame's up-front draws, so evaluating a
    frame late gives the same reading as evaluating it at capture; exposure
    averaging reads the rows before the capture step.
    """

    def __init__(self, cfg: CameraConfig, dt: float) -> None:
        self.cfg = cfg
        self.dt = float(dt)

    def reset(
        self, n_steps: int, tick_steps: np.ndarray, batch: int, rng_for: RngFor, history: np.ndarray
    ) -> None:
        cfg = self.cfg
        self.history = history
        n = n_frames_for(cfg.frame_rate_hz, self.dt, n_steps)
        draws = frame_draws(cfg, n, rng_for)
        latency = _per_run(cfg.latency_s, batch, "latency_s")
        self.plan = plan_frames(
            cfg.frame_rate_hz,
            self.dt,
            n_steps,
            batch,
            latency_s=latency,
            jitter_eps=draws.get("jitter"),
            jitter_s=cfg.jitter_s,
            latency_extra_s=None if "latency" not in draws else cfg.latency_jitter_s * draws["latency"],
        )
        self.n_frames, self.batch = n, batch
        self._latest = self.plan.latest_delivered(np.asarray(tick_steps))
        # frame-major (n + 1, batch) arrays; the spare last row (index -1)
        # stands for "no frame yet" and is never valid
        off = frame_offsets(cfg, draws, batch, n)
        if np.isscalar(off):
            self._offset = off
        else:
            self._offset = np.zeros((n + 1, batch))
            self._offset[:n] = np.asarray(off).T
        lost = frame_losses(cfg, draws, batch)
        self._kept = np.ones((n + 1, batch), dtype=bool)
        if lost is not None:
            self._kept[:n] = ~lost.T
        self._kept[n] = False
        self._cap_step = np.zeros((n + 1, batch), dtype=np.int64)
        self._cap_step[:n] = self.plan.capture_step.T
        self._centres = (
            None
            if cfg.classifier is None
            else stages.class_centres(cfg.classifier.class_width_rad, cfg.range_rad)
        )
        self._weights = stages.exposure_weights(cfg.exposure_s, self.dt)
        self.capture_time = np.full((n + 1, batch), -np.inf)
        self.capture_time[:n] = self.plan.capture_step.T * self.dt
        self._last_value = np.zeros(batch)
        self._last_time = np.full(batch, -np.inf)
        self._rows = np.arange(batch)
        self._image = None if cfg.image is None else cfg.image.start(n, batch, rng_for)
        self._tick = 0
        self._prev_idx = None

    def _evaluate(self, frames, rows):
        """Reading, validity and confidence of frames, from the bank record."""
        w = self._weights
        cap = self._cap_step[frames, rows]
        if w.size == 1:
            bank = self.history[cap, rows]
        else:  # one gather per base step of the exposure (few), oldest first
            bank = w[-1] * self.history[cap, rows]
            for i in range(1, w.size):
                bank += w[-1 - i] * self.history[np.maximum(cap - i, 0), rows]
        if self._image is not None:  # the reader's reading of the rendered picture replaces the bank
            bank, seen = self._image.read(bank, frames, rows)
        off = self._offset if np.isscalar(self._offset) else self._offset[frames, rows]
        value, ok, conf = read_frames(bank, self.cfg, off, self._centres)
        ok &= self._kept[frames, rows]
        if self._image is not None:
            ok &= seen
        return value, ok, conf

    def read(self, t: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """(bank, valid, age) at the next controller tick, time ``t``."""
        idx = self._latest[self._tick]
        self._tick += 1
        rows = self._rows
        prev = self._prev_idx
        if prev is None:
            value, valid, _ = self._evaluate(idx, rows)
        elif np.array_equal(idx, prev):  # same frames as the last tick
            value, valid = self._prev_value, self._prev_valid
        else:  # evaluate only the runs whose newest frame changed
            new = np.flatnonzero(idx != prev)
            value, valid = self._prev_value.copy(), self._prev_valid.copy()
            value[new], valid[new], _ = self._evaluate(idx[new], new)
        self._prev_idx, self._prev_value, self._prev_valid = idx, value, valid
        self._last_value = np.where(valid, value, self._last_value)
        self._last_time = np.where(valid, self.capture_time[idx, rows], self._last_time)
        return self._last_value, valid, t - self._last_time

    def frame_readings(self) -> tuple[np.ndarray, np.ndarray, np.ndarray | None]:
        """Every frame's reading, validity and confidence, ``(batch, n_frames)``.

        Computed from the bank record (call after the run); frames captured
        after the last recorded step are invalid.
        """
        frames = np.arange(self.n_frames)[:, None]
        value, ok, conf = self._evaluate(frames, self._rows[None, :])
        return value.T.copy(), ok.T.copy(), None if conf is None else conf.T.copy()
