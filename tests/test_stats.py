"""Tests of sim.stats against SciPy, numpy and hand-computed cases."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.stats as st
from numpy.testing import assert_allclose
from rollrig.sim.stats import (
    paired_difference,
    pass_fraction,
    percentile_with_inf,
    summarize,
    wilson_interval,
)


# ---------------------------------------------------------------- summarize
@pytest.mark.parametrize("n", [2, 5, 30, 500])
def test_mean_ci_matches_scipy_t_interval(n):
    rng = np.random.default_rng(1234 + n)
    x = rng.normal(3.0, 0.7, n)
    s = summarize(x, np.arange(n), larger_is_worse=True)
    lo, hi = st.t.interval(0.95, n - 1, loc=np.mean(x), scale=st.sem(x))
    assert_allclose([s.ci95_low, s.ci95_high], [lo, hi], rtol=1e-12)
    assert_allclose(s.mean, np.mean(x), rtol=1e-14)
    assert_allclose(s.std, np.std(x, ddof=1), rtol=1e-14)
    assert s.n == n and s.n_diverged == 0 and s.n_inf == 0


def test_mean_ci_hand_computed():
    # x = 1..5: mean 3, s = sqrt(2.5); t_{0.975,4} = 2.776 (Student t table, e.g.
    # NIST/SEMATECH e-Handbook of Statistical Methods, 1.3.6.7.2; recalled from memory,
    # hence atol 1e-3): half-width 2.776 * 1.5811 / sqrt(5) = 1.9630
    s = summarize(np.arange(1.0, 6.0), np.arange(5), larger_is_worse=True)
    assert_allclose([s.ci95_low, s.ci95_high], [3 - 1.9630, 3 + 1.9630], atol=1e-3)


@pytest.mark.parametrize("n", [1, 2, 7, 20, 101])
def test_percentiles_match_numpy(n):
    rng = np.random.default_rng(n)
    x = rng.lognormal(0.0, 1.0, n)
    s = summarize(x, np.arange(n), larger_is_worse=True)
    assert_allclose([s.p5, s.p50, s.p95], np.percentile(x, [5, 50, 95]), rtol=1e-12)
    q = np.linspace(0, 100, 41)
    assert_allclose(percentile_with_inf(x, q), np.percentile(x, q), rtol=1e-12)


def test_worst_run_both_directions():
    x = np.array([0.3, 2.5, -1.0, 2.5, 0.0])
    idx = np.array([10, 11, 12, 13, 14])
    hi = summarize(x, idx, larger_is_worse=True)
    lo = summarize(x, idx, larger_is_worse=False)
    assert (hi.worst, hi.worst_run) == (2.5, 11)  # first of the ties
    assert (lo.worst, lo.worst_run) == (-1.0, 12)


def test_diverged_runs_excluded_and_counted():
    rng = np.random.default_rng(7)
    x = rng.normal(size=40)
    div = np.zeros(40, bool)
    div[[3, 17, 30]] = True
    x[div] = np.nan  # values of diverged runs do not matter
    x[17] = 1e9
    s = summarize(x, np.arange(40) * 2, larger_is_worse=True, diverged=div)
    ref = summarize(x[~div], (np.arange(40) * 2)[~div], larger_is_worse=True)
    assert s.n == 37 and s.n_diverged == 3
    assert_allclose(
        [s.mean, s.ci95_low, s.ci95_high, s.std, s.p5, s.p50, s.p95, s.worst],
        [ref.mean, ref.ci95_low, ref.ci95_high, ref.std, ref.p5, ref.p50, ref.p95, ref.worst],
        rtol=1e-14,
    )
    assert s.worst_run == ref.worst_run and s.worst_run % 2 == 0


def test_all_diverged_and_single_run():
    s = summarize(np.array([np.nan, 1.0]), np.array([0, 1]), True, np.array([True, True]))
    assert s.n == 0 and s.n_diverged == 2 and s.worst_run == -1
    assert s.mean == np.inf and s.p50 == np.inf and s.worst == np.inf
    s = summarize(np.array([2.0]), np.array([4]), False, None)
    assert s.mean == 2.0 and s.std == np.inf and (s.ci95_low, s.ci95_high) == (-np.inf, np.inf)
    assert s.p5 == s.p95 == 2.0 and s.worst_run == 4


def test_infinite_values_rule():
    # 19 finite runs and one that never settled (settling time inf)
    x = np.append(np.arange(1.0, 20.0), np.inf)
    s = summarize(x, np.arange(20), larger_is_worse=True)
    assert s.n_inf == 1 and s.mean == np.inf and s.std == np.inf
    assert s.ci95_low == s.ci95_high == np.inf
    assert s.worst == np.inf and s.worst_run == 19
    # percentiles away from the infinite sample equal numpy's with inf replaced by a
    # large finite stand-in (second method); p95 interpolates towards it, so it is inf
    stand_in = np.append(np.arange(1.0, 20.0), 1e300)
    assert_allclose([s.p5, s.p50], np.percentile(stand_in, [5, 50]), rtol=1e-12)
    assert s.p95 == np.inf
    # an infinity that is "best" (e.g. never exceeded the limit, smaller is worse)
    y = np.array([3.0, np.inf, 1.5, np.inf])
    s = summarize(y, np.arange(4), larger_is_worse=False)
    assert s.worst == 1.5 and s.worst_run == 2 and s.mean == np.inf
    assert_allclose(percentile_with_inf(y, [0, 100 / 3]), [1.5, 3.0], rtol=1e-12)
    assert not np.any(np.isnan(percentile_with_inf(y, np.linspace(0, 100, 11))))


def test_bad_inputs_raise():
    with pytest.raises(ValueError):
        summarize(np.array([1.0, np.nan]), np.arange(2), True)  # NaN, not diverged
    with pytest.raises(ValueError):
        summarize(np.array([np.inf, -np.inf]), np.arange(2), True)
    with pytest.raises(ValueError):
        summarize(np.array([]), np.array([], int), True)


def test_t_interval_coverage_sanity():
    # 2000 samples of n = 8 from N(1, 2^2): the 95 % t-interval should cover the true mean
    # in 95 % of them; binomial sd sqrt(.95*.05/2000) = 0.0049, tolerance 0.02 is 4 sd.
    rng = np.random.default_rng(20240601)
    x = rng.normal(1.0, 2.0, size=(2000, 8))
    cover = 0
    for row in x:
        s = summarize(row, np.arange(8), True)
        cover += s.ci95_low <= 1.0 <= s.ci95_high
    assert abs(cover / 2000 - 0.95) < 0.02


# --------------------------------------------------------- Wilson interval
@pytest.mark.parametrize("n", [1, 5, 10, 37, 200])
@pytest.mark.parametrize("conf", [0.95, 0.9])
def test_wilson_matches_scipy_binomtest(n, conf):
    for k in sorted({0, 1, n // 3, n // 2, n - 1, n}):
        ref = st.binomtest(k, n).proportion_ci(confidence_level=conf, method="wilson")
        assert_allclose(wilson_interval(k, n, conf), [ref.low, ref.high], rtol=1e-10, atol=1e-14)


def test_wilson_hand_computed():
    # Wilson (1927), JASA 22:209-212: (p + z^2/2n -+ z sqrt(p q/n + z^2/4n^2)) / (1 + z^2/n)
    z = 1.959963984540054  # two-sided 95 % normal quantile
    # k = 0, n = 10: low 0, high z^2/(n + z^2) = 3.8415/13.8415 = 0.27753
    assert_allclose(wilson_interval(0, 10), [0.0, z**2 / (10 + z**2)], rtol=1e-12)
    assert_allclose(wilson_interval(0, 10)[1], 0.27753, atol=1e-5)
    # k = n = 10: mirror image
    assert_allclose(wilson_interval(10, 10), [10 / (10 + z**2), 1.0], rtol=1e-12)
    # k = 5, n = 10: centre 0.5, half 1.96/1.38415 * sqrt(0.025 + 0.009604) = 0.26341
    assert_allclose(wilson_interval(5, 10), [0.23659, 0.76341], atol=1e-5)
    assert wilson_interval(0, 0) == (0.0, 1.0)
    with pytest.raises(ValueError):
        wilson_interval(4, 3)


@pytest.mark.parametrize("p", [0.1, 0.3, 0.5, 0.8])
def test_wilson_exact_coverage_near_nominal(p):
    # exact coverage (sum of binomial pmf over k whose interval holds p) at n = 50;
    # Brown, Cai & DasGupta (2001), Statistical Science 16:101-133, show Wilson's
    # coverage oscillating close to the nominal 0.95; we accept [0.92, 0.98].
    n = 50
    ks = np.arange(n + 1)
    inside = np.array([wilson_interval(k, n)[0] <= p <= wilson_interval(k, n)[1] for k in ks])
    cov = st.binom.pmf(ks[inside], n, p).sum()
    assert 0.92 <= cov <= 0.98


# ----------------------------------------------------------- pass fraction
def test_pass_fraction_counts_diverged_as_failures():
    passed = np.array([True, True, True, False, True, True])
    div = np.array([False, True, False, False, False, False])
    s = pass_fraction(passed, div)
    assert (s.n, s.n_pass) == (6, 4) and s.fraction == 4 / 6
    assert_allclose((s.low, s.high), wilson_interval(4, 6), rtol=1e-14)


def test_pass_fraction_edges():
    s = pass_fraction(np.zeros(25, bool))
    assert s.n_pass == 0 and s.fraction == 0.0 and s.low == 0.0 and 0 < s.high < 0.2
    s = pass_fraction(np.ones(25, bool))
    assert s.n_pass == 25 and s.fraction == 1.0 and s.high == 1.0 and 0.8 < s.low < 1
    with pytest.raises(ValueError):
        pass_fraction(np.array([], bool))


# ---------------------------------------------------------------- paired differences
def test_paired_difference_interval_matches_scipy_ttest_rel():
    rng = np.random.default_rng(99)
    common = rng.normal(0.0, 3.0, 40)  # shared noise: what common random numbers cancel
    a = common + rng.normal(1.0, 0.2, 40)
    b = common + rng.normal(0.6, 0.2, 40)
    d = paired_difference(a, b, np.arange(40))
    ref = st.ttest_rel(a, b).confidence_interval(0.95)
    assert_allclose([d.ci95_low, d.ci95_high], [ref.low, ref.high], rtol=1e-10)
    assert_allclose(d.mean, np.mean(a - b), rtol=1e-12)
    # the unpaired interval is far wider: pairing is what makes the difference visible
    assert d.ci95_low > 0
    unpaired = summarize(a, np.arange(40), True).ci95_high - summarize(a, np.arange(40), True).ci95_low
    assert d.ci95_high - d.ci95_low < 0.2 * unpaired


def test_paired_difference_leaves_out_bad_pairs_and_flips_sign():
    a = np.array([1.0, 2.0, np.inf, 4.0, 5.0])
    b = np.array([0.5, 1.0, 1.0, np.nan, 4.0])
    div = np.array([False, False, False, True, False])
    d = paired_difference(a, b, np.arange(5), excluded_b=div, sign=-1.0)
    assert d.n == 3 and d.n_diverged == 2
    assert_allclose(d.mean, -np.mean([0.5, 1.0, 1.0]), rtol=1e-14)
