"""Dryden continuous turbulence (MIL-F-8785C form) for the lateral gust inputs.

The three lateral gust signals of :mod:`sim.disturbance` — side-gust velocity
``v_g`` (m/s), gust roll rate ``p_g`` (rad/s) and gust yaw rate ``r_g``
(rad/s) — are made by passing white noise through the Dryden shaping filters
of MIL-F-8785C (5 Nov 1980, §3.7.2–3.7.3)::

    H_v(s) = σ_v √(L_v/(πV)) (1 + √3 (L_v/V) s) / (1 + (L_v/V) s)²
    H_p(s) = σ_w √(0.8/V) (π/(4b))^(1/6) / (L_w^(1/3) (1 + (4b/(πV)) s))
    H_r(s) = + (s/V) / (1 + (3b/(πV)) s) · H_v(s)

Units
    The formulas are dimensionally consistent, so they hold in SI exactly as
    written with σ in m/s, L and b in m, V in m/s: H_p² has units
    (m²/s²)(s/m)(m^(-1/3))(m^(-2/3)) = s, i.e. the p spectrum comes out in
    (rad/s)²/(rad/s). Everything here is SI; feet appear only inside
    :func:`dryden_params`, where the standard's altitude formulas are written in
    feet.

Spectra and noise scaling
    The 8785C spectra are one-sided in ω: σ² = ∫₀^∞ Φ(ω) dω, and
    Φ(ω) = |H(jω)|². A filter driven by continuous white noise of two-sided
    intensity ``q`` (E[w(t) w(t+τ)] = q δ(τ)) has output variance
    (q/2π) ∫_{-∞}^{∞} |H|² dω = (q/π) ∫₀^∞ |H|² dω, so the shaping filters above
    need ``q = π`` (:data:`NOISE_INTENSITY`) to give σ² = ∫₀^∞ Φ dω. In discrete
    form that is a white sequence of variance π/dt; here it enters only through
    the exact discrete covariance below.

Discretisation: exact covariance (Van Loan)
    The filters are realised as one continuous state-space model driven by two
    independent white noises (one for v and r, which are correlated, one for
    p). Over a base step dt the state obeys, exactly,
    ``x[k+1] = Φ x[k] + e[k]`` with ``Φ = expm(A dt)`` and
    ``e[k] ~ N(0, Q_d)``, ``Q_d = ∫₀^dt expm(Aτ) B W Bᵀ expm(Aᵀτ) dτ``, computed
    with Van Loan's block-matrix exponential (C. F. Van Loan, "Computing
    integrals involving the matrix exponential", IEEE TAC 23(3), 1978). The
    first state of every run is drawn from the stationary covariance P∞
    (continuous Lyapunov equation). The sampled sequence then has *exactly* the
    continuous process's covariance at the sample points, for any dt, with no
    start-up transient. We chose this over a zero-order hold on the noise
    (variance π/dt held over the step) because the ZOH sequence's variance is
    wrong by a factor that depends on dt/τ for the fast p and r filters (their
    time constants 4b/(πV) and 3b/(πV) are a few tenths of a second for a light
    airplane, not many base steps). The price is three normal draws per step
    instead of two: the (v, r) block of ``Q_d`` is driven by one white noise
    and is numerically rank 2 over a short step (:func:`noise_factor`), and
    p needs one.

Where it runs
    The stepping core carries the four filter states in its own state vector
    (:class:`sim.disturbance.NoiseFilter`), so the gusts reach the plant
    through the same exact matrix product that advances the aircraft, held
    over each base step; only the noise increments are drawn, per block.

Sign of r_g
    The plant uses air-relative rates ``r_air = r - r_g`` and sideslip from
    ``v - v_g`` (:mod:`sim.plant`). A point a distance ξ ahead of the centre of
    gravity moves sideways at ``v + r ξ`` while the air there moves at
    ``v_g + ξ ∂v_g/∂x``, so the aerodynamic yaw rate is ``r - ∂v_g/∂x`` and
    ``r_g = +∂v_g/∂x``. Flying at V through a frozen field, ∂/∂x = (1/V) d/dt,
    hence the ``+`` sign in H_r above (8785C writes ∓ because it defines the
    rotary gusts with its own signs; its ``r_g = -∂v_g/∂x`` is our ``-r_g``).
    ``p_g = ∂w_g/∂y`` enters as ``p - p_g`` in both conventions, and p_g is
    independent of v_g and r_g.

Scale lengths
    MIL-F-8785C scale lengths are used throughout (L_w = h at low altitude,
    1750 ft above 2000 ft). MIL-HDBK-1797 writes the same spectra with the
    scale lengths halved (L_w = h/2, 875 ft ...); mixing one document's
    formulas with the other's lengths is a factor-of-two error, so do not feed
    1797 lengths into these filters.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np
import scipy.linalg

from .disturbance import N_CHANNELS, NoiseFilter

__all__ = [
    "FT_M",
    "KT_MPS",
    "MIN_ALTITUDE_FT",
    "INTENSITY_W20_MPS",
    "NOISE_INTENSITY",
    "DrydenParams",
    "dryden_params",
    "dryden_state_space",
    "van_loan",
    "analytic_psd",
    "stationary_sigma",
    "DrydenTurbulence",
    "RANK_TOL",
    "noise_factor",
]

#: One foot in metres (exact, international foot).
FT_M = 0.3048
#: One knot in m/s (exact: 1852 m per hour).
KT_MPS = 1852.0 / 3600.0
#: Altitudes below this are clamped to it: the low-altitude model has L_w = h,
#: which would go to zero on the ground (ft).
MIN_ALTITUDE_FT = 10.0
#: Wind speed at 20 ft for the MIL-F-8785C low-altitude intensities (m/s):
#: 15 / 30 / 45 kt for light / moderate / severe.
INTENSITY_W20_MPS: dict[str, float] = {
    "light": 15.0 * KT_MPS,
    "moderate": 30.0 * KT_MPS,
    "severe": 45.0 * KT_MPS,
}
#: Two-sided intensity of the white noise driving the shaping filters (see module doc).
NOISE_INTENSITY = math.pi

_LOW_FT = 1000.0
_HIGH_FT = 2000.0
_HIGH_SCALE_FT = 1750.0
_SQRT3 = math.sqrt(3.0)


@dataclass(frozen=True)
class DrydenParams:
    """Parameters of the lateral Dryden model (SI).

    Parameters
    ----------
    sigma_v_mps : m/s
        RMS side-gust velocity σ_v (≥ 0).
    sigma_w_mps : m/s
        RMS vertical-gust velocity σ_w (≥ 0); sets the roll-gust intensity.
    length_v_m : m
        Lateral scale length L_v (> 0), MIL-F-8785C convention.
    length_w_m : m
        Vertical scale length L_w (> 0), MIL-F-8785C convention.
    airspeed_mps : m/s
        True airspeed V (> 0).
    span_m : m
        Wing span b (> 0).
    """

    sigma_v_mps: float
    sigma_w_mps: float
    length_v_m: float
    length_w_m: float
    airspeed_mps: float
    span_m: float

    def __post_init__(self) -> None:
        for name in ("sigma_v_mps", "sigma_w_mps"):  # per run allowed: (batch,) arrays
            value = np.asarray(getattr(self, name), dtype=float)
            if not (value.ndim <= 1 and np.all(np.isfinite(value)) and np.all(value >= 0.0)):
                raise ValueError(f"DrydenParams.{name} must be finite and >= 0, got {value!r}")
        for name in ("length_v_m", "length_w_m", "airspeed_mps", "span_m"):
            value = getattr(self, name)
            if not (math.isfinite(value) and value > 0.0):
                raise ValueError(f"DrydenParams.{name} must be finite and > 0, got {value!r}")


def _low_altitude_ft(h_ft: float) -> tuple[float, float, float]:
    """MIL-F-8785C low-altitude model (h < 1000 ft): (L_v ft, L_w ft, σ_v/σ_w)."""
    d = 0.177 + 0.000823 * h_ft
    return h_ft / d**1.2, h_ft, 1.0 / d**0.4


def dryden_params(altitude_m: float, w20_mps: float, airspeed_mps: float, span_m: float) -> DrydenParams:
    """MIL-F-8785C Dryden intensities and scale lengths at an altitude.

    Parameters
    ----------
    altitude_m : m
        Height above ground. Clamped below at :data:`MIN_ALTITUDE_FT` (10 ft).
    w20_mps : m/s
        Wind speed at 20 ft (see :data:`INTENSITY_W20_MPS`).
    airspeed_mps : m/s
        True airspeed.
    span_m : m
        Wing span.

    Returns
    -------
    DrydenParams

    Notes
    -----
    With h in feet (the standard's formulas are written in feet):

    * h ≤ 1000 ft: L_w = h, L_v = h/(0.177 + 0.000823 h)^1.2, σ_w = 0.1 W20,
      σ_v = σ_w/(0.177 + 0.000823 h)^0.4.
    * h ≥ 2000 ft: L_v = L_w = 1750 ft, σ_v = σ_w.
    * 1000–2000 ft: L and σ linearly interpolated between the two.

    **Simplification above 1000 ft:** MIL-F-8785C gives the medium/high-altitude
    intensity from a probability-of-exceedance figure; we have no published copy
    of its values to hand, so we keep σ_w = 0.1 W20 at all altitudes. At 1000 ft
    the low-altitude model already gives σ_v = σ_w (the denominator is 1.0),
    so the interpolation of σ is flat and only the scale lengths change
    (1000 ft → 1750 ft). Give explicit σ values (scenario keys ``sigma_v_mps``,
    ``sigma_w_mps``) to model a specific high-altitude intensity.

    Lengths follow MIL-F-8785C; MIL-HDBK-1797 halves them (see module doc).
    """
    for name, value in (("airspeed_mps", airspeed_mps), ("span_m", span_m)):
        if not (math.isfinite(value) and value > 0.0):
            raise ValueError(f"dryden_params: {name} must be finite and > 0, got {value!r}")
    if not (math.isfinite(w20_mps) and w20_mps >= 0.0):
        raise ValueError(f"dryden_params: w20_mps must be finite and >= 0, got {w20_mps!r}")
    if not math.isfinite(altitude_m):
        raise ValueError(f"dryden_params: altitude_m must be finite, got {altitude_m!r}")
    h_ft = max(altitude_m / FT_M, MIN_ALTITUDE_FT)
    sigma_w = 0.1 * w20_mps
    if h_ft <= _LOW_FT:
        lv_ft, lw_ft, ratio = _low_altitude_ft(h_ft)
    else:
        lv_lo, lw_lo, ratio_lo = _low_altitude_ft(_LOW_FT)
        frac = min((h_ft - _LOW_FT) / (_HIGH_FT - _LOW_FT), 1.0)
        lv_ft = lv_lo + frac * (_HIGH_SCALE_FT - lv_lo)
        lw_ft = lw_lo + frac * (_HIGH_SCALE_FT - lw_lo)
        ratio = ratio_lo + frac * (1.0 - ratio_lo)
    return DrydenParams(
        sigma_v_mps=ratio * sigma_w,
        sigma_w_mps=sigma_w,
        length_v_m=lv_ft * FT_M,
        length_w_m=lw_ft * FT_M,
        airspeed_mps=float(airspeed_mps),
        span_m=float(span_m),
    )


def _p_gain(params: DrydenParams) -> float:
    """Static gain of H_p (SI: (rad/s)·√s per unit-intensity noise)."""
    v, b, lw = params.airspeed_mps, params.span_m, params.length_w_m
    shape = (math.pi / (4.0 * b)) ** (1.0 / 6.0) / lw ** (1.0 / 3.0)
    return params.sigma_w_mps * math.sqrt(0.8 / v) * shape


def dryden_state_space(params: DrydenParams) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Continuous realisation ``x' = A x + B w``, ``y = C x`` of the three filters.

    States (all lower-triangular coupling, so the discrete Φ is triangular too):
    ``x0 = w1/(1+Ts)``, ``x1 = w1/(1+Ts)²`` with ``T = L_v/V``; ``x2`` the
    ``1/(1+T_r s)`` lag of v_g with ``T_r = 3b/(πV)``; ``x3 = w2/(1+T_p s)`` with
    ``T_p = 4b/(πV)``. Outputs ``y = [v_g, p_g, r_g]``:
    ``v_g = K_v(√3 x0 + (1-√3) x1)``, ``r_g = (v_g - x2)/(V T_r)``,
    ``p_g = K_p x3``. ``w = [w1, w2]`` is white noise of intensity
    :data:`NOISE_INTENSITY` each.

    Returns
    -------
    a : (4, 4) ndarray, b : (4, 2) ndarray, c : (3, 4) ndarray
    """
    v = params.airspeed_mps
    t = params.length_v_m / v
    tr = 3.0 * params.span_m / (math.pi * v)
    tp = 4.0 * params.span_m / (math.pi * v)
    kv = params.sigma_v_mps * math.sqrt(params.length_v_m / (math.pi * v))
    kp = _p_gain(params)
    cv = np.array([kv * _SQRT3, kv * (1.0 - _SQRT3), 0.0, 0.0])
    a = np.zeros((4, 4))
    a[0, 0] = -1.0 / t
    a[1, 0], a[1, 1] = 1.0 / t, -1.0 / t
    a[2, :] = cv / tr
    a[2, 2] = -1.0 / tr
    a[3, 3] = -1.0 / tp
    b = np.zeros((4, 2))
    b[0, 0] = 1.0 / t
    b[3, 1] = 1.0 / tp
    c = np.zeros((3, 4))
    c[0] = cv
    c[1, 3] = kp
    c[2] = cv / (v * tr)
    c[2, 2] = -1.0 / (v * tr)
    return a, b, c


def van_loan(a: np.ndarray, q: np.ndarray, dt: float) -> tuple[np.ndarray, np.ndarray]:
    """Exact discretisation of ``x' = A x + noise`` with noise covariance rate ``q``.

    Parameters
    ----------
    a : (n, n) ndarray
        Continuous system matrix (1/s).
    q : (n, n) ndarray
        ``B W Bᵀ``: intensity of the state noise.
    dt : s
        Step.

    Returns
    -------
    phi : (n, n) ndarray
        ``expm(A dt)``.
    qd : (n, n) ndarray
        ``∫₀^dt expm(Aτ) q expm(Aᵀτ) dτ`` (symmetrised), by Van Loan's method.
    """
    n = a.shape[0]
    m = np.zeros((2 * n, 2 * n))
    m[:n, :n] = -a
    m[:n, n:] = q
    m[n:, n:] = a.T
    f = scipy.linalg.expm(m * dt)
    phi = f[n:, n:].T
    qd = phi @ f[:n, n:]
    return phi, 0.5 * (qd + qd.T)


def _lower_sqrt(cov: np.ndarray) -> np.ndarray:
    """Lower-triangular ``L`` with ``L Lᵀ = cov`` for a symmetric PSD matrix.

    Robust to (near-)singular ``cov``: a symmetric square root from ``eigh``
    (negative round-off eigenvalues clipped) turned triangular by QR.
    """
    lam, vec = np.linalg.eigh(0.5 * (cov + cov.T))
    s = vec * np.sqrt(np.clip(lam, 0.0, None))
    r = np.linalg.qr(s.T, mode="r")
    low = r.T
    signs = np.where(np.diag(low) < 0.0, -1.0, 1.0)
    return low * signs  # flip column signs: L Lᵀ unchanged, positive diagonal


def analytic_psd(params: DrydenParams, omega: np.ndarray) -> dict[str, np.ndarray]:
    """MIL-F-8785C Dryden spectra, one-sided in ω (σ² = ∫₀^∞ Φ dω).

    Parameters
    ----------
    params : DrydenParams
    omega : rad/s
        Angular frequencies (≥ 0).

    Returns
    -------
    dict
        ``"v_gust"`` in (m/s)²/(rad/s), ``"p_gust"`` and ``"r_gust"`` in
        (rad/s)²/(rad/s).
    """
    w = np.asarray(omega, dtype=float)
    v, b = params.airspeed_mps, params.span_m
    lv, lw = params.length_v_m, params.length_w_m
    x = (lv * w / v) ** 2
    phi_v = params.sigma_v_mps**2 * lv / (math.pi * v) * (1.0 + 3.0 * x) / (1.0 + x) ** 2
    phi_p = (
        params.sigma_w_mps**2
        * (0.8 / v)
        * (math.pi / (4.0 * b)) ** (1.0 / 3.0)
        / (lw ** (2.0 / 3.0) * (1.0 + (4.0 * b * w / (math.pi * v)) ** 2))
    )
    phi_r = (w / v) ** 2 / (1.0 + (3.0 * b * w / (math.pi * v)) ** 2) * phi_v
    return {"v_gust": phi_v, "p_gust": phi_p, "r_gust": phi_r}


def stationary_sigma(params: DrydenParams) -> dict[str, float]:
    """Stationary RMS of v_g (m/s), p_g and r_g (rad/s) from the Lyapunov equation."""
    a, b, c = dryden_state_space(params)
    p_inf = scipy.linalg.solve_continuous_lyapunov(a, -NOISE_INTENSITY * (b @ b.T))
    var = np.diag(c @ p_inf @ c.T)
    names = ("v_gust", "p_gust", "r_gust")
    return {name: float(np.sqrt(max(s, 0.0))) for name, s in zip(names, var, strict=True)}


#: The side/yaw-gust block of the step noise covariance is numerically rank 2
#: (one white noise drives three states over a short step); its third
#: eigenvalue is dropped when below this fraction of the largest (the
#: covariance is then reproduced to this relative accuracy).
RANK_TOL = 1e-8


def noise_factor(qd: np.ndarray) -> np.ndarray:
    """A factor ``F`` with ``F Fᵀ = Q_d`` using as few columns (normal draws) as the rank needs.

    ``Q_d`` is the step noise covariance of :func:`dryden_state_space`'s four
    states: the p state (index 3) is independent of the (v, r) states. The
    (v, r) block is driven by one white noise, so over a step much shorter
    than its time constants its third eigenvalue is 1e-11 to 1e-9 of the
    largest (light airplane at 5 to 20 ms): two columns from its
    eigen-decomposition reproduce it to that relative accuracy, far below any
    Monte Carlo error. When the third eigenvalue exceeds :data:`RANK_TOL` of
    the largest (long base steps), three columns are kept.
    Returns ``(4, q)``, ``q`` = 3 or 4.
    """
    block = 0.5 * (qd[:3, :3] + qd[:3, :3].T)
    lam, vec = np.linalg.eigh(block)  # ascending
    keep = lam > RANK_TOL * max(lam[-1], 0.0)
    keep[-1] = True
    cols = vec[:, keep] * np.sqrt(lam[keep])
    cols = cols[:, ::-1]  # largest first
    q = cols.shape[1] + 1
    f = np.zeros((4, q))
    f[:3, : q - 1] = cols
    f[3, q - 1] = math.sqrt(max(qd[3, 3], 0.0))
    return f


@dataclass(frozen=True)
class DrydenTurbulence:
    """Dryden lateral turbulence as a shaped-noise disturbance source.

    Feeds channels 0, 1, 2 (v_gust m/s, p_gust rad/s, r_gust rad/s). Each run
    draws from its own generator (4 normals for its stationary initial state,
    then 3 per base step in time order: two for the rank-2 side/yaw-gust
    noise, one for the roll gust), so run ``i`` alone equals run ``i`` of a
    batch and the block length does not change the numbers. ``sigma_v_mps``
    and ``sigma_w_mps`` of ``params`` may be ``(batch,)`` arrays: the filters
    are built for unit intensity and each run's noise is scaled by its own σ.

    Parameters
    ----------
    params : DrydenParams
    """

    params: DrydenParams
    component: str = "dryden"

    def noise_filter(self, dt: float, batch: int) -> NoiseFilter:
        """Exact discrete model (Van Loan) at base step ``dt`` for a batch of ``batch`` runs."""
        if not (math.isfinite(dt) and dt > 0.0):
            raise ValueError(f"DrydenTurbulence: dt must be > 0, got {dt!r}")
        unit = replace(self.params, sigma_v_mps=1.0, sigma_w_mps=1.0)
        a, b, c = dryden_state_space(unit)
        q = NOISE_INTENSITY * (b @ b.T)
        phi, qd = van_loan(a, q, float(dt))
        phi = np.tril(phi)  # Φ is block lower-triangular: (v, r) states 0..2, p state 3
        phi[3, :3] = 0.0
        p_inf = scipy.linalg.solve_continuous_lyapunov(a, -q)
        lp = np.zeros((4, 4))
        lp[:3, :3] = _lower_sqrt(p_inf[:3, :3])
        lp[3, 3] = math.sqrt(max(p_inf[3, 3], 0.0))
        out = np.zeros((N_CHANNELS, 4))
        out[:3] = c
        sv = np.broadcast_to(np.asarray(self.params.sigma_v_mps, dtype=float), (batch,))
        sw = np.broadcast_to(np.asarray(self.params.sigma_w_mps, dtype=float), (batch,))
        scale = np.ascontiguousarray(np.stack([sv, sv, sv, sw]))
        return NoiseFilter(phi=phi, noise_factor=noise_factor(qd), init_factor=lp, out=out, scale=scale)
