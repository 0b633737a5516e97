"""Fit the camera-reader model to a recorded log.

A log has one row per frame the reader delivered (or failed to deliver):
time stamp, a reference bank angle from an instrument the user trusts, the
reading, and optionally a validity flag. :func:`fit_sensor` estimates

* frame rate and timing jitter: a line through time stamp vs frame number
  (gaps of several periods count as lost frames);
* latency: cross-correlation of the reading with the reference shifted back
  in time, refined to sub-frame by minimising the regression residual (the
  reference is interpolated with a cubic spline). The estimate is the
  *effective* latency: it includes half the exposure and the mean random
  part of the latency;
* bias and scale: least squares of reading on latency-aligned reference;
* quantisation step: from the spacing of distinct readings;
* white noise and wandering error: from the residual's autocovariance
  ``C(0) = σ_w² + σ_g² + q²/12``, ``C(k) = σ_g² exp(−kT/τ)`` (first-order
  Gauss–Markov plus white noise; rounding error variance ``q²/12``, Widrow,
  Kollár & Liu 1996);
* outlier rate: residuals beyond 6 robust standard deviations;
* loss rate and mean burst length: from the sequence of lost frames, with
  the two-state (Gilbert–Elliott) chain's variance for the loss rate's
  uncertainty.

Uncertainties are one standard error, from the usual asymptotic formulas
(noted per quantity), inflated for correlated residuals where it matters.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from scipy.interpolate import CubicSpline
from scipy.optimize import curve_fit, minimize_scalar

__all__ = ["LogProblem", "Estimate", "SensorFit", "fit_sensor", "MIN_FRAMES"]

MIN_FRAMES = 50
_OUTLIER_SIGMAS = 6.0
#: residuals smaller than this are never outliers (0.01°, below any instrument-reading
#: camera's resolution: common practice); without it a reading equal to its reference
#: flags rounding-level residuals as outliers
_MIN_OUTLIER_RAD = math.radians(0.01)
#: the scale the camera model takes (``[sensor] scale``)
_SCALE_RANGE = (0.5, 2.0)


class LogProblem(ValueError):
    """The log cannot be fitted; the message says why in one line."""


@dataclass(frozen=True)
class Estimate:
    """One fitted quantity: value, one standard error, unit, note."""

    value: float
    se: float
    unit: str
    note: str = ""


@dataclass(frozen=True)
class SensorFit:
    """Fitted sensor parameters (SI, radians) and the aligned signals for plots."""

    estimates: dict[str, Estimate]
    bursty: bool
    t: np.ndarray = field(repr=False)
    reading: np.ndarray = field(repr=False)
    predicted: np.ndarray = field(repr=False)
    outlier: np.ndarray = field(repr=False)
    n_rows: int = 0
    n_frames: int = 0

    def __getitem__(self, key: str) -> float:
        return self.estimates[key].value


def _runs(mask: np.ndarray) -> np.ndarray:
    e = np.diff(np.concatenate([[0], mask.astype(np.int8), [0]]))
    return np.flatnonzero(e == -1) - np.flatnonzero(e == 1)


def _frame_timing(t: np.ndarray) -> tuple[np.ndarray, float, float, float, float]:
    """Frame numbers of the rows, period and its SE, jitter and its SE."""
    d = np.diff(t)
    pos = d[d > 0]
    t0 = float(np.median(pos))
    steps = np.maximum(np.rint(d / t0), 1).astype(np.int64)
    fi = np.concatenate([[0], np.cumsum(steps)])
    a = np.polyfit(fi, t, 1)
    resid = t - np.polyval(a, fi)
    period = float(a[0])
    jitter = float(resid.std(ddof=2))
    jitter = 0.0 if jitter < 1e-9 else jitter  # time stamps exactly on a grid
    se_period = jitter / math.sqrt(max(((fi - fi.mean()) ** 2).sum(), 1e-300))
    return fi, period, se_period, jitter, jitter / math.sqrt(2 * max(t.size - 2, 1))


def _losses(lost: np.ndarray) -> tuple[float, float, float, float, float]:
    """Loss rate, its SE, mean burst length, its SE, and the independent-loss burst length."""
    n = lost.size
    pi = float(lost.mean())
    runs = _runs(lost)
    if runs.size == 0:
        return 0.0, 1.0 / n, 0.0, 0.0, 1.0
    mb = float(runs.mean())
    se_mb = float(runs.std(ddof=1) / math.sqrt(runs.size)) if runs.size > 1 else mb
    r = 1.0 / mb
    p = min(pi * r / max(1.0 - pi, 1e-12), 1.0)
    lam = 1.0 - p - r
    # variance of the mean of a two-state chain's indicator (Gilbert–Elliott)
    var = pi * (1 - pi) * (1 + lam) / max(1 - lam, 1e-12) / n
    return pi, math.sqrt(max(var, 0.0)), mb, se_mb, 1.0 / max(1.0 - pi, 1e-12)


def _quant_step(y: np.ndarray) -> tuple[float, float, str]:
    """Rounding step from the spacing of distinct readings (0 when they are not on a grid)."""
    vals = np.unique(np.round(y, 9))
    if vals.size < 3 or vals.size > 0.5 * y.size:
        return 0.0, 0.0, "readings not on a grid"
    gaps = np.diff(vals)
    g0 = float(gaps.min())
    ratio = gaps / g0
    if np.abs(ratio - np.rint(ratio)).max() > 0.05:
        return float(np.median(gaps)), float(gaps.std()), "irregular spacing"
    k = np.rint((vals - vals[0]) / g0)
    a = np.polyfit(k, vals, 1)
    res = vals - np.polyval(a, k)
    se = float(res.std() / math.sqrt(max(((k - k.mean()) ** 2).sum(), 1e-300)))
    return float(a[0]), se, f"{vals.size} distinct readings"


def _autocov(e_frames: np.ndarray, max_lag: int) -> tuple[np.ndarray, np.ndarray]:
    """Autocovariance of a frame series with gaps (NaN), and pair counts."""
    ok = np.isfinite(e_frames)
    x = np.where(ok, e_frames - np.nanmean(e_frames), 0.0)
    w = ok.astype(float)
    c = np.empty(max_lag + 1)
    npairs = np.empty(max_lag + 1)
    for k in range(max_lag + 1):
        npairs[k] = (w[k:] * w[: w.size - k]).sum()
        c[k] = (x[k:] * x[: x.size - k]).sum() / max(npairs[k], 1.0)
    return c, npairs


def _noise_and_wander(e_frames: np.ndarray, period: float, q: float):
    """White noise std, wander std and time (with SEs) from the residual autocovariance."""
    n_ok = int(np.isfinite(e_frames).sum())
    max_lag = int(min(300, max(10, e_frames.size // 10)))
    c, npairs = _autocov(e_frames, max_lag)
    c0 = c[0]
    se_c = c0 / np.sqrt(np.maximum(npairs, 1.0))
    wander = (0.0, 0.0, 0.0, 0.0)
    if c[1] > 4 * se_c[1] and c[1] > 0.02 * c0:
        # fit A·exp(−kT/τ) to the lags while the correlation stays clear of the noise
        stop = (
            int(np.argmax(c[1:] < max(0.1 * c[1], 3 * se_c[1]))) + 1
            if np.any(c[1:] < max(0.1 * c[1], 3 * se_c[1]))
            else max_lag
        )
        lags = np.arange(1, max(stop, 3) + 1)
        rho1 = min(max(c[2] / c[1], 0.05), 0.999) if c[1] > 0 else 0.5
        guess = (c[1] / rho1, -period / math.log(rho1))
        try:
            (amp, tau), cov = curve_fit(
                lambda k, a, tau: a * np.exp(-k * period / tau),
                lags,
                c[lags],
                p0=guess,
                sigma=se_c[lags],
                absolute_sigma=True,
                bounds=([0.0, period / 20], [np.inf, np.inf]),
            )
            se_amp, se_tau = np.sqrt(np.diag(cov))
            # pairs of lags are correlated; inflate by the number of lags used
            infl = math.sqrt(lags.size)
            sg = math.sqrt(amp)
            wander = (sg, infl * se_amp / (2 * sg), float(tau), infl * float(se_tau))
        except (RuntimeError, ValueError):
            wander = (0.0, 0.0, 0.0, 0.0)
    var_w = c0 - wander[0] ** 2 - q * q / 12.0
    sw = math.sqrt(max(var_w, 0.0))
    se_var = c0 * math.sqrt(2.0 / max(n_ok, 1))
    se_w = se_var / (2 * sw) if sw > 0 else math.sqrt(se_var)
    return sw, se_w, wander


def _check(t, ref, y, valid) -> np.ndarray:
    n = t.size
    if n < MIN_FRAMES:
        raise LogProblem(f"too short: {n} rows; allowed: at least {MIN_FRAMES} frames")
    if not np.all(np.isfinite(t)):
        row = int(np.flatnonzero(~np.isfinite(t))[0])
        raise LogProblem(f"time is not a finite number at row {row + 2}; allowed: finite times")
    d = np.diff(t)
    if np.any(d < 0):
        row = int(np.flatnonzero(d < 0)[0]) + 3
        raise LogProblem(f"time goes backwards at row {row}; allowed: non-decreasing time")
    if t[-1] <= t[0]:
        raise LogProblem("time does not advance; allowed: rows spread over time")
    usable = valid & np.isfinite(y) & np.isfinite(ref)
    if not np.any(valid & np.isfinite(y)):
        raise LogProblem("every reading is invalid or empty; allowed: a log with valid readings")
    if np.isfinite(ref).sum() < 10:
        raise LogProblem("the reference column has fewer than 10 numbers; allowed: a reference on most rows")
    if usable.sum() < 30:
        raise LogProblem(
            f"only {int(usable.sum())} rows have both a valid reading and a reference; "
            "allowed: at least 30 (no overlap)"
        )
    frozen = y[usable]
    if frozen.size and np.ptp(frozen) == 0:
        raise LogProblem(
            f"the reading never changes (frozen at {math.degrees(frozen[0]):.4g}°); "
            "allowed: a log where the reading follows the bank angle"
        )
    return usable


def fit_sensor(
    t: np.ndarray,
    reference: np.ndarray,
    reading: np.ndarray,
    valid: np.ndarray | None = None,
    *,
    max_latency_s: float = 2.0,
) -> SensorFit:
    """Fit the camera-reader model to a log (angles in rad, time in s).

    Parameters
    ----------
    t : (n,) s
        Time stamps of the frames (non-decreasing).
    reference : (n,) rad
        Trusted bank angle at each time stamp.
    reading : (n,) rad
        Reader output; NaN where none was given.
    valid : (n,) bool, optional
        Reader's own validity flag (all valid when absent).
    max_latency_s : s
        Longest latency searched.

    Row numbers in messages count like the CSV reader's: the header is row 1,
    the first data row is row 2.

    Raises
    ------
    LogProblem
        Too short, time not monotonic, no valid readings, no overlap, a
        frozen reading, or a reading that does not follow the reference
        (fitted scale outside the model's 0.5 … 2).
    """
    t = np.asarray(t, float)
    ref = np.asarray(reference, float)
    y_all = np.asarray(reading, float)
    valid = np.ones(t.size, bool) if valid is None else np.asarray(valid, bool)
    usable = _check(t, ref, y_all, valid)

    fi, period, se_period, jitter, se_jitter = _frame_timing(t)
    n_frames = int(fi[-1]) + 1
    lost = np.ones(n_frames, bool)
    lost[fi[valid & np.isfinite(y_all)]] = False
    pi, se_pi, mb, se_mb, mb_indep = _losses(lost)
    bursty = mb > mb_indep + 3 * se_mb and pi > 0

    # reference as a smooth function of time (ties in time merged)
    has_ref = np.isfinite(ref)
    tr, first = np.unique(t[has_ref], return_index=True)
    spline = CubicSpline(tr, ref[has_ref][first])
    dspline = spline.derivative()
    tu, y, fu = t[usable], y_all[usable], fi[usable]

    def aligned(tau: float) -> tuple[np.ndarray, np.ndarray]:
        s = tu - tau
        inside = (s >= tr[0]) & (s <= tr[-1])
        return spline(np.clip(s, tr[0], tr[-1])), inside

    # coarse: correlation over a grid of lags
    tau_max = min(max_latency_s, 0.25 * (t[-1] - t[0]))
    grid = np.arange(0.0, tau_max + 1e-12, max(period / 4, 1e-4))
    score = np.full(grid.size, -np.inf)
    for i, tau in enumerate(grid):
        x, inside = aligned(tau)
        if inside.sum() >= 30 and np.std(x[inside]) > 0:
            score[i] = np.corrcoef(x[inside], y[inside])[0, 1] ** 2
    if not np.isfinite(score).any():
        raise LogProblem(
            "reading and reference do not overlap in time or the reference never moves; "
            "allowed: a log where the bank angle changes"
        )
    tau0 = float(grid[int(np.argmax(score))])

    # robust first fit at the coarse lag: outliers by median absolute deviation
    x0, inside0 = aligned(tau0)
    A = np.column_stack([x0, np.ones_like(x0)])
    coef = np.linalg.lstsq(A[inside0], y[inside0], rcond=None)[0]
    r = y - A @ coef
    sig = 1.4826 * np.median(np.abs(r[inside0] - np.median(r[inside0])))
    sig = max(sig, 1e-12)
    outlier = np.abs(r - np.median(r[inside0])) > max(_OUTLIER_SIGMAS * sig, _MIN_OUTLIER_RAD)
    keep0 = inside0 & ~outlier

    def ssr(tau: float) -> float:
        x, inside = aligned(tau)
        m = keep0 & inside
        B = np.column_stack([x[m], np.ones(m.sum())])
        res = y[m] - B @ np.linalg.lstsq(B, y[m], rcond=None)[0]
        return float(res @ res) / max(m.sum(), 1)

    lo, hi = max(0.0, tau0 - period), tau0 + period
    tau = float(minimize_scalar(ssr, bounds=(lo, hi), method="bounded", options={"xatol": 1e-5}).x)

    x, inside = aligned(tau)
    A = np.column_stack([x, np.ones_like(x)])
    m = inside & ~outlier
    if m.sum() < 30:
        raise LogProblem(
            "fewer than 30 readings overlap the reference after the latency shift; "
            "allowed: a longer log (no overlap)"
        )
    coef, *_ = np.linalg.lstsq(A[m], y[m], rcond=None)
    scale, bias = float(coef[0]), float(coef[1])
    resid = y - A @ coef
    # outliers again, now at the refined lag
    sig = max(1.4826 * np.median(np.abs(resid[m] - np.median(resid[m]))), 1e-12)
    outlier = inside & (np.abs(resid - np.median(resid[m])) > max(_OUTLIER_SIGMAS * sig, _MIN_OUTLIER_RAD))
    m = inside & ~outlier
    coef, *_ = np.linalg.lstsq(A[m], y[m], rcond=None)
    scale, bias = float(coef[0]), float(coef[1])
    resid = y - A @ coef
    if not _SCALE_RANGE[0] <= scale <= _SCALE_RANGE[1]:
        raise LogProblem(
            f"the fitted scale {scale:.3g} is outside what the camera model takes "
            f"({_SCALE_RANGE[0]:g} … {_SCALE_RANGE[1]:g}): the reading does not follow the reference; "
            "allowed: a log whose reading tracks the reference bank"
        )
    n_in = int(inside.sum())
    p_out = float(outlier.sum() / max(n_in, 1))
    size_out = float(np.abs(resid[outlier]).mean()) if outlier.any() else 0.0

    q, se_q, q_note = _quant_step(y[m])
    e_frames = np.full(n_frames, np.nan)
    e_frames[fu[m]] = resid[m]
    sw, se_sw, (sg, se_sg, tg, se_tg) = _noise_and_wander(e_frames, period, q)

    # standard errors of the regression, inflated for correlated residuals (AR(1) factor)
    c, _ = _autocov(e_frames, 1)
    rho = float(np.clip(c[1] / c[0], 0.0, 0.99)) if c[0] > 0 else 0.0
    infl = math.sqrt((1 + rho) / (1 - rho))
    s2 = float(resid[m] @ resid[m]) / max(m.sum() - 2, 1)
    cov = s2 * np.linalg.inv(A[m].T @ A[m])
    se_scale, se_bias = (math.sqrt(v) * infl for v in np.diag(cov))
    if sg > 0:  # the wandering error averages out slowly: variance of a GM mean
        a = math.exp(-period / tg)
        se_bias = math.sqrt(se_bias**2 + sg * sg * (1 + a) / (1 - a) / max(m.sum(), 1))
    slope = dspline(tu[m] - tau)
    se_tau = math.sqrt(s2 / max(scale * scale * float(slope @ slope), 1e-300)) * infl

    est = {
        "frame_rate_hz": Estimate(1.0 / period, se_period / period**2, "Hz", "time vs frame number"),
        "jitter_s": Estimate(jitter, se_jitter, "s", "time stamps about that line"),
        "latency_s": Estimate(tau, se_tau, "s", "incl. half the exposure"),
        "bias_rad": Estimate(bias, se_bias, "rad", "regression"),
        "scale": Estimate(scale, se_scale, "1", "regression"),
        "quantization_rad": Estimate(q, se_q, "rad", q_note),
        "noise_rad": Estimate(sw, se_sw, "rad", "residual, q²/12 removed"),
        "wander_rad": Estimate(sg, se_sg, "rad", "residual autocovariance"),
        "wander_time_s": Estimate(tg, se_tg, "s", "residual autocovariance"),
        "outlier_prob": Estimate(
            p_out,
            math.sqrt(max(p_out * (1 - p_out), 1e-12) / max(n_in, 1)),
            "1",
            f"> {_OUTLIER_SIGMAS:g} robust std",
        ),
        "outlier_rad": Estimate(size_out, 0.0, "rad", "mean |residual|"),
        "loss_rate": Estimate(pi, se_pi, "1", "invalid/empty/missing"),
        "mean_burst_frames": Estimate(
            mb, se_mb, "frames", "bursty" if bursty else f"independent: {mb_indep:.2f}"
        ),
    }
    pred = np.full(t.size, np.nan)
    pred[usable] = A @ coef
    full_out = np.zeros(t.size, bool)
    full_out[np.flatnonzero(usable)[outlier]] = True
    return SensorFit(
        estimates=est,
        bursty=bool(bursty),
        t=t,
        reading=y_all,
        predicted=pred,
        outlier=full_out,
        n_rows=int(t.size),
        n_frames=n_frames,
    )
