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

import dataclasses
import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np

from . import stages
from .stages import column, quantize
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
    "take_rows",
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

    Every numeric parameter except ``frame_rate_hz`` accepts a float or a
    ``(batch,)`` array (one value per run) when built in code (see
    ``rollrig.sim.params`` for the rule and what is shared).

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


def _at(value, rows=None):
    """A scalar or per-run parameter at batch rows ``rows`` (a float, or an array shaped like ``rows``)."""
    if isinstance(value, float):
        return value
    a = np.asarray(value, dtype=float)
    if a.ndim == 0:
        return float(a)
    return a if rows is None else a[rows]


def _any_positive(x) -> bool:
    return bool(np.any(np.asarray(x) > 0))


def _shared_if_equal(cfg: CameraConfig) -> CameraConfig:
    """Per-run arrays whose values are all equal become floats (same arithmetic, fewer operations)."""

    def fold(obj):
        new = object.__new__(type(obj))
        for f in dataclasses.fields(obj):
            v = getattr(obj, f.name)
            if isinstance(v, np.ndarray) and v.ndim == 1 and v.size and np.all(v == v[0]):
                v = float(v[0])
            object.__setattr__(new, f.name, v)
        return new

    out = fold(cfg)
    if cfg.bursts is not None:
        object.__setattr__(out, "bursts", fold(cfg.bursts))
    return out


def take_rows(cfg: CameraConfig, rows: np.ndarray) -> CameraConfig:
    """The config restricted to batch rows ``rows`` (per-run arrays sliced, scalars kept)."""

    def cut(obj):
        changes = {}
        for f in dataclasses.fields(obj):
            v = getattr(obj, f.name)
            if isinstance(v, np.ndarray) and v.ndim == 1:
                changes[f.name] = np.ascontiguousarray(v[rows])
        new = object.__new__(type(obj))
        for f in dataclasses.fields(obj):
            object.__setattr__(new, f.name, changes.get(f.name, getattr(obj, f.name)))
        return new

    out = cut(cfg)
    if cfg.bursts is not None:
        object.__setattr__(out, "bursts", cut(cfg.bursts))
    return out


# ----------------------------------------------------------- random draws
def frame_draws(cfg: CameraConfig, n_frames: int, rng_for: RngFor) -> dict[str, np.ndarray]:
    """Random draws for every frame of every run, one stream per stage.

    Returns arrays of shape ``(batch, n_frames)`` (``outliers``:
    ``(batch, 2, n_frames)``); only stages that are switched on (in any run)
    draw.
    """

    def stack(stream: str, draw) -> np.ndarray:
        gens = rng_for(stream)
        out = np.empty((len(gens), n))
        for row, g in zip(out, gens, strict=True):
            draw(g, row)
        return out

    n = n_frames
    draws: dict[str, np.ndarray] = {}
    if _any_positive(cfg.noise_rad):
        draws["noise"] = stack("camera.noise", lambda g, o: g.standard_normal(out=o))
    if _any_positive(cfg.dropout_prob):
        draws["dropout"] = stack("camera.dropout", lambda g, o: g.random(out=o))
    if _any_positive(cfg.jitter_s):
        draws["jitter"] = stack("camera.jitter", lambda g, o: g.standard_normal(out=o))
    if _any_positive(cfg.latency_jitter_s):
        draws["latency"] = stack("camera.latency", lambda g, o: g.standard_exponential(out=o))
    if _any_positive(cfg.wander_rad):
        draws["wander"] = stack("camera.wander", lambda g, o: g.standard_normal(out=o))
    if _any_positive(cfg.outlier_prob) and _any_positive(cfg.outlier_rad):
        u = np.stack([g.random((2, n)) for g in rng_for("camera.outliers")])
        draws["outliers"] = u
    if cfg.bursts is not None and _any_positive(cfg.bursts.loss_rate):
        draws["bursts"] = stack("camera.bursts", lambda g, o: g.random(out=o))
    return draws


def frame_offsets(cfg: CameraConfig, draws: dict[str, np.ndarray], batch: int, n: int) -> np.ndarray | float:
    """Bank-independent error of every frame: bias + noise + wander + wild readings.

    Returns ``(batch, n)`` rad, or the bias alone (a float or ``(batch, 1)``)
    when no random stage is on. Parameters may be per run.
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
        return column(cfg.bias_rad)
    total = parts[0] + column(cfg.bias_rad)
    for p in parts[1:]:
        total += p
    return total


def frame_losses(cfg: CameraConfig, draws: dict[str, np.ndarray], batch: int) -> np.ndarray | None:
    """Lost-frame mask ``(batch, n)`` from independent and bursty losses, or None."""
    lost = None
    if "dropout" in draws:
        lost = stages.independent_losses(draws["dropout"], cfg.dropout_prob)
    if "bursts" in draws:
        b = stages.burst_losses(draws["bursts"], cfg.bursts.loss_rate, cfg.bursts.mean_burst_frames)
        lost = b if lost is None else lost | b
    return lost


def read_frames(
    bank: np.ndarray, cfg: CameraConfig, offset, centres: np.ndarray | None = None, rows=None
) -> tuple[np.ndarray, np.ndarray, np.ndarray | None]:
    """Readings, in-range flags and confidence for frames whose (exposed) bank is ``bank``.

    ``offset`` is the frames' bank-independent error (see :func:`frame_offsets`).
    Per-run parameters are taken at the batch rows ``rows`` (an index array
    that broadcasts against ``bank``). Losses are applied by the caller.
    Returns ``(reading, in_range, confidence)``; confidence is ``None``
    without a classifier.
    """
    value = bank * _at(cfg.scale, rows) + offset
    conf = None
    c = cfg.classifier
    if c is not None:
        if centres is None:
            centres = stages.class_centres(c.class_width_rad, float(np.max(cfg.range_rad)))
        value, conf = stages.classify(value, centres, c.class_width_rad, c.sharpness, c.decode)
    value = quantize(value, _at(cfg.quantization_rad, rows))
    value, ok = stages.limit_range(value, _at(cfg.range_rad, rows), cfg.beyond_range)
    return value, ok, conf


# ------------------------------------------------------------- runtime shell
class CameraReader:
    """The camera's mutable state while a batch runs; the stepping core owns one per batch.

    Built for a batch, then :meth:`start` (re)starts any set of its runs at
    their own time zero: their frame timing, random draws and reader state
    are made afresh from the generators given, so a restarted run reads
    exactly as a fresh run with those generators would. The core hands the
    reader its ``(n_steps + 1, batch)`` record of true bank indexed by each
    run's local step (:attr:`history`) and calls :meth:`read` once per
    controller tick. Nothing runs per base step: at a tick, the newest
    delivered frame's reading is computed from the bank recorded at its
    capture step (a frame is delivered after it is captured, so that row is
    always written). The stages are pure functions of that bank and the
    frame's up-front draws, so evaluating a frame late gives the same
    reading as evaluating it at capture; exposure averaging reads the rows
    before the capture step.

    Every numeric parameter of ``cfg`` may be a ``(batch,)`` array (one value
    per run); ``frame_rate_hz``, ``beyond_range`` and the classifier are
    shared (with a classifier, ``range_rad`` is shared too).
    """

    def __init__(
        self, cfg: CameraConfig, dt: float, n_steps: int, tick_steps: np.ndarray, batch: int
    ) -> None:
        self.cfg = cfg
        self.dt = float(dt)
        self.n_steps = int(n_steps)
        self.tick_steps = np.asarray(tick_steps)
        self.batch = batch
        n = n_frames_for(cfg.frame_rate_hz, self.dt, n_steps)
        self.n_frames = n
        self.set_config(cfg)
        cfg = self.cfg
        # frame-major (n + 1, batch) arrays; the spare last row (index -1)
        # stands for "no frame yet" and is never valid
        self._offset = np.zeros((n + 1, batch))
        self._kept = np.zeros((n + 1, batch), dtype=bool)
        self._cap_step = np.zeros((n + 1, batch), dtype=np.int64)
        self.capture_time = np.full((n + 1, batch), -np.inf)
        self.capture_step = np.zeros((batch, n), dtype=np.int64)
        self.deliver_step = np.zeros((batch, n), dtype=np.int64)
        self._latest = np.full((self.tick_steps.size, batch), -1, dtype=np.int64)
        self.last_value = np.zeros(batch)
        self.last_time = np.full(batch, -np.inf)
        self._rows = np.arange(batch)
        self._prev_idx = np.full(batch, -2, dtype=np.int64)  # -2: nothing evaluated yet
        self._prev_value = np.zeros(batch)
        self._prev_valid = np.zeros(batch, dtype=bool)
        self.history: np.ndarray | None = None
        # image-level stage: its per-run streams are set by start()
        self._image = None if cfg.image is None else cfg.image.start(n, batch, lambda name: [None] * batch)

    def set_config(self, cfg: CameraConfig) -> None:
        """Use ``cfg`` (same frame rate and classifier) from now on; runs take it up when (re)started.

        Per-run values that are read at every frame (scale, quantization,
        range, exposure) apply at once to every run: the caller changes
        only the rows it restarts (see :func:`rollrig.sim.params.put`).
        """
        batch = self.batch
        for obj in (cfg, cfg.bursts):
            for f in dataclasses.fields(obj) if obj is not None else ():
                v = getattr(obj, f.name)
                if np.ndim(v) > 1 or (np.ndim(v) == 1 and len(v) != batch):
                    raise ValueError(
                        f"{f.name}: allowed: a number or one value per run, shape ({batch},); "
                        f"got shape {np.shape(v)}"
                    )
        self.cfg = cfg = _shared_if_equal(cfg)
        if cfg.classifier is not None and np.ndim(cfg.range_rad) and np.ptp(cfg.range_rad) > 0:
            raise ValueError("range_rad: allowed: one value for the whole batch when a classifier is set")
        self._centres = (
            None
            if cfg.classifier is None
            else stages.class_centres(cfg.classifier.class_width_rad, float(np.max(cfg.range_rad)))
        )
        # exposure weights per run, oldest first, padded with zeros at the old end
        exp_s = np.broadcast_to(np.asarray(cfg.exposure_s, dtype=float), (batch,))
        by_value = {float(e): stages.exposure_weights(float(e), self.dt) for e in np.unique(exp_s)}
        ws = [by_value[float(e)] for e in exp_s]
        width = max(w.size for w in ws)
        self._weights = np.zeros((width, batch))
        for r, w in enumerate(ws):
            self._weights[width - w.size :, r] = w
        same = bool(np.all(self._weights == self._weights[:, :1]))
        self._w_shared = [float(x) for x in self._weights[:, 0]] if same and batch else None

    def start(self, rows: np.ndarray, rng_for: RngFor) -> None:
        """(Re)start the runs ``rows``: new timing plan and draws from ``rng_for`` (one generator per row)."""
        rows = np.asarray(rows, dtype=np.int64)
        m = rows.size
        if m == 0:
            return
        cfg = take_rows(self.cfg, rows)
        n = self.n_frames
        draws = frame_draws(cfg, n, rng_for)
        plan = plan_frames(
            cfg.frame_rate_hz,
            self.dt,
            self.n_steps,
            m,
            latency_s=cfg.latency_s,
            jitter_eps=draws.get("jitter"),
            jitter_s=cfg.jitter_s,
            latency_extra_s=(
                None if "latency" not in draws else column(cfg.latency_jitter_s) * draws["latency"]
            ),
        )
        cols = slice(None) if m == self.batch else rows  # every run: plain slices (fast)
        self.capture_step[cols] = plan.capture_step
        self.deliver_step[cols] = plan.deliver_step
        self._latest[:, cols] = plan.latest_delivered(self.tick_steps)
        off = frame_offsets(cfg, draws, m, n)
        self._offset[:n, cols] = np.asarray(off).T if np.ndim(off) == 2 else np.asarray(off).reshape(-1)
        lost = frame_losses(cfg, draws, m)
        self._kept[:n, cols] = True if lost is None else ~lost.T
        self._cap_step[:n, cols] = plan.capture_step.T
        self.capture_time[:n, cols] = plan.capture_step.T * self.dt
        self.last_value = self.last_value.copy()  # new arrays: observations handed out keep theirs
        self.last_value[cols] = 0.0
        self.last_time = self.last_time.copy()
        self.last_time[cols] = -np.inf
        self._prev_idx[rows] = -2
        if self._image is not None:
            self._image.restart(rows, rng_for)

    @property
    def plan(self) -> FramePlan:
        """The batch's current timing plan (capture and delivery steps, ``(batch, n_frames)``)."""
        return FramePlan(capture_step=self.capture_step, deliver_step=self.deliver_step)

    def _evaluate(self, frames, rows):
        """Reading, validity and confidence of frames, from the bank record."""
        w = self._weights
        # frame-major (n + 1, batch) arrays, gathered through flat views (frame -1 wraps to the spare row)
        flat = frames * self.batch + rows
        cap = self._cap_step.reshape(-1)[flat]
        if w.shape[0] == 1:
            bank = self.history[cap, rows]
        else:  # one gather per base step of the exposure (few), newest first
            wr = self._w_shared
            if wr is None:  # exposure per run: each run's own weights
                wr = [w[i, rows] for i in range(w.shape[0])]
            bank = wr[-1] * self.history[cap, rows]
            for i in range(1, w.shape[0]):
                bank += wr[-1 - i] * self.history[np.maximum(cap - i, 0), rows]
        if self._image is not None:  # the reader's reading of the rendered picture replaces the bank
            bank, seen = self._image.read(bank, frames, rows)
        value, ok, conf = read_frames(bank, self.cfg, self._offset.reshape(-1)[flat], self._centres, rows)
        ok &= self._kept.reshape(-1)[flat]
        if self._image is not None:
            ok &= seen
        return value, ok, conf

    def read(self, tick, t) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """(bank, valid, age) at a controller tick; updates the reader's state.

        ``tick`` is the local tick index and ``t`` the local time (s), each an
        int/float (every run on one clock) or ``(batch,)`` (each run's own).
        """
        if isinstance(tick, np.ndarray):
            idx = self._latest[np.minimum(tick, self._latest.shape[0] - 1), self._rows]
        else:
            idx = self._latest[tick].copy()  # kept as _prev_idx, which start() edits
        rows = self._rows
        changed = idx != self._prev_idx
        n_new = np.count_nonzero(changed)
        if n_new == 0:  # same frames as the last tick
            value, valid = self._prev_value, self._prev_valid
        elif n_new == rows.size:
            value, valid, _ = self._evaluate(idx, rows)
        else:  # evaluate only the runs whose newest frame changed
            new = changed.nonzero()[0]
            value, valid = self._prev_value.copy(), self._prev_valid.copy()
            value[new], valid[new], _ = self._evaluate(idx[new], new)
        self._prev_idx, self._prev_value, self._prev_valid = idx, value, valid
        if n_new:  # (with the same frames, the last valid reading and its time are unchanged)
            self.last_value = np.where(valid, value, self.last_value)
            self.last_time = np.where(valid, self.capture_time[idx, rows], self.last_time)
        return self.last_value, valid, t - self.last_time

    def frame_readings(self) -> tuple[np.ndarray, np.ndarray, np.ndarray | None]:
        """Every frame's reading, validity and confidence, ``(batch, n_frames)``.

        Computed from the bank record (call after the run); frames captured
        after the last recorded step are invalid.
        """
        frames = np.arange(self.n_frames)[:, None]
        value, ok, conf = self._evaluate(frames, self._rows[None, :])
        return value.T.copy(), ok.T.copy(), None if conf is None else conf.T.copy()
