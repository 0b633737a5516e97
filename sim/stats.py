"""Monte Carlo statistics of per-run metrics.

Rules
-----
* **Diverged runs** are excluded from every statistic of a metric and
  counted in ``n_diverged`` (their metrics are not meaningful). In a pass
  rate they count as failures.
* **Infinite values** (never settled, never reached) are real outcomes and
  are kept. They take part in the percentiles and the worst value, with the
  ordering ``-inf < finite < +inf``: a percentile that interpolates towards an
  infinite sample is that infinity. If any kept value is infinite, the mean
  is that infinity, the standard deviation is ``inf`` and the confidence
  interval is ``(mean, mean)``; ``n_inf`` says how many there were. A mix of
  ``+inf`` and ``-inf`` has no mean and raises ``ValueError``.
* **NaN** among kept values is a bug upstream and raises ``ValueError``.
* With no kept run (all diverged), every statistic is the worst infinity
  (``+inf`` if larger is worse, else ``-inf``) and ``worst_run`` is ``-1``.
  With one kept run the spread is unknown: ``std = inf``, CI ``(-inf, inf)``.
* The mean's interval is the Student-t interval
  ``mean +- t_{0.975, n-1} s / sqrt(n)`` (``scipy.stats.t``); percentiles use
  numpy's default linear method.
* Paired differences (:func:`paired_difference`): the per-run difference of
  one metric between two variants simulated with the same seed and run
  indices (common random numbers), summarised like any metric, so its
  interval is the paired Student-t interval. A pair where either run
  diverged or either value is infinite is left out and counted in
  ``n_diverged``.
* Pass fractions carry the Wilson score interval (Wilson, E. B., 1927,
  "Probable inference, the law of succession, and statistical inference",
  JASA 22:209-212).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import special as _sp  # t and normal quantiles; scipy.stats costs ~1.5 s to import

__all__ = [
    "MetricSummary",
    "PassSummary",
    "summarize",
    "percentile_with_inf",
    "wilson_interval",
    "pass_fraction",
    "paired_difference",
]


@dataclass(frozen=True)
class MetricSummary:
    """Statistics of one metric over a Monte Carlo set (units of the metric).

    Attributes
    ----------
    n : int
        Runs kept (not diverged).
    n_diverged : int
        Runs excluded because they diverged.
    mean, ci95_low, ci95_high, std : float
        Sample mean, its 95 % Student-t interval, sample std (ddof=1).
    p5, p50, p95 : float
        Percentiles (numpy linear method, infinities ordered).
    worst : float
        Largest value if larger is worse, else smallest.
    worst_run : int
        Run index (``run_index`` entry) of the worst value; ``-1`` if ``n == 0``.
    n_inf : int
        Kept runs with an infinite value.
    """

    n: int
    n_diverged: int
    mean: float
    ci95_low: float
    ci95_high: float
    std: float
    p5: float
    p50: float
    p95: float
    worst: float
    worst_run: int
    n_inf: int = 0


@dataclass(frozen=True)
class PassSummary:
    """Fraction of runs that passed a criterion, with its Wilson interval.

    Attributes
    ----------
    n : int
        All runs (diverged included).
    n_pass : int
        Runs that passed and did not diverge.
    fraction : float
        ``n_pass / n``.
    low, high : float
        Wilson score interval at the requested confidence (default 95 %).
    """

    n: int
    n_pass: int
    fraction: float
    low: float
    high: float


def percentile_with_inf(values: np.ndarray, q) -> np.ndarray:
    """Percentiles by numpy's linear method that also accept infinities.

    Equal to ``np.percentile(values, q)`` for finite data. With infinite
    samples the order ``-inf < finite < +inf`` is used and a percentile that
    interpolates with any weight towards an infinite neighbour is that
    infinity (numpy would return NaN for ``inf - inf``).

    Parameters
    ----------
    values : (n,) array, n >= 1, no NaN
    q : float or array of float in [0, 100]
    """
    x = np.sort(np.asarray(values, dtype=float).ravel())
    if x.size == 0:
        raise ValueError("percentile of an empty set")
    qa = np.asarray(q, dtype=float)
    if np.any((qa < 0) | (qa > 100)):
        raise ValueError("percentiles must be in [0, 100]")
    h = (x.size - 1) * qa / 100.0
    lo = np.floor(h).astype(int)
    hi = np.minimum(lo + 1, x.size - 1)
    frac = h - lo
    a = x[lo]
    b = x[hi]
    with np.errstate(invalid="ignore"):
        lerp = a + frac * (b - a)
    same = a == b
    res = np.where(frac == 0, a, np.where(same, a, lerp))
    # a finite, b infinite (or a = -inf, b finite): the infinity wins
    res = np.where((frac > 0) & np.isinf(b) & ~same, b, res)
    res = np.where((frac > 0) & np.isinf(a) & ~same, a, res)
    return res


def summarize(
    values: np.ndarray,
    run_index: np.ndarray,
    larger_is_worse: bool,
    diverged: np.ndarray | None = None,
) -> MetricSummary:
    """Summarise one metric over a Monte Carlo set.

    Parameters
    ----------
    values : (n_runs,) float
        Metric per run (SI units); bools are taken as 0/1.
    run_index : (n_runs,) int
        Run number of each entry (reported as ``worst_run``).
    larger_is_worse : bool
        Direction of "worse".
    diverged : (n_runs,) bool or None
        Runs to exclude and count.

    Returns
    -------
    MetricSummary
        See the module docstring for the rules on divergence and infinities.
    """
    v = np.asarray(values, dtype=float).ravel()
    idx = np.asarray(run_index).ravel()
    if idx.shape != v.shape:
        raise ValueError("values and run_index must have the same length")
    if v.size == 0:
        raise ValueError("summarize needs at least one run")
    if diverged is None:
        div = np.zeros(v.shape, dtype=bool)
    else:
        div = np.asarray(diverged, dtype=bool).ravel()
        if div.shape != v.shape:
            raise ValueError("diverged must have the same length as values")
    keep = ~div
    x = v[keep]
    ix = idx[keep]
    n = int(x.size)
    n_div = int(div.sum())
    if np.any(np.isnan(x)):
        raise ValueError("NaN metric value in a run that did not diverge")

    bad = np.inf if larger_is_worse else -np.inf
    if n == 0:
        return MetricSummary(0, n_div, bad, bad, bad, np.inf, bad, bad, bad, bad, -1, 0)

    is_inf = np.isinf(x)
    n_inf = int(is_inf.sum())
    if n_inf:
        signs = np.unique(np.sign(x[is_inf]))
        if signs.size > 1:
            raise ValueError("metric holds both +inf and -inf; its mean is undefined")
        mean = float(signs[0] * np.inf)
        std = np.inf
        lo_ci = hi_ci = mean
    else:
        mean = float(np.mean(x))
        if n == 1:
            std, lo_ci, hi_ci = np.inf, -np.inf, np.inf
        else:
            std = float(np.std(x, ddof=1))
            half = float(_sp.stdtrit(n - 1, 0.975)) * std / np.sqrt(n)
            lo_ci, hi_ci = mean - half, mean + half

    p5, p50, p95 = (float(p) for p in percentile_with_inf(x, [5.0, 50.0, 95.0]))
    k = int(np.argmax(x)) if larger_is_worse else int(np.argmin(x))
    return MetricSummary(
        n=n,
        n_diverged=n_div,
        mean=mean,
        ci95_low=float(lo_ci),
        ci95_high=float(hi_ci),
        std=float(std),
        p5=p5,
        p50=p50,
        p95=p95,
        worst=float(x[k]),
        worst_run=int(ix[k]),
        n_inf=n_inf,
    )


def wilson_interval(successes: int, n: int, confidence: float = 0.95) -> tuple[float, float]:
    """Wilson score interval for a binomial proportion.

    ``(p + z^2/2n -+ z sqrt(p(1-p)/n + z^2/4n^2)) / (1 + z^2/n)`` with
    ``p = successes/n`` and ``z`` the two-sided normal quantile (Wilson 1927,
    JASA 22:209-212). Exact ends: ``low = 0`` when ``successes = 0`` and
    ``high = 1`` when ``successes = n``. ``n = 0`` gives ``(0, 1)``.
    """
    k = int(successes)
    n = int(n)
    if n < 0 or not 0 <= k <= n:
        raise ValueError(f"need 0 <= successes <= n; got successes={k}, n={n}")
    if not 0.0 < confidence < 1.0:
        raise ValueError(f"confidence must be in (0, 1); got {confidence}")
    if n == 0:
        return 0.0, 1.0
    z = float(_sp.ndtri(0.5 + confidence / 2.0))
    p = k / n
    z2n = z * z / n
    centre = (p + z2n / 2.0) / (1.0 + z2n)
    half = z / (1.0 + z2n) * np.sqrt(p * (1.0 - p) / n + z * z / (4.0 * n * n))
    low = 0.0 if k == 0 else max(0.0, centre - half)
    high = 1.0 if k == n else min(1.0, centre + half)
    return float(low), float(high)


def pass_fraction(
    passed: np.ndarray, diverged: np.ndarray | None = None, confidence: float = 0.95
) -> PassSummary:
    """Fraction of runs that pass, diverged runs counting as failures.

    Parameters
    ----------
    passed : (n_runs,) bool
        Pass flag per run.
    diverged : (n_runs,) bool or None
        Divergence flag per run.
    confidence : float
        Confidence of the Wilson interval.
    """
    ok = np.asarray(passed, dtype=bool).ravel()
    if ok.size == 0:
        raise ValueError("pass_fraction needs at least one run")
    if diverged is not None:
        div = np.asarray(diverged, dtype=bool).ravel()
        if div.shape != ok.shape:
            raise ValueError("diverged must have the same length as passed")
        ok = ok & ~div
    n = int(ok.size)
    k = int(ok.sum())
    low, high = wilson_interval(k, n, confidence)
    return PassSummary(n=n, n_pass=k, fraction=k / n, low=low, high=high)


def paired_difference(
    a: np.ndarray,
    b: np.ndarray,
    run_index: np.ndarray,
    *,
    excluded_a: np.ndarray | None = None,
    excluded_b: np.ndarray | None = None,
    sign: float = 1.0,
) -> MetricSummary:
    """Statistics of the per-run difference ``sign·(a − b)`` over usable pairs.

    Parameters
    ----------
    a, b : (n_runs,) float
        One metric for the same runs (same seed and run indices) of two variants.
    run_index : (n_runs,) int
    excluded_a, excluded_b : (n_runs,) bool or None
        Runs of either variant to leave out (e.g. diverged).
    sign : float
        ``+1`` or ``−1``; e.g. ``−1`` turns "smaller is worse" into a cost.

    Returns
    -------
    MetricSummary
        Of the differences (larger counted as worse), with the paired 95 %
        Student-t interval on the mean; ``n_diverged`` counts the pairs left
        out (either run excluded or either value infinite).
    """
    x = np.asarray(a, dtype=float).ravel()
    y = np.asarray(b, dtype=float).ravel()
    if x.shape != y.shape:
        raise ValueError("paired_difference: a and b must have the same length")
    out = ~np.isfinite(x) | ~np.isfinite(y)
    for ex in (excluded_a, excluded_b):
        if ex is not None:
            out |= np.asarray(ex, dtype=bool).ravel()
    with np.errstate(invalid="ignore"):
        diff = np.where(out, 0.0, sign * (x - y))
    return summarize(diff, run_index, True, out)
