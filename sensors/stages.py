"""Pure stages of the camera reader's error pipeline, over batch arrays.

Each stage is a small function of its random draws (made up front, one
stream per stage) and its parameters; none keeps state. The reader
(:mod:`sensors.camera`) composes them. Arrays are batch-first,
``(batch, n_frames)``; a parameter given per run is a ``(batch,)`` array and
broadcasts along frames.

Statistics each stage is built to reproduce (and is tested against):

* white noise: std ``σ``;
* first-order Gauss–Markov: stationary std ``σ``, autocorrelation
  ``exp(-|lag|/τ)`` — recursion ``x⁺ = a x + σ √(1−a²) ε``, ``a = exp(−Δt/τ)``
  (textbook identity, see docs/references.md);
* rounding quantiser of step ``q``: error variance ``q²/12`` on a moving
  signal (Widrow, Kollár & Liu 1996); a fixed bias on a held angle;
* two-state bursty loss chain: stationary loss rate ``p/(p+r)``, mean burst
  length ``1/r`` (Gilbert–Elliott model);
* classification-style reader: ``best`` decoding is a rounding quantiser of
  the class width; ``weighted`` decoding is smooth, biased towards class
  centres and compressed near the ends of the class range.
"""

from __future__ import annotations

import numpy as np

__all__ = [
    "white_noise",
    "first_order_recursion",
    "gauss_markov",
    "outlier_offsets",
    "quantize",
    "classify",
    "class_centres",
    "limit_range",
    "independent_losses",
    "burst_chain_probs",
    "burst_losses",
    "exposure_weights",
]


def column(x) -> np.ndarray | float:
    """A per-run parameter as a ``(batch, 1)`` column; scalars pass through."""
    a = np.asarray(x, dtype=float)
    return a[:, None] if a.ndim == 1 else float(a)


def white_noise(eps: np.ndarray, std) -> np.ndarray:
    """Independent noise ``std·ε``; ``eps`` standard normal ``(batch, n)``."""
    return column(std) * eps


def first_order_recursion(u: np.ndarray, a: float, y_prev: np.ndarray | float | None = None) -> np.ndarray:
    """``y[k] = a·y[k−1] + u[k]`` along the last axis, vectorised over the others.

    ``y[−1]`` is ``y_prev`` (0 if not given). A loop over samples with every
    run in each step: for batches it is several times faster than
    ``scipy.signal.lfilter`` (and keeps scipy.signal's ~1 s import off the
    start-up path), and each run's numbers do not depend on the batch size.
    """
    yt = np.array(np.moveaxis(np.asarray(u, dtype=float), -1, 0), copy=True)  # (n, ...)
    if yt.shape[0] == 0:
        return np.moveaxis(yt, 0, -1)
    if y_prev is not None:
        yt[0] += a * np.asarray(y_prev, dtype=float)
    for k in range(1, yt.shape[0]):
        yt[k] += a * yt[k - 1]
    return np.moveaxis(yt, 0, -1)


def gauss_markov(eps: np.ndarray, std, tau_s, step_s: float) -> np.ndarray:
    """First-order Gauss–Markov sequence, started in its stationary state.

    Parameters
    ----------
    eps : (batch, n) standard normal draws
    std : float or (batch,), same unit as the output
        Stationary standard deviation.
    tau_s : s, float or (batch,)
        Correlation time (autocorrelation ``exp(-lag/τ)``).
    step_s : s
        Spacing of the sequence's samples.

    Notes
    -----
    ``x₀ = σ ε₀`` and ``x⁺ = a x + σ √(1−a²) ε`` with ``a = exp(−step/τ)``
    (textbook identity; docs/references.md, "Sensor statistics"). The
    recursion runs along the sample axis, vectorised over runs; a per-run
    ``τ`` gives each run its own ``a``.
    """
    eps = np.asarray(eps, dtype=float)
    tau = np.asarray(tau_s, dtype=float)
    a = np.exp(-step_s / tau)  # numpy on scalars and arrays alike: one arithmetic for both
    a_col = a[:, None] if a.ndim == 1 else a
    x = np.sqrt(1.0 - a_col * a_col) * eps
    if eps.shape[-1] == 0:
        return x
    x[..., 0] = eps[..., 0]  # stationary start
    x = first_order_recursion(x, a)
    return column(std) * x


def outlier_offsets(u_hit: np.ndarray, u_size: np.ndarray, prob, size) -> np.ndarray:
    """Offsets of occasional wild readings.

    A frame is wild with probability ``prob``; its offset has a random sign and
    a magnitude uniform on ``[size/2, 3·size/2]`` (mean ``size``).
    ``u_hit`` and ``u_size`` are uniform draws on ``[0, 1)``.
    """
    hit = u_hit < column(prob)
    # u_size in [0,1): sign from the first half, magnitude from the position
    sign = np.where(u_size < 0.5, -1.0, 1.0)
    mag = 0.5 + 2.0 * np.where(u_size < 0.5, u_size, u_size - 0.5)
    return np.where(hit, sign * mag * column(size), 0.0)


#: Steps at or below this (rad) round nothing measurable; they are no rounding, so ``x / step``
#: cannot overflow (a step of 1e-320 made readings infinite, hence lost frames).
_NO_ROUNDING_RAD = 1e-12


def quantize(x: np.ndarray, step) -> np.ndarray:
    """Round to the nearest multiple of ``step`` (no-op where ``step <= 1e-12`` rad).

    ``step`` is a float or an array that broadcasts against ``x`` (per-run values).
    """
    if isinstance(step, float | int):  # np.rint rounds half to even, as np.round does
        return x if step <= _NO_ROUNDING_RAD else np.rint(x / step) * step
    s = np.asarray(step, dtype=float)
    if s.ndim == 0:
        return x if s <= _NO_ROUNDING_RAD else np.rint(x / s) * s
    rounds = s > _NO_ROUNDING_RAD
    if not np.any(rounds):
        return x
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        return np.where(rounds, np.rint(x / s) * s, x)


def class_centres(width: float, range_: float) -> np.ndarray:
    """Class centres ``k·width`` covering ``[-range, range]``."""
    n = int(np.floor(range_ / width + 1e-9))
    return np.arange(-n, n + 1) * width


def classify(
    x: np.ndarray, centres: np.ndarray, width: float, sharpness: float, decode: str
) -> tuple[np.ndarray, np.ndarray]:
    """A classification-style reader: score angle classes, decode a reading.

    Scores are a softmax over classes of ``-sharpness·((x - c)/width)²``.

    Parameters
    ----------
    x : (m,) rad
        Angle the reader perceives.
    centres : (n_c,) rad
        Class centres.
    width : rad
        Class width.
    sharpness : 1
        Score sharpness (larger: scores concentrate on the nearest class).
    decode : {"best", "weighted"}
        ``best``: centre of the top-scoring class (steps of ``width``);
        ``weighted``: score-weighted mean of the centres.

    Returns
    -------
    reading : (m,) rad
    confidence : (m,) 1
        Score of the top class.
    """
    x = np.asarray(x, dtype=float)
    lo, hi = np.rint(centres[0] / width), np.rint(centres[-1] / width)
    u = x / width
    near = np.clip(np.rint(u), lo, hi)
    d = u - near
    # weights relative to the nearest class (m = 0): exp(-s((d-m)² - d²)) =
    # exp(s·m·(2d - m)) ≤ 1 for every class inside the range. Classes farther
    # than K carry < exp(-30) of the top weight and are left out.
    k = min(int(np.ceil(np.sqrt(30.0 / sharpness) + 1.0)), int(hi - lo))
    m = np.arange(-k, k + 1, dtype=float)
    w = np.exp(np.minimum(((2.0 * d)[..., None] - m) * (sharpness * m), 0.0))
    if near.size and (near.min() - k < lo or near.max() + k > hi):  # window passes an end
        j = near[..., None] + m
        w *= (j >= lo) & (j <= hi)
    total = w.sum(-1)
    if decode == "best":
        return near * width, 1.0 / total
    return (near + (w @ m) / total) * width, 1.0 / total


def limit_range(x: np.ndarray, range_, mode: str) -> tuple[np.ndarray, np.ndarray]:
    """Measuring range: ``mode="invalid"`` flags ``|x| > range``; ``"saturate"`` clips.

    ``range_`` is a float or an array that broadcasts against ``x`` (per-run
    values). Returns ``(reading, in_range)``; with ``saturate`` every reading
    is valid.
    """
    range_ = np.asarray(range_, dtype=float)
    if mode == "saturate":
        return np.clip(x, -range_, range_), np.ones(x.shape, dtype=bool)
    return x, np.abs(x) <= range_


def independent_losses(u: np.ndarray, prob) -> np.ndarray:
    """Frames lost independently with probability ``prob`` (float or (batch,))."""
    return u < column(prob)


def burst_chain_probs(loss_rate, mean_burst_frames) -> tuple[np.ndarray, np.ndarray]:
    """Transition probabilities ``(p, r)`` of the two-state loss chain.

    ``r = 1/b`` (mean burst length ``b`` frames) and ``p = π r / (1 − π)``
    (stationary loss rate ``π = p/(p+r)``); Gilbert–Elliott model,
    docs/references.md "Sensor statistics". Needs ``p ≤ 1``.
    """
    pi = np.asarray(loss_rate, dtype=float)
    b = np.asarray(mean_burst_frames, dtype=float)
    r = 1.0 / b
    p = pi * r / (1.0 - pi)
    return p, r


def burst_losses(u: np.ndarray, loss_rate, mean_burst_frames) -> np.ndarray:
    """Lost-frame mask from the two-state good/bad chain (all frames in bad lost).

    ``u`` holds uniform draws ``(batch, n)``; the first frame starts from the
    stationary distribution. The recursion runs over frames, vectorised over
    runs.
    """
    p, r = burst_chain_probs(loss_rate, mean_burst_frames)
    batch, n = u.shape
    p = np.broadcast_to(p, (batch,))
    r = np.broadcast_to(r, (batch,))
    pi = np.broadcast_to(np.asarray(loss_rate, dtype=float), (batch,))
    bad = np.empty((batch, n), dtype=bool)
    if n == 0:
        return bad
    state = u[:, 0] < pi
    bad[:, 0] = state
    stay_good_limit = p  # good -> bad when u < p
    stay_bad_limit = 1.0 - r  # bad stays bad when u < 1 - r
    for f in range(1, n):
        state = u[:, f] < np.where(state, stay_bad_limit, stay_good_limit)
        bad[:, f] = state
    return bad


def exposure_weights(exposure_s: float, step_s: float) -> np.ndarray:
    """Trapezoid weights of the base-step samples over one exposure.

    The exposure ends at the capture step and lasts ``round(exposure/step)``
    steps; the trapezoid rule is exact for a bank angle that changes linearly
    over the exposure, so the reading lags by half the exposure time.
    Returns ``(m + 1,)`` weights, oldest first, summing to 1 (``[1]`` for 0).
    """
    m = int(round(exposure_s / step_s))
    if m <= 0:
        return np.ones(1)
    w = np.ones(m + 1)
    w[0] = w[-1] = 0.5
    return w / m
