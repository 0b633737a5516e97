"""Dryden turbulence (sim.turbulence) against MIL-F-8785C and second methods.

Verification follows Madden (NASA Langley, "Verifying Implementation of the
Dryden Turbulence Model"): sample σ within a few % of the specified σ, and a
Welch PSD on the analytic spectrum (docs/references.md, Turbulence).
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
import pytest
import scipy.integrate
import scipy.linalg
import scipy.signal
from numpy.testing import assert_allclose, assert_array_equal
from rollrig.sim.disturbance import DisturbanceSet, DisturbanceSource, disturbance_record
from rollrig.sim.seeding import run_generators
from rollrig.sim.turbulence import (
    FT_M,
    INTENSITY_W20_MPS,
    KT_MPS,
    NOISE_INTENSITY,
    DrydenParams,
    DrydenTurbulence,
    analytic_psd,
    dryden_params,
    dryden_state_space,
    stationary_sigma,
    van_loan,
)

V, B = 50.0, 10.0  # airspeed (m/s) and span (m) of a light airplane / large UAV
W20_MOD = 30.0 * 1852.0 / 3600.0  # 30 kt, MIL-F-8785C "moderate" (docs/references.md)


def simulate(params: DrydenParams, dt: float, n: int, runs, seed: int = 7, block: int = 4096):
    """(n, batch, 4) gust inputs, fetched in blocks as the stepping core does."""
    src = DrydenTurbulence(params)
    return disturbance_record(src, dt, n, lambda name: run_generators(seed, list(runs), name), block=block)


def autocorr(params: DrydenParams, dt: float, lags: int) -> np.ndarray:
    """Normalised autocorrelations ρ[m] of v, p, r at the sample points, (lags, 3).

    From the continuous model: R(mdt) = C expm(A m dt) P∞ Cᵀ.
    """
    a, b, c = dryden_state_space(params)
    p_inf = scipy.linalg.solve_continuous_lyapunov(a, -NOISE_INTENSITY * b @ b.T)
    phi = scipy.linalg.expm(a * dt)
    out = np.empty((lags, 3))
    m_pow = np.eye(4)
    for m in range(lags):
        out[m] = np.diag(c @ m_pow @ p_inf @ c.T)
        m_pow = phi @ m_pow
    return out / out[0]


# ----------------------------------------------------------------- intensities and lengths
def test_intensity_table():
    # MIL-F-8785C low-altitude W20: light 15 kt, moderate 30 kt, severe 45 kt (docs/references.md).
    assert_allclose(KT_MPS, 0.514444444, rtol=1e-9)  # 1 kt = 1852 m / 3600 s (exact definition)
    assert_allclose(
        [INTENSITY_W20_MPS[k] for k in ("light", "moderate", "severe")],
        [7.716667, 15.433333, 23.15],
        rtol=1e-6,
    )


@pytest.mark.parametrize(
    "h_ft, lv_ft, lw_ft, ratio",
    [
        # Hand-computed from the MIL-F-8785C low-altitude formulas (docs/references.md):
        # d = 0.177 + 0.000823 h; L_v = h / d^1.2; L_w = h; σ_v/σ_w = d^-0.4.
        (100.0, 505.17, 100.0, 1.71585),  # d = 0.2593
        (500.0, 944.66, 500.0, 1.23624),  # d = 0.5885
        (1000.0, 1000.0, 1000.0, 1.0),  # d = 1.0 exactly at the model boundary
        # Interpolated halfway between 1000 ft (L = 1000 ft) and 2000 ft (L = 1750 ft).
        (1500.0, 1375.0, 1375.0, 1.0),
        # Medium/high altitude: L = 1750 ft, σ_v = σ_w (MIL-F-8785C).
        (2000.0, 1750.0, 1750.0, 1.0),
        (10000.0, 1750.0, 1750.0, 1.0),
    ],
)
def test_scale_lengths_and_intensities_vs_hand_values(h_ft, lv_ft, lw_ft, ratio):
    p = dryden_params(h_ft * FT_M, W20_MOD, V, B)
    assert_allclose(p.sigma_w_mps, 0.1 * W20_MOD, rtol=1e-12)  # σ_w = 0.1 W20 (MIL-F-8785C)
    assert_allclose(p.length_v_m, lv_ft * 0.3048, rtol=2e-5)
    assert_allclose(p.length_w_m, lw_ft * 0.3048, rtol=2e-5)
    assert_allclose(p.sigma_v_mps / p.sigma_w_mps, ratio, rtol=2e-5)
    assert (p.airspeed_mps, p.span_m) == (V, B)


def test_altitude_clamped_at_ten_feet():
    ground = dryden_params(0.0, W20_MOD, V, B)
    ten_ft = dryden_params(10.0 * FT_M, W20_MOD, V, B)
    assert ground == ten_ft
    assert_allclose(ground.length_w_m, 10.0 * 0.3048, rtol=1e-12)  # L_w = h at the clamp


@pytest.mark.parametrize("h_ft", [1000.0, 2000.0])
def test_interpolation_is_continuous_at_the_model_boundaries(h_ft):
    eps = 1e-6
    lo = dryden_params((h_ft - eps) * FT_M, W20_MOD, V, B)
    hi = dryden_params((h_ft + eps) * FT_M, W20_MOD, V, B)
    for name in ("sigma_v_mps", "sigma_w_mps", "length_v_m", "length_w_m"):
        assert_allclose(getattr(lo, name), getattr(hi, name), rtol=1e-8)


def test_bad_parameters_raise():
    with pytest.raises(ValueError, match="airspeed_mps"):
        dryden_params(100.0, W20_MOD, 0.0, B)
    with pytest.raises(ValueError, match="length_v_m"):
        DrydenParams(1.0, 1.0, -1.0, 10.0, V, B)


# ----------------------------------------------------------------- analytic spectra and σ
PSD_PARAMS = DrydenParams(
    sigma_v_mps=2.0, sigma_w_mps=1.5, length_v_m=100.0, length_w_m=60.0, airspeed_mps=V, span_m=B
)


def sigma_p_closed_form(p: DrydenParams) -> float:
    """σ_p from ∫₀^∞ Φ_p dω with Φ_p the MIL-F-8785C roll spectrum (derived):
    σ_p² = σ_w² · 0.8 (π/(4b))^(1/3) / L_w^(2/3) · π² / (8 b)."""
    b = p.span_m
    return math.sqrt(
        p.sigma_w_mps**2
        * 0.8
        * (math.pi / (4 * b)) ** (1 / 3)
        / p.length_w_m ** (2 / 3)
        * math.pi**2
        / (8 * b)
    )


@pytest.mark.parametrize("params", [PSD_PARAMS, dryden_params(800 * FT_M, W20_MOD, V, B)])
def test_stationary_sigma_matches_the_spectra(params):
    sig = stationary_sigma(params)
    # One-sided-in-ω normalisation σ² = ∫₀^∞ Φ dω (MIL-F-8785C; docs/references.md), checked by
    # numerical quadrature of the analytic spectra (second method) ...
    quad = {
        k: math.sqrt(scipy.integrate.quad(lambda w, k=k: analytic_psd(params, w)[k], 0, np.inf, limit=400)[0])
        for k in ("v_gust", "p_gust", "r_gust")
    }
    assert_allclose(quad["v_gust"], params.sigma_v_mps, rtol=1e-6)
    assert_allclose(sig["v_gust"], params.sigma_v_mps, rtol=1e-10)  # filters need intensity π
    # ... and the closed form of σ_p (derived above).
    assert_allclose(sig["p_gust"], sigma_p_closed_form(params), rtol=1e-10)
    assert_allclose(quad["p_gust"], sigma_p_closed_form(params), rtol=1e-6)
    assert_allclose(sig["r_gust"], quad["r_gust"], rtol=1e-6)


def test_roll_filter_is_unit_consistent():
    # H_p's (π/(4b))^(1/6)/L_w^(1/3) factor has units; the whole formula is consistent, so
    # σ_p (rad/s) must not depend on the unit system: feed the same case in feet (derived).
    si = PSD_PARAMS
    ft = DrydenParams(
        si.sigma_v_mps / FT_M,
        si.sigma_w_mps / FT_M,
        si.length_v_m / FT_M,
        si.length_w_m / FT_M,
        si.airspeed_mps / FT_M,
        si.span_m / FT_M,
    )
    s_si, s_ft = stationary_sigma(si), stationary_sigma(ft)
    assert_allclose(s_ft["p_gust"], s_si["p_gust"], rtol=1e-12)
    assert_allclose(s_ft["r_gust"], s_si["r_gust"], rtol=1e-12)
    assert_allclose(s_ft["v_gust"] * FT_M, s_si["v_gust"], rtol=1e-12)
    w = np.array([0.1, 1.0, 10.0])
    assert_allclose(analytic_psd(ft, w)["p_gust"], analytic_psd(si, w)["p_gust"], rtol=1e-12)


def test_spatial_spectrum_form_agrees():
    # MIL-F-8785C writes Φ_p(Ω) = (σ_w²/L_w) 0.8 (π L_w/(4b))^(1/3) / (1 + (4bΩ/π)²) in spatial
    # frequency Ω (rad/m) and Φ_v(Ω) = σ_v² (L_v/π)(1 + 3 L_v²Ω²)/(1 + L_v²Ω²)²; temporal
    # spectra are Φ(ω) = Φ(Ω = ω/V)/V (frozen field). Written out independently of sim.turbulence.
    p = PSD_PARAMS
    w = np.logspace(-2, 2, 9)
    om = w / p.airspeed_mps
    phi_p = (
        (p.sigma_w_mps**2 / p.length_w_m)
        * 0.8
        * (math.pi * p.length_w_m / (4 * p.span_m)) ** (1 / 3)
        / (1 + (4 * p.span_m * om / math.pi) ** 2)
    )
    lv = p.length_v_m
    phi_v = p.sigma_v_mps**2 * (lv / math.pi) * (1 + 3 * (lv * om) ** 2) / (1 + (lv * om) ** 2) ** 2
    got = analytic_psd(p, w)
    assert_allclose(got["p_gust"], phi_p / p.airspeed_mps, rtol=1e-12)
    assert_allclose(got["v_gust"], phi_v / p.airspeed_mps, rtol=1e-12)


# ----------------------------------------------------------------- exact discretisation
@pytest.mark.parametrize("dt", [0.001, 0.01, 0.2])
def test_van_loan_gives_the_exact_sampled_covariance(dt):
    a, b, _ = dryden_state_space(PSD_PARAMS)
    q = NOISE_INTENSITY * b @ b.T
    phi, qd = van_loan(a, q, dt)
    p_inf = scipy.linalg.solve_continuous_lyapunov(a, -q)
    assert_allclose(phi, scipy.linalg.expm(a * dt), rtol=1e-12, atol=1e-15)
    # Second method: for a stationary process Q_d = P∞ − Φ P∞ Φᵀ (textbook identity).
    assert_allclose(qd, p_inf - phi @ p_inf @ phi.T, rtol=1e-8, atol=1e-12 * np.abs(p_inf).max())
    # Third method: the integral ∫₀^dt e^{Aτ} q e^{Aᵀτ} dτ by adaptive quadrature.
    integ = scipy.integrate.quad_vec(
        lambda t: scipy.linalg.expm(a * t) @ q @ scipy.linalg.expm(a.T * t), 0.0, dt, epsrel=1e-11
    )[0]
    assert_allclose(qd, integ, rtol=1e-8, atol=1e-12 * np.abs(qd).max())
    # Hence the discrete recursion's stationary covariance equals the continuous one exactly.
    assert_allclose(scipy.linalg.solve_discrete_lyapunov(phi, qd), p_inf, rtol=1e-7)


# ----------------------------------------------------------------- statistics of the samples
def test_sample_sigma_within_5_percent():
    # Madden (NASA Langley) verification: sample σ within a few % of the specified σ.
    params = dryden_params(800 * FT_M, W20_MOD, V, B)
    dt, n, runs = 0.01, 12_000, 300
    x = simulate(params, dt, n, range(runs))
    # RMS about the known zero mean (removing each run's mean would bias σ_v low by ~5 %
    # here, because L_v/V = 6 s is not short against a 120 s run).
    rms = np.sqrt(np.mean(x[..., :3] ** 2, axis=(0, 1)))
    want = stationary_sigma(params)
    ratio = rms / np.array([params.sigma_v_mps, want["p_gust"], want["r_gust"]])
    # Standard error of the RMS from the model's autocorrelation (Bartlett):
    # var(s²)/σ⁴ = 2 Σ_m ρ[m]² / N per run, averaged over independent runs.
    rho = autocorr(params, dt, 8000)
    rel_se_sigma = 0.5 * np.sqrt(2 * (2 * np.sum(rho**2, axis=0) - 1) / (n * runs))
    assert np.all(4 * rel_se_sigma < 0.05)  # the 5 % bound is ≥ 4 standard errors
    assert_allclose(ratio, 1.0, atol=0.05)  # v_g, p_g, r_g
    assert np.all(np.abs(ratio - 1.0) < 5 * rel_se_sigma)
    assert np.all(x[..., 3] == 0.0)


def band_average(w, est, ana, lo, hi, min_bins=8, min_ratio=2 ** (1 / 6)):
    """Average estimate and analytic PSD over log-spaced bands (≥ min_bins bins each)."""
    keep = (w >= lo) & (w <= hi)
    w, est, ana = w[keep], est[keep], ana[keep]
    out, i = [], 0
    while i < len(w):
        j = i + min_bins
        while j < len(w) and w[j - 1] < min_ratio * w[i]:
            j += 1
        if j > len(w):
            break
        out.append((w[i:j].mean(), est[i:j].mean(), ana[i:j].mean()))
        i = j
    return np.array(out)


def test_welch_psd_within_1_db_of_analytic():
    # Madden (NASA Langley): Welch PSD of the samples on the analytic Dryden PSD.
    params, dt = PSD_PARAMS, 0.01
    n, runs, nper = 131_072, 20, 16_384
    x = simulate(params, dt, n, range(runs))
    fs = 1.0 / dt
    dw = 2 * np.pi * fs / nper  # frequency resolution, rad/s
    # Reliable band: above 5 resolution bins (window leakage) and below Nyquist/3, where
    # aliasing of these ω^-2 tails adds at most ~7 % (0.3 dB).
    lo, hi = 5 * dw, (np.pi / dt) / 3
    errors = {}
    for ch, name in enumerate(("v_gust", "p_gust", "r_gust")):
        f, pxx = scipy.signal.welch(x[:, :, ch].T, fs=fs, nperseg=nper, axis=-1)
        w = 2 * np.pi * f
        est = pxx.mean(axis=0) / (2 * np.pi)  # one-sided in Hz → one-sided in ω
        bands = band_average(w, est, analytic_psd(params, w)[name], lo, hi)
        err_db = 10 * np.log10(bands[:, 1] / bands[:, 2])
        errors[name] = np.abs(err_db).max()
        assert len(bands) > 20
        assert np.all(np.abs(err_db) < 1.0), (name, err_db.round(2))
    # The band spans the v corner V/L_v = 0.5 rad/s and the p corner πV/(4b) = 3.9 rad/s.
    assert lo < 0.5 and hi > 3.9 * 10


def test_yaw_gust_sign_follows_the_air_relative_convention():
    # r_air = r − r_g and r_g = +∂v_g/∂x = +(1/V) dv_g/dt (frozen field; module doc), so
    # r_g must equal (s/V)/(1 + 3b/(πV) s) applied to v_g (MIL-F-8785C H_r, our sign).
    params, dt, n = PSD_PARAMS, 0.002, 20_000
    x = simulate(params, dt, n, [0])
    t = np.arange(n) * dt
    tr = 3 * params.span_m / (np.pi * params.airspeed_mps)
    filt = scipy.signal.lti([1.0 / params.airspeed_mps, 0.0], [tr, 1.0])
    _, r_from_v, _ = scipy.signal.lsim(filt, x[:, 0, 0], t)
    skip = int(20 * tr / dt)  # let lsim's zero initial state die out
    corr = np.corrcoef(r_from_v[skip:], x[skip:, 0, 2])[0, 1]
    assert corr > 0.99  # the opposite sign would give −0.99


def test_v_and_p_are_uncorrelated_and_runs_are_independent():
    params, dt, n, runs = PSD_PARAMS, 0.05, 100_000, 5
    x = simulate(params, dt, n, range(runs))
    rho = autocorr(params, dt, 4000)
    # Bartlett: sample correlation of two independent series has variance Σ_m ρ_x ρ_y / N.
    bound = {}
    for i, j in ((0, 0), (1, 1), (0, 1)):
        s = 2 * np.sum(rho[:, i] * rho[:, j]) - 1
        bound[(i, j)] = 5 * np.sqrt(s / n)  # 5 standard errors: chance failure ~1e-6 per pair
    assert bound[(0, 0)] < 0.1 and bound[(1, 1)] < 0.05
    for ch in (0, 1):
        c = np.corrcoef(x[:, :, ch].T)
        off = c[~np.eye(runs, dtype=bool)]
        assert np.all(np.abs(off) < bound[(ch, ch)]), (ch, off)
    for r in range(runs):
        assert abs(np.corrcoef(x[:, r, 0], x[:, r, 1])[0, 1]) < bound[(0, 1)]


# ----------------------------------------------------------------- reproducibility
def test_same_seed_bit_identical_and_other_seed_differs():
    a = simulate(PSD_PARAMS, 0.01, 3000, range(4), seed=11)
    b = simulate(PSD_PARAMS, 0.01, 3000, range(4), seed=11)
    c = simulate(PSD_PARAMS, 0.01, 3000, range(4), seed=12)
    assert_array_equal(a, b)
    assert not np.any(np.all(a[..., 0] == c[..., 0], axis=0))


def test_run_alone_equals_run_in_batch_and_blocks_do_not_matter():
    batch = simulate(PSD_PARAMS, 0.01, 3000, range(70), seed=5, block=512)  # > one run group
    alone = simulate(PSD_PARAMS, 0.01, 3000, [66], seed=5, block=1000)
    odd_blocks = simulate(PSD_PARAMS, 0.01, 3000, range(70), seed=5, block=37)
    assert_array_equal(alone[:, 0], batch[:, 66])
    assert_array_equal(odd_blocks, batch)


def test_protocol_and_disturbance_set():
    src = DrydenTurbulence(PSD_PARAMS)
    assert isinstance(src, DisturbanceSource)
    assert src.component == "dryden"
    ds = DisturbanceSet([src])
    out = disturbance_record(ds, 0.01, 100, lambda name: run_generators(3, range(2), name))
    assert out.shape == (100, 2, 4) and np.all(np.isfinite(out)) and np.any(out[..., 0] != 0)


# ----------------------------------------------------------------- three draws per step
def test_three_normals_reproduce_the_step_noise_covariance():
    """The (v, r) block of Q_d is numerically rank 2 (one white noise drives three states over a
    short step), so a 4x3 factor reproduces the whole Q_d; checked against Van Loan's Q_d (same
    module, exact) and against the sample covariance of the drawn increments."""
    from rollrig.sim.disturbance import noise_block
    from rollrig.sim.turbulence import noise_factor

    for dt in (0.005, 0.01, 0.02):
        f = DrydenTurbulence(PSD_PARAMS).noise_filter(dt, 1)
        unit = replace(PSD_PARAMS, sigma_v_mps=1.0, sigma_w_mps=1.0)
        a, b, _ = dryden_state_space(unit)
        _, qd = van_loan(a, NOISE_INTENSITY * b @ b.T, dt)
        lam = np.linalg.eigvalsh(qd[:3, :3])
        assert lam[0] < 1e-8 * lam[-1]  # numerically rank 2
        assert f.noise_factor.shape == (4, 3)
        assert_allclose(f.noise_factor @ f.noise_factor.T, qd, rtol=0, atol=1e-8 * np.abs(qd).max())
        assert_allclose(noise_factor(qd) @ noise_factor(qd).T, qd, rtol=0, atol=1e-8 * np.abs(qd).max())
    f = DrydenTurbulence(PSD_PARAMS).noise_filter(0.01, 4)
    e = noise_block(f, run_generators(3, range(4), "dryden"), 50_000)  # (n, 4, batch)
    sample = np.einsum("nib,njb->ij", e, e) / (e.shape[0] * e.shape[2])
    scale = np.outer(f.scale[:, 0], f.scale[:, 0])
    # 200 000 samples: relative SE of a variance ≈ 0.3 %; 2 % covers every entry's sampling error
    assert_allclose(sample, scale * qd_at(0.01), rtol=0, atol=0.02 * np.abs(scale * qd_at(0.01)).max())


def qd_at(dt: float) -> np.ndarray:
    unit = replace(PSD_PARAMS, sigma_v_mps=1.0, sigma_w_mps=1.0)
    a, b, _ = dryden_state_space(unit)
    return van_loan(a, NOISE_INTENSITY * b @ b.T, dt)[1]
