"""Statistics of each camera-reader stage against its formula.

Tolerances are about 5 standard errors of the estimate at the fixed sample
size, so a chance failure is negligible; the seeds are fixed anyway.
"""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose, assert_array_equal
from rollrig.sensors import stages
from scipy.special import softmax


def _runs(x: np.ndarray) -> np.ndarray:
    """Lengths of runs of True along the last axis (all rows pooled)."""
    out = []
    for row in np.atleast_2d(x):
        e = np.diff(np.concatenate([[0], row.astype(np.int8), [0]]))
        out.append(np.flatnonzero(e == -1) - np.flatnonzero(e == 1))
    return np.concatenate(out)


def test_white_noise_std():
    eps = np.random.default_rng(1).standard_normal((50, 4000))
    x = stages.white_noise(eps, 0.3)
    # sample std of 200 000 normals: SE = σ/√(2n) ≈ 0.16 %; 1 % is 6 SE
    assert_allclose(x.std(), 0.3, rtol=0.01)
    per_run = stages.white_noise(eps, np.linspace(0.1, 0.5, 50))  # (batch,) parameter
    assert_allclose(per_run.std(axis=1), np.linspace(0.1, 0.5, 50), rtol=0.07)  # SE 1.1 % per row


def test_gauss_markov_std_and_correlation_time():
    # Source: docs/references.md "Sensor statistics" — first-order Gauss–Markov
    # x⁺ = a x + σ√(1−a²) ε, a = exp(−dt/τ) (textbook identity); stationary
    # std σ and autocorrelation exp(−lag/τ).
    sigma, tau, step = 0.5, 1.0, 0.1
    eps = np.random.default_rng(2).standard_normal((400, 3000))
    x = stages.gauss_markov(eps, sigma, tau, step)
    # effective samples ≈ N(1−a)/(1+a) ≈ 57 000 → SE of std ≈ 0.3 %; 2 % tolerance
    assert_allclose(x.std(), sigma, rtol=0.02)
    # stationary from the first sample: std over 400 runs (SE 3.5 %), 18 %
    assert_allclose(x[:, 0].std(), sigma, rtol=0.18)
    lags = np.arange(1, 21)
    xc = x - x.mean()
    rho = np.array([np.mean(xc[:, k:] * xc[:, :-k]) for k in lags]) / xc.var()
    assert_allclose(rho, np.exp(-lags * step / tau), atol=0.02)
    # correlation time from a log-linear fit of the first lags
    slope = np.polyfit(lags[:10] * step, np.log(rho[:10]), 1)[0]
    assert_allclose(-1.0 / slope, tau, rtol=0.05)


def test_independent_loss_rate_per_run():
    u = np.random.default_rng(3).random((4, 50_000))
    prob = np.array([0.0, 0.05, 0.2, 0.5])
    lost = stages.independent_losses(u, prob)
    # binomial SE ≤ 0.0023 per row; atol 0.01 is > 4 SE
    assert_allclose(lost.mean(axis=1), prob, atol=0.01)


@pytest.mark.parametrize("loss_rate, burst", [(0.2, 4.0), (0.05, 1.5), (0.3, 10.0)])
def test_burst_chain_loss_rate_and_burst_length(loss_rate, burst):
    # Source: docs/references.md — two-state chain (Gilbert–Elliott; Pieper & Voran,
    # NTIA TM-23-565): stationary loss rate p/(p+r), mean burst length 1/r,
    # burst lengths geometric.
    u = np.random.default_rng(4).random((100, 6000))
    lost = stages.burst_losses(u, loss_rate, burst)
    p, r = stages.burst_chain_probs(loss_rate, burst)
    assert_allclose(p / (p + r), loss_rate, rtol=1e-12)
    lam = 1.0 - p - r
    se_rate = np.sqrt(loss_rate * (1 - loss_rate) * (1 + lam) / (1 - lam) / lost.size)
    assert_allclose(lost.mean(), loss_rate, atol=5 * se_rate)
    runs = _runs(lost)
    se_len = np.sqrt(1 - r) / r / np.sqrt(runs.size)  # geometric std / √n
    assert_allclose(runs.mean(), burst, atol=5 * se_len)
    # geometric: P(length = 1) = r (binomial SE over the bursts)
    assert_allclose(np.mean(runs == 1), r, atol=5 * np.sqrt(r * (1 - r) / runs.size))
    # started stationary: first frame lost with probability π
    first = stages.burst_losses(np.random.default_rng(5).random((20_000, 1)), loss_rate, burst)
    assert_allclose(first.mean(), loss_rate, atol=5 * np.sqrt(loss_rate / 20_000))


def test_burst_chain_per_run_loss_rate():
    u = np.random.default_rng(6).random((3, 100_000))
    rates = np.array([0.05, 0.1, 0.3])
    lost = stages.burst_losses(u, rates, 3.0)
    assert_allclose(lost.mean(axis=1), rates, rtol=0.1)  # SE ≤ 2 % relative per row


def test_quantizer_error_variance_on_moving_signal():
    # Source: Widrow, Kollár & Liu, IEEE Trans. Instrum. Meas. 45(2), 1996 —
    # error uniform on [−q/2, q/2], variance q²/12 when the signal crosses many steps.
    q = 0.5
    x = np.linspace(-20.0, 20.0, 100_003) + 0.1234
    e = stages.quantize(x, q) - x
    assert_allclose(e.var(), q * q / 12, rtol=0.01)
    assert_allclose(e.mean(), 0.0, atol=1e-3)
    assert np.abs(e).max() <= q / 2 + 1e-12


def test_quantizer_bias_on_held_angle():
    # Same source: for a held angle the error is a fixed bias, not noise.
    q = 2.0
    for held in (0.3, 1.7, -4.6):
        e = stages.quantize(np.full(1000, held), q) - held
        expected = q * np.round(held / q) - held
        assert_allclose(e, expected, atol=1e-12)
        assert e.std() < 1e-12


@pytest.mark.parametrize("step", [1e-320, np.array([1e-320, 0.0, 0.5])])
def test_vanishing_quantization_step_is_no_rounding(step):
    """Regression (found by fuzzing): x / 1e-320 overflowed, the reading became infinite and the
    frame was lost. A step that small rounds nothing and must leave the reading as it is."""
    import warnings

    x = np.array([0.3, -1.2, 2.6])
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # no overflow warning either
        got = stages.quantize(x, step)
    want = x if np.ndim(step) == 0 else np.array([0.3, -1.2, 2.5])
    assert_array_equal(got, want)


def test_classifier_best_is_rounding_quantizer():
    width, rng_ = np.radians(2.0), np.radians(60.0)
    centres = stages.class_centres(width, rng_)
    x = np.random.default_rng(7).uniform(-np.radians(58.0), np.radians(58.0), 20_000)
    reading, conf = stages.classify(x, centres, width, 4.0, "best")
    assert_allclose(reading, stages.quantize(x, width), atol=1e-12)
    # confidence = top softmax score, checked against scipy
    logits = -4.0 * ((x[:, None] - centres) / width) ** 2
    assert_allclose(conf, softmax(logits, axis=1).max(axis=1), rtol=1e-10)
    # beyond the range the best class is the end class
    r_end, _ = stages.classify(np.array([np.radians(75.0)]), centres, width, 4.0, "best")
    assert_allclose(r_end, centres[-1])


def test_classifier_weighted_decoding():
    width, rng_ = 2.0, 60.0
    centres = stages.class_centres(width, rng_)
    s = 2.0
    x = np.linspace(-40.0, 40.0, 40_001)
    reading, _ = stages.classify(x, centres, width, s, "weighted")
    # second method: scipy softmax
    w = softmax(-s * ((x[:, None] - centres) / width) ** 2, axis=1)
    assert_allclose(reading, w @ centres, rtol=1e-10, atol=1e-10)
    # biased towards the nearest centre: between x and the centre
    near = np.round(x / width) * width
    d = x - near
    inner = (np.abs(d) > 1e-6) & (np.abs(d) < 0.4 * width)  # away from class boundaries
    assert np.all(np.abs(reading - near)[inner] < np.abs(d)[inner])
    # smooth between centres (no jumps) and unbiased over a whole class period
    assert np.abs(np.diff(reading)).max() < 0.01
    assert_allclose(np.mean(reading - x), 0.0, atol=1e-3)
    # compressed near the ends of the range
    # (at a class centre inside the range the reading is exact by symmetry;
    # at the end centre the missing outer classes pull it inwards)
    pair, _ = stages.classify(np.array([40.0, 60.0]), centres, width, s, "weighted")
    assert_allclose(pair[0], 40.0, atol=1e-9)
    assert pair[1] < 60.0 - 0.1
    # very sharp scores reduce to best-class decoding
    sharp, _ = stages.classify(x[::97], centres, width, 200.0, "weighted")
    mid = np.abs(np.abs(d[::97]) - width / 2) > 0.1
    assert_allclose(sharp[mid], near[::97][mid], atol=1e-6)


def test_range_invalid_or_saturate():
    x = np.array([-70.0, -30.0, 0.0, 59.0, 61.0])
    v, ok = stages.limit_range(x, 60.0, "invalid")
    assert_array_equal(v, x)
    assert_array_equal(ok, [False, True, True, True, False])
    v, ok = stages.limit_range(x, 60.0, "saturate")
    assert_array_equal(v, [-60.0, -30.0, 0.0, 59.0, 60.0])
    assert ok.all()


def test_outlier_rate_and_size():
    g = np.random.default_rng(8)
    u = g.random((2, 200_000))
    off = stages.outlier_offsets(u[0], u[1], 0.02, 15.0)
    hit = off != 0
    assert_allclose(hit.mean(), 0.02, atol=5 * np.sqrt(0.02 * 0.98 / 200_000))
    # magnitude uniform on [size/2, 3 size/2]: mean = size, both signs alike
    assert_allclose(np.abs(off[hit]).mean(), 15.0, rtol=0.03)  # SE ≈ 0.9 %
    assert np.abs(off[hit]).min() >= 7.5 and np.abs(off[hit]).max() <= 22.5
    assert_allclose(np.mean(off[hit] > 0), 0.5, atol=0.04)


def test_exposure_weights_ramp_lag_and_smear():
    dt, exposure = 0.001, 0.02
    w = stages.exposure_weights(exposure, dt)
    assert_allclose(w.sum(), 1.0)
    t = np.arange(0, 1, dt)
    # ramp: the exposed reading lags by half the exposure (trapezoid is exact)
    ramp = 3.0 * t
    k = 500
    assert_allclose(w @ ramp[k - w.size + 1 : k + 1], 3.0 * (t[k] - exposure / 2), rtol=1e-12)
    # sinusoid: a box average attenuates by sinc(ωE/2) = sin(ωE/2)/(ωE/2)
    omega = 2 * np.pi * 20.0
    s = np.sin(omega * t)
    ks = np.arange(100, 1000)
    out = np.array([w @ s[k - w.size + 1 : k + 1] for k in ks])
    basis = np.column_stack([np.sin(omega * t[ks]), np.cos(omega * t[ks])])
    amp = np.hypot(*np.linalg.lstsq(basis, out, rcond=None)[0])
    x = omega * exposure / 2
    # trapezoid error on a sine ≈ (ω dt)²/12 ≈ 0.13 % here; 0.3 % tolerance
    assert_allclose(amp, np.sin(x) / x, rtol=3e-3)
    assert_array_equal(stages.exposure_weights(0.0, dt), [1.0])
