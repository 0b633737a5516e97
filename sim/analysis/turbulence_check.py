"""Check simulated Dryden turbulence against its specification.

Runs the turbulence generator alone (the same code the stepping core uses)
for a set of runs, and compares with MIL-F-8785C: the sample σ of each gust
channel against the specified stationary σ, and a Welch PSD against the
analytic one-sided spectrum, in the band where the estimate is reliable (from
five frequency bins up to a third of the Nyquist frequency, where aliasing of
the sampled process is small). The table and figure are in
:mod:`rollrig.sim.report.turbulence_report`. This is the verification method of Madden,
"Verifying Implementation of the Dryden Turbulence Model" (NASA Langley).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from rollrig.sim.disturbance import disturbance_record
from rollrig.sim.seeding import run_generators
from rollrig.sim.turbulence import DrydenParams, DrydenTurbulence, analytic_psd, stationary_sigma

__all__ = ["TurbulenceCheck", "check_turbulence", "BYTES_PER_RECORD_STEP", "CHANNELS"]

#: peak memory per record and time step of :func:`check_turbulence` (4 channels, with copies)
BYTES_PER_RECORD_STEP = 160

CHANNELS = ("v_gust", "p_gust", "r_gust")


@dataclass(frozen=True)
class TurbulenceCheck:
    """Sample statistics of simulated turbulence beside the specification."""

    params: DrydenParams
    dt: float
    runs: int
    duration_s: float
    sigma_spec: dict[str, float]
    sigma_sample: dict[str, float]
    sigma_se: dict[str, float]
    omega: np.ndarray
    psd_sample: dict[str, np.ndarray]
    psd_spec: dict[str, np.ndarray]
    band: tuple[float, float]
    max_db_error: dict[str, float]


def check_turbulence(
    params: DrydenParams, *, dt: float = 0.01, duration_s: float = 600.0, runs: int = 8, seed: int = 1
) -> TurbulenceCheck:
    """Simulate ``runs`` records of ``duration_s`` and compare with the spec."""
    from scipy.signal import welch

    n = int(round(duration_s / dt))
    src = DrydenTurbulence(params)
    x = disturbance_record(src, dt, n, lambda name: run_generators(seed, range(runs), name))  # (n, runs, 4)
    spec = stationary_sigma(params)
    nper = min(n, 2 ** int(math.log2(max(n // 8, 256))))
    fs = 1.0 / dt
    sample, se, psd_s = {}, {}, {}
    f = None
    for i, ch in enumerate(CHANNELS):
        sig = x[:, :, i]
        sample[ch] = float(np.sqrt(np.mean(sig**2)))
        per_run = np.sqrt(np.mean(sig**2, axis=0))
        se[ch] = float(np.std(per_run, ddof=1) / math.sqrt(runs)) if runs > 1 else math.inf
        f, pxx = welch(sig, fs=fs, nperseg=nper, axis=0)
        psd_s[ch] = pxx.mean(axis=1) / (2 * math.pi)  # one-sided per Hz -> one-sided per rad/s
    omega = 2 * math.pi * f
    psd_a = analytic_psd(params, omega)
    lo, hi = 5 * omega[1], (math.pi / dt) / 3
    band = (omega >= lo) & (omega <= hi)
    err = {ch: float(np.max(np.abs(10 * np.log10(psd_s[ch][band] / psd_a[ch][band])))) for ch in CHANNELS}
    return TurbulenceCheck(params, dt, runs, duration_s, spec, sample, se, omega, psd_s, psd_a, (lo, hi), err)
