"""Response metrics of a batch of roll-hold runs.

Pure functions over batch-first arrays: every physical array is
``(batch, n_t)`` on a shared time grid ``t`` of shape ``(n_t,)`` and every
metric comes back as a ``(batch,)`` array. Angles are radians and times are
seconds; :data:`METRIC_INFO` says how to show each metric to a person.

Conventions
-----------
* A value that is never reached (not settled by the end of the segment, 90 %
  never reached, the limit never exceeded) is ``np.inf``.
* An undefined value is also ``np.inf`` (the rise time or overshoot of a
  zero-size step), so no NaN comes out of finite input and no division by
  zero happens.
* In :func:`evaluate`, a run that diverged has every metric whose evaluation
  window reaches the divergence time set to ``np.inf`` (the worst value, as
  every such metric is larger-is-worse); the safety metrics describe the
  divergence itself. The Monte Carlo statistics (:mod:`sim.stats`) drop
  diverged runs and count them.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from rollrig.sim.trace import Trace

__all__ = [
    "StepSegment",
    "MetricSpec",
    "MetricInfo",
    "METRIC_INFO",
    "AT_LIMIT_TOL_FRAC",
    "step_metrics",
    "hold_metrics",
    "actuator_metrics",
    "safety_metrics",
    "evaluate_steps",
    "evaluate",
]

#: A signal is "at" a limit when it is within this fraction of it (0.5 %).
AT_LIMIT_TOL_FRAC = 0.005

#: Steps smaller than this (rad) are treated as zero-size.
_ZERO_STEP_RAD = 1e-12

#: Fraction of a step segment, at its end, averaged for the steady-state error.
_SSE_TAIL_FRAC = 0.1


# --------------------------------------------------------------------- specs
@dataclass(frozen=True)
class StepSegment:
    """One commanded bank step and the window it is judged over.

    Parameters
    ----------
    t_step_s : float, s
        Time the command steps.
    t_end_s : float, s
        End of the judging window (usually the next command change).
    bank_from_rad, bank_to_rad : float, rad
        Command before and after the step.
    """

    t_step_s: float
    t_end_s: float
    bank_from_rad: float
    bank_to_rad: float

    def __post_init__(self) -> None:
        if not (np.isfinite(self.t_step_s) and np.isfinite(self.t_end_s)):
            raise ValueError("StepSegment: t_step_s and t_end_s must be finite")
        if not self.t_end_s > self.t_step_s:
            raise ValueError(
                f"StepSegment: t_end_s ({self.t_end_s}) must be after t_step_s ({self.t_step_s})"
            )
        if not (np.isfinite(self.bank_from_rad) and np.isfinite(self.bank_to_rad)):
            raise ValueError("StepSegment: bank_from_rad and bank_to_rad must be finite")

    @property
    def size_rad(self) -> float:
        """Step size ``bank_to - bank_from`` (rad)."""
        return self.bank_to_rad - self.bank_from_rad


@dataclass(frozen=True)
class MetricSpec:
    """What to measure in a trace.

    Parameters
    ----------
    steps : tuple of StepSegment
        Commanded steps; empty for a pure hold.
    settle_band_frac : float or None
        Settling band as a fraction of the step size (e.g. 0.05), or ``None``.
    settle_band_rad : float or None, rad
        Settling band as an absolute half-width, or ``None``. Exactly one of
        the two bands is set.
    hold_band_rad : float, rad
        Half-width of the band for "time outside band" (error against the
        command).
    bank_limit_rad : float, rad
        Safety limit on ``|bank|``.
    aileron_limit_rad : float, rad
        Aileron position limit (``inf`` if none).
    aileron_rate_limit_rad_s : float, rad/s
        Aileron rate limit (``inf`` if none).
    """

    steps: tuple[StepSegment, ...]
    settle_band_frac: float | None
    settle_band_rad: float | None
    hold_band_rad: float
    bank_limit_rad: float
    aileron_limit_rad: float
    aileron_rate_limit_rad_s: float

    def __post_init__(self) -> None:
        if (self.settle_band_frac is None) == (self.settle_band_rad is None):
            raise ValueError("MetricSpec: set exactly one of settle_band_frac, settle_band_rad")
        if self.settle_band_frac is not None and not 0.0 < self.settle_band_frac < 1.0:
            raise ValueError(f"MetricSpec: settle_band_frac {self.settle_band_frac} outside (0, 1)")
        if self.settle_band_rad is not None and not (0.0 < self.settle_band_rad < np.inf):
            raise ValueError(f"MetricSpec: settle_band_rad {self.settle_band_rad} must be > 0")
        for name in ("hold_band_rad", "bank_limit_rad"):
            v = getattr(self, name)
            if not 0.0 < v < np.inf:
                raise ValueError(f"MetricSpec: {name} {v} must be finite and > 0")
        for name in ("aileron_limit_rad", "aileron_rate_limit_rad_s"):
            v = getattr(self, name)
            if not v > 0.0:
                raise ValueError(f"MetricSpec: {name} {v} must be > 0 (inf for none)")

    def band_for(self, seg: StepSegment) -> float:
        """Settling band half-width (rad) for one segment."""
        if self.settle_band_rad is not None:
            return float(self.settle_band_rad)
        return float(self.settle_band_frac) * abs(seg.size_rad)


@dataclass(frozen=True)
class MetricInfo:
    """How to show one metric.

    Parameters
    ----------
    label : str
        Column label for tables.
    unit : str
        Display unit.
    scale : float
        Factor from the SI value to the display value (rad -> deg: 180/pi).
    larger_is_worse : bool
        Direction of "worse" (for the worst run and pass rules).
    kind : str
        ``"value"`` for a number, ``"flag"`` for a bool per run (summarise
        with :func:`sim.stats.pass_fraction`).
    description : str
        One-line definition.
    """

    label: str
    unit: str
    scale: float
    larger_is_worse: bool
    kind: str
    description: str


_DEG = 180.0 / np.pi

METRIC_INFO: dict[str, MetricInfo] = {
    # step metrics (evaluate: worst over the non-zero steps)
    "rise_time_s": MetricInfo(
        "rise time",
        "s",
        1.0,
        True,
        "value",
        "10-90 % rise time of the step (inf if 90 % never reached or zero-size step)",
    ),
    "settling_time_s": MetricInfo(
        "settling time",
        "s",
        1.0,
        True,
        "value",
        "time after the step after which |bank - target| stays within the band "
        "until the segment end (inf if not settled)",
    ),
    "overshoot_pct": MetricInfo(
        "overshoot",
        "%",
        1.0,
        True,
        "value",
        "largest excursion beyond the target, in the step direction, in % of the step size",
    ),
    "steady_state_error_rad": MetricInfo(
        "steady-state error",
        "deg",
        _DEG,
        True,
        "value",
        "|mean(bank - target)| over the last 10 % of the segment",
    ),
    "peak_bank_rad": MetricInfo(
        "peak bank",
        "deg",
        _DEG,
        True,
        "value",
        "largest |bank| within the step segment",
    ),
    "itae": MetricInfo(
        "ITAE",
        "deg s^2",
        _DEG,
        True,
        "value",
        "integral of (t - t_step)|bank - target| dt over the segment",
    ),
    # hold / tracking metrics (whole record, error against the command)
    "rms_error_rad": MetricInfo(
        "RMS error",
        "deg",
        _DEG,
        True,
        "value",
        "time-RMS of bank - command over the record",
    ),
    "max_abs_error_rad": MetricInfo(
        "max |error|",
        "deg",
        _DEG,
        True,
        "value",
        "largest |bank - command| over the record",
    ),
    "max_abs_bank_rad": MetricInfo(
        "max |bank|",
        "deg",
        _DEG,
        True,
        "value",
        "largest |bank| over the record (hold_metrics only)",
    ),
    "time_outside_band_s": MetricInfo(
        "time outside band",
        "s",
        1.0,
        True,
        "value",
        "total time with |bank - command| > hold band",
    ),
    # actuator metrics
    "aileron_rms_rad": MetricInfo(
        "aileron RMS",
        "deg",
        _DEG,
        True,
        "value",
        "time-RMS of the aileron position",
    ),
    "pct_time_at_limit": MetricInfo(
        "time at aileron limit",
        "%",
        1.0,
        True,
        "value",
        "% of time with |aileron| within 0.5 % of its position limit",
    ),
    "pct_time_at_rate_limit": MetricInfo(
        "time at aileron rate limit",
        "%",
        1.0,
        True,
        "value",
        "% of time with |d aileron/dt| within 0.5 % of its rate limit",
    ),
    # safety metrics
    "peak_abs_bank_rad": MetricInfo(
        "peak |bank|",
        "deg",
        _DEG,
        True,
        "value",
        "largest |bank| before divergence (inf if diverged)",
    ),
    "limit_exceeded": MetricInfo(
        "bank limit exceeded",
        "",
        1.0,
        True,
        "flag",
        "|bank| went above the bank limit (or the run diverged)",
    ),
    "first_exceedance_s": MetricInfo(
        "first limit exceedance",
        "s",
        1.0,
        False,
        "value",
        "first time |bank| > bank limit (inf if never); earlier is worse",
    ),
    "diverged": MetricInfo(
        "diverged",
        "",
        1.0,
        True,
        "flag",
        "the run was declared diverged",
    ),
    "diverged_at_s": MetricInfo(
        "diverged at",
        "s",
        1.0,
        False,
        "value",
        "time the run was declared diverged (inf if not); earlier is worse",
    ),
}

_STEP_KEYS = (
    "rise_time_s",
    "settling_time_s",
    "overshoot_pct",
    "steady_state_error_rad",
    "peak_bank_rad",
    "itae",
)


# ------------------------------------------------------------------- helpers
def _as_2d(y: np.ndarray, name: str, n_t: int) -> np.ndarray:
    y = np.asarray(y, dtype=float)
    if y.ndim == 1:
        y = y[None, :]
    if y.ndim != 2 or y.shape[1] != n_t:
        raise ValueError(f"{name} must have shape (batch, {n_t}); got {y.shape}")
    return y


def _check_t(t: np.ndarray) -> np.ndarray:
    t = np.asarray(t, dtype=float)
    if t.ndim != 1 or t.size < 2:
        raise ValueError("t must be a 1-D time grid with at least 2 samples")
    if not np.all(np.diff(t) > 0):
        raise ValueError("t must be strictly increasing")
    return t


def _per_run(v, batch: int, name: str) -> np.ndarray:
    v = np.asarray(v, dtype=float)
    try:
        return np.broadcast_to(v, (batch,)).astype(float)
    except ValueError as exc:
        raise ValueError(f"{name} must be a scalar or shape ({batch},)") from exc


def _first_crossing(t: np.ndarray, x: np.ndarray, level: np.ndarray, strict: bool) -> np.ndarray:
    """Interpolated time of the first upward crossing of ``level`` by ``x``.

    ``x`` is ``(batch, m)`` on grid ``t`` ``(m,)``; ``level`` is ``(batch,)``.
    Crossing means ``x > level`` (strict) or ``x >= level``. If the first
    sample already crosses, its time is returned; ``inf`` if never.
    """
    lv = level[:, None]
    hit = x > lv if strict else x >= lv
    any_hit = hit.any(axis=1)
    k = np.argmax(hit, axis=1)
    rows = np.arange(x.shape[0])
    km1 = np.maximum(k - 1, 0)
    xa = x[rows, km1]
    xb = x[rows, k]
    # xa is below the level and xb at/above it, so xb - xa > 0 where k > 0
    denom = np.where(k > 0, xb - xa, 1.0)
    frac = np.where(k > 0, (level - xa) / denom, 0.0)
    frac = np.clip(frac, 0.0, 1.0)
    tc = t[km1] + frac * (t[k] - t[km1])
    return np.where(any_hit, tc, np.inf)


def _trapezoid(y: np.ndarray, t: np.ndarray) -> np.ndarray:
    """Trapezoid rule along the last axis of ``y`` ``(batch, n)`` over ``t`` ``(n,)``.

    The same sum as ``np.trapezoid`` (``Σ Δt (y_k + y_k+1) / 2``) with one
    temporary instead of three (it runs over every sample of large batches).
    """
    tmp = y[:, 1:] + y[:, :-1]
    tmp *= np.diff(t)
    return 0.5 * tmp.sum(axis=1)


def _window(t: np.ndarray, t0: float, t1: float) -> slice:
    """Index slice of the samples with ``t0 <= t <= t1`` (tiny tolerance)."""
    tol = 1e-9 * max(1.0, abs(t[-1]))
    i0 = int(np.searchsorted(t, t0 - tol, side="left"))
    i1 = int(np.searchsorted(t, t1 + tol, side="right"))
    return slice(i0, i1)


# ------------------------------------------------------------- step metrics
def step_metrics(
    t: np.ndarray,
    y: np.ndarray,
    t_step: float,
    y0,
    y1,
    t_end: float,
    band_abs,
) -> dict[str, np.ndarray]:
    """Step-response metrics of a batch of bank histories.

    Judged on the samples with ``t_step <= t <= t_end`` (``t_end`` is clipped
    to the end of the grid). Crossing times are linearly interpolated between
    samples.

    Parameters
    ----------
    t : (n_t,) s
        Time grid.
    y : (batch, n_t) rad
        Bank angle.
    t_step : float, s
        Time of the step.
    y0, y1 : float or (batch,) rad
        Bank before the step (commanded) and the step target.
    t_end : float, s
        End of the segment.
    band_abs : float or (batch,) rad
        Settling band half-width around ``y1``.

    Returns
    -------
    dict of (batch,) float arrays
        ``rise_time_s``: time from the first 10 % crossing to the first 90 %
        crossing of the step ``y0 -> y1``; ``inf`` if 90 % is never reached
        or the step has zero size.
        ``settling_time_s``: time after ``t_step`` after which
        ``|y - y1| <= band_abs`` holds until ``t_end``; ``inf`` if the last
        sample is outside the band.
        ``overshoot_pct``: ``100 * max(0, max((y - y1) * sign(y1 - y0))) /
        |y1 - y0|``; ``inf`` for a zero-size step.
        ``steady_state_error_rad``: ``|mean(y - y1)|`` over the samples in the
        last 10 % of the segment.
        ``peak_bank_rad``: ``max |y|`` over the segment.
        ``itae``: trapezoidal ``integral (t - t_step) |y - y1| dt`` (rad s^2).
    """
    t = _check_t(t)
    y = _as_2d(y, "y", t.size)
    batch = y.shape[0]
    y0 = _per_run(y0, batch, "y0")
    y1 = _per_run(y1, batch, "y1")
    band = _per_run(band_abs, batch, "band_abs")
    if np.any(band < 0):
        raise ValueError("band_abs must be >= 0")
    t_end = min(float(t_end), float(t[-1]))
    if not t_end > t_step:
        raise ValueError(f"step segment [{t_step}, {t_end}] s does not lie on the time grid")
    w = _window(t, t_step, t_end)
    ts = t[w]
    ys = y[:, w]
    if ts.size < 2:
        raise ValueError(f"step segment [{t_step}, {t_end}] s holds fewer than 2 samples")

    dy = y1 - y0
    nonzero = np.abs(dy) > _ZERO_STEP_RAD
    safe_dy = np.where(nonzero, dy, 1.0)
    progress = (ys - y0[:, None]) / safe_dy[:, None]  # 0 at y0, 1 at y1

    # rise time (10-90 %)
    t10 = _first_crossing(ts, progress, np.full(batch, 0.1), strict=False)
    t90 = _first_crossing(ts, progress, np.full(batch, 0.9), strict=False)
    reached = nonzero & np.isfinite(t90)  # t10 <= t90 is then finite too
    rise = np.full(batch, np.inf)
    rise[reached] = t90[reached] - t10[reached]

    # settling time: last sample outside the band, then interpolate re-entry
    err = np.abs(ys - y1[:, None])
    outside = err > band[:, None]
    m = ts.size
    any_out = outside.any(axis=1)
    j = m - 1 - np.argmax(outside[:, ::-1], axis=1)  # last outside index
    rows = np.arange(batch)
    jn = np.minimum(j + 1, m - 1)
    ea = err[rows, j]
    eb = err[rows, jn]
    denom = np.where(jn > j, ea - eb, 1.0)  # ea > band >= eb, so positive
    frac = np.clip(np.where(jn > j, (ea - band) / denom, 0.0), 0.0, 1.0)
    t_in = ts[j] + frac * (ts[jn] - ts[j])
    settle = np.where(~any_out, ts[0] - t_step, np.where(j >= m - 1, np.inf, t_in - t_step))

    # overshoot in the step direction
    beyond = np.max(progress, axis=1) - 1.0
    overshoot = np.where(nonzero, 100.0 * np.maximum(beyond, 0.0), np.inf)

    # steady-state error over the last 10 % of the segment
    tail_from = ts[-1] - _SSE_TAIL_FRAC * (ts[-1] - ts[0])
    tail = ts >= tail_from - 1e-12 * max(1.0, abs(ts[-1]))
    # (a boolean index along axis 1 returns a column-major copy: make rows contiguous so the
    # sum runs in the same order for every run whatever the batch size)
    sse = np.abs(np.mean(np.ascontiguousarray(ys[:, tail]) - y1[:, None], axis=1))

    peak = np.max(np.abs(ys), axis=1)
    itae = _trapezoid((ts - t_step)[None, :] * err, ts)

    return {
        "rise_time_s": rise,
        "settling_time_s": settle,
        "overshoot_pct": overshoot,
        "steady_state_error_rad": sse,
        "peak_bank_rad": peak,
        "itae": itae,
    }


# ------------------------------------------------------------- hold metrics
def hold_metrics(t: np.ndarray, y: np.ndarray, y_ref, band_rad: float) -> dict[str, np.ndarray]:
    """Hold (regulation) metrics over the whole record.

    Parameters
    ----------
    t : (n_t,) s
        Time grid.
    y : (batch, n_t) rad
        Bank angle.
    y_ref : float, (batch,) or (batch, n_t) rad
        Reference (the command).
    band_rad : float, rad
        Half-width of the error band.

    Returns
    -------
    dict of (batch,) float arrays
        ``rms_error_rad``: ``sqrt(integral e^2 dt / T)`` (trapezoidal),
        ``e = y - y_ref``, ``T = t[-1] - t[0]``.
        ``max_abs_error_rad``: ``max |e|``.
        ``max_abs_bank_rad``: ``max |y|``.
        ``time_outside_band_s``: sum of the sample intervals
        ``[t_k, t_k+1)`` whose left sample has ``|e_k| > band_rad``.
    """
    t = _check_t(t)
    y = _as_2d(y, "y", t.size)
    ref = np.asarray(y_ref, dtype=float)
    if ref.ndim == 1:  # one reference per run
        ref = ref[:, None]
    e = y - ref
    if e.shape != y.shape:
        raise ValueError("y_ref must broadcast to the shape of y")
    if not band_rad >= 0:
        raise ValueError("band_rad must be >= 0")
    dur = t[-1] - t[0]
    dt = np.diff(t)
    rms = np.sqrt(_trapezoid(e * e, t) / dur)
    out_time = np.sum((np.abs(e[:, :-1]) > band_rad) * dt[None, :], axis=1)
    return {
        "rms_error_rad": rms,
        "max_abs_error_rad": np.max(np.abs(e), axis=1),
        "max_abs_bank_rad": np.max(np.abs(y), axis=1),
        "time_outside_band_s": out_time,
    }


# --------------------------------------------------------- actuator metrics
def actuator_metrics(
    t: np.ndarray,
    aileron: np.ndarray,
    limit_rad: float,
    rate_limit_rad_s: float,
    tol_frac: float = AT_LIMIT_TOL_FRAC,
) -> dict[str, np.ndarray]:
    """How hard the aileron works.

    Parameters
    ----------
    t : (n_t,) s
        Time grid.
    aileron : (batch, n_t) rad
        Aileron position.
    limit_rad : float, rad
        Position limit (``inf`` if none).
    rate_limit_rad_s : float, rad/s
        Rate limit (``inf`` if none).
    tol_frac : float
        "At the limit" means within this fraction of it (default 0.5 %).

    Returns
    -------
    dict of (batch,) float arrays
        ``aileron_rms_rad``: time-RMS (trapezoidal) of the position.
        ``pct_time_at_limit``: 100 x the fraction of the sample intervals
        whose left sample has ``|aileron| >= (1 - tol_frac) * limit_rad``.
        ``pct_time_at_rate_limit``: 100 x the fraction of intervals whose
        finite-difference rate has ``|rate| >= (1 - tol_frac) *
        rate_limit_rad_s``.
    """
    t = _check_t(t)
    a = _as_2d(aileron, "aileron", t.size)
    if not (limit_rad > 0 and rate_limit_rad_s > 0):
        raise ValueError("limit_rad and rate_limit_rad_s must be > 0 (inf for none)")
    if not 0.0 <= tol_frac < 1.0:
        raise ValueError("tol_frac must be in [0, 1)")
    dur = t[-1] - t[0]
    dt = np.diff(t)
    rms = np.sqrt(_trapezoid(a * a, t) / dur)
    at_pos = np.abs(a[:, :-1]) >= (1.0 - tol_frac) * limit_rad
    rate = np.diff(a, axis=1) / dt[None, :]
    at_rate = np.abs(rate) >= (1.0 - tol_frac) * rate_limit_rad_s
    return {
        "aileron_rms_rad": rms,
        "pct_time_at_limit": 100.0 * np.sum(at_pos * dt, axis=1) / dur,
        "pct_time_at_rate_limit": 100.0 * np.sum(at_rate * dt, axis=1) / dur,
    }


# ----------------------------------------------------------- safety metrics
def safety_metrics(
    t: np.ndarray,
    bank: np.ndarray,
    bank_limit_rad: float,
    diverged_at: np.ndarray | None = None,
) -> dict[str, np.ndarray]:
    """Bank-limit and divergence metrics.

    Only the samples before the divergence time are looked at, so values
    recorded after it (possibly non-finite) do not matter.

    Parameters
    ----------
    t : (n_t,) s
        Time grid.
    bank : (batch, n_t) rad
        Bank angle.
    bank_limit_rad : float, rad
        Safety limit on ``|bank|``.
    diverged_at : (batch,) s or None
        Divergence time per run, ``inf`` if none; ``None`` means no run diverged.

    Returns
    -------
    dict of (batch,) arrays
        ``peak_abs_bank_rad``: ``max |bank|`` before divergence; ``inf`` for a
        diverged run.
        ``limit_exceeded`` (bool): ``|bank| > bank_limit_rad`` at some time,
        or the run diverged.
        ``first_exceedance_s``: interpolated first time ``|bank|`` rises above
        the limit, or the divergence time if earlier; ``inf`` if never.
        ``diverged`` (bool), ``diverged_at_s`` (``inf`` if not diverged).
    """
    t = _check_t(t)
    bank = np.asarray(bank, dtype=float)
    if bank.ndim == 1:
        bank = bank[None, :]
    if bank.ndim != 2 or bank.shape[1] != t.size:
        raise ValueError(f"bank must have shape (batch, {t.size}); got {bank.shape}")
    batch = bank.shape[0]
    if not 0 < bank_limit_rad < np.inf:
        raise ValueError("bank_limit_rad must be finite and > 0")
    if diverged_at is None:
        div_at = np.full(batch, np.inf)
    else:
        div_at = _per_run(diverged_at, batch, "diverged_at")
    diverged = np.isfinite(div_at)
    alive = t[None, :] < div_at[:, None]
    with np.errstate(invalid="ignore"):
        absb = np.where(alive, np.abs(bank), 0.0)  # 0 never exceeds a limit > 0
    peak = np.where(diverged, np.inf, np.max(absb, axis=1))
    first = _first_crossing(t, absb, np.full(batch, float(bank_limit_rad)), strict=True)
    first = np.minimum(first, div_at)
    return {
        "peak_abs_bank_rad": peak,
        "limit_exceeded": np.isfinite(first),
        "first_exceedance_s": first,
        "diverged": diverged,
        "diverged_at_s": div_at.copy(),
    }


# ----------------------------------------------------------------- evaluate
def _alive_rows(a: np.ndarray, t: np.ndarray, div_at: np.ndarray) -> np.ndarray:
    """Run-contiguous copy of ``a`` with the samples at and after each run's divergence set to 0."""
    out = np.array(a, dtype=float, order="C")
    div = np.flatnonzero(np.isfinite(div_at))
    if div.size:
        dead = t[None, :] >= div_at[div, None]
        sub = out[div]
        sub[dead] = 0.0
        out[div] = sub
    return out


def _rows(a: np.ndarray) -> np.ndarray:
    """Each run's samples contiguous in memory.

    Sums along time then run in the same (pairwise) order for every run,
    whatever the batch's size or memory layout, so a run's metrics do not
    depend on the batch or chunk it was simulated in.
    """
    return np.ascontiguousarray(a)


def evaluate_steps(
    trace: Trace, spec: MetricSpec, *, _bank: np.ndarray | None = None
) -> list[dict[str, np.ndarray]]:
    """Step metrics of each non-zero step of ``spec``, in order.

    Zero-size steps are skipped (they are holds). For a diverged run, every
    metric of a segment whose end is at or after the divergence time is
    ``inf``.
    """
    t = np.asarray(trace.t, dtype=float)
    div_at = np.asarray(trace.diverged_at, dtype=float)
    bank = _alive_rows(trace.bank, t, div_at) if _bank is None else _bank
    out = []
    for seg in spec.steps:
        if abs(seg.size_rad) <= _ZERO_STEP_RAD:
            continue
        if seg.t_step_s >= t[-1]:
            raise ValueError(f"step at {seg.t_step_s} s is at or after the end of the trace ({t[-1]} s)")
        m = step_metrics(
            t,
            bank,
            seg.t_step_s,
            seg.bank_from_rad,
            seg.bank_to_rad,
            seg.t_end_s,
            spec.band_for(seg),
        )
        t_end = min(seg.t_end_s, float(t[-1]))
        spoiled = div_at <= t_end
        out.append({k: np.where(spoiled, np.inf, v) for k, v in m.items()})
    return out


def evaluate(trace: Trace, spec: MetricSpec) -> dict[str, np.ndarray]:
    """Every metric of a trace, as ``(batch,)`` arrays.

    Step metrics (keys of :func:`step_metrics`) are present when ``spec`` has
    at least one non-zero step; with several steps each is the **worst over
    the steps** (largest rise time, settling time, overshoot, steady-state
    error, peak bank and ITAE), see :func:`evaluate_steps` for each step.
    Hold metrics are the tracking error against the trace's command over the
    whole record (``rms_error_rad``, ``max_abs_error_rad``,
    ``time_outside_band_s``; ``max_abs_bank_rad`` is left out as it equals
    ``peak_abs_bank_rad``). Actuator metrics use the aileron position. For a
    diverged run all step, hold and actuator metrics are ``inf``; the safety
    metrics describe the divergence.
    """
    t = np.asarray(trace.t, dtype=float)
    div_at = np.asarray(trace.diverged_at, dtype=float)
    diverged = np.isfinite(div_at)
    bank = _alive_rows(trace.bank, t, div_at)
    ail = _alive_rows(trace.aileron, t, div_at)
    cmd = np.asarray(trace.bank_cmd, dtype=float)
    if cmd.ndim == 2 and cmd.shape[0] > 1 and cmd.strides[0] == 0:
        cmd = cmd[:1]  # one command for every run: broadcast it, do not copy it
    else:  # (hold metrics of diverged runs are inf whatever the command after divergence)
        cmd = _rows(cmd)

    result: dict[str, np.ndarray] = {}
    per_step = evaluate_steps(trace, spec, _bank=bank)
    if per_step:
        for k in _STEP_KEYS:
            result[k] = np.max(np.stack([m[k] for m in per_step]), axis=0)

    hold = hold_metrics(t, bank, cmd, spec.hold_band_rad)
    del hold["max_abs_bank_rad"]
    act = actuator_metrics(t, ail, spec.aileron_limit_rad, spec.aileron_rate_limit_rad_s)
    for k, v in {**hold, **act}.items():
        result[k] = np.where(diverged, np.inf, v)

    result.update(safety_metrics(t, bank, spec.bank_limit_rad, div_at))
    return result
