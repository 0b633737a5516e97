"""Check simulated Dryden turbulence against its specification.

Runs the turbulence generator alone (the same code the stepping core uses)
for a set of runs, and compares with MIL-F-8785C: the sample σ of each gust
channel against the specified stationary σ, and a Welch PSD against the
analytic one-sided spectrum, in the band where the estimate is reliable (from
five frequency bins up to a third of the Nyquist frequency, where aliasing of
the sampled process is small). This is the verification method of Madden,
"Verifying Implementation of the Dryden Turbulence Model" (NASA Langley).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from rollrig.sim.disturbance import disturbance_record
from rollrig.sim.seeding import run_generators
from rollrig.sim.turbulence import DrydenParams, DrydenTurbulence, analytic_psd, stationary_sigma

from .table import Table, fmt_number

__all__ = ["TurbulenceCheck", "check_turbulence", "turbulence_table", "plot_turbulence"]

CHANNELS = ("v_gust", "p_gust", "r_gust")
_UNITS = {"v_gust": ("m/s", 1.0), "p_gust": ("deg/s", 180 / math.pi), "r_gust": ("deg/s", 180 / math.pi)}


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


def turbulence_table(chk: TurbulenceCheck) -> Table:
    p = chk.params
    t = Table(
        title=(
            f"Dryden turbulence (MIL-F-8785C): V = {p.airspeed_mps:.3g} m/s, b = {p.span_m:.3g} m, "
            f"σ_v = {p.sigma_v_mps:.3g} m/s, σ_w = {p.sigma_w_mps:.3g} m/s, "
            f"L_v = {p.length_v_m:.4g} m, L_w = {p.length_w_m:.4g} m"
        ),
        columns=["channel", "specified σ", "sample σ", "ratio", "PSD max error (dB)"],
    )
    t.records = []
    for ch in CHANNELS:
        unit, scale = _UNITS[ch]
        ratio = chk.sigma_sample[ch] / chk.sigma_spec[ch] if chk.sigma_spec[ch] > 0 else math.nan
        t.add(
            ch,
            f"{fmt_number(chk.sigma_spec[ch] * scale)} {unit}",
            f"{fmt_number(chk.sigma_sample[ch] * scale)} {unit}",
            f"{ratio:.3f}",
            f"{chk.max_db_error[ch]:.2f}",
        )
        t.records.append(
            {
                "channel": ch,
                "sigma_spec_si": chk.sigma_spec[ch],
                "sigma_sample_si": chk.sigma_sample[ch],
                "ratio": ratio,
                "sigma_standard_error_si": chk.sigma_se[ch],
                "psd_max_error_db": chk.max_db_error[ch],
            }
        )
    t.notes.append(
        f"{chk.runs} records of {chk.duration_s:g} s at dt = {chk.dt:g} s; PSD compared over "
        f"{chk.band[0]:.3g}–{chk.band[1]:.3g} rad/s (Welch estimate, one-sided in ω)."
    )
    return t


def plot_turbulence(chk: TurbulenceCheck, path: Path) -> None:
    from .plots import pyplot

    plt = pyplot()
    fig, axes = plt.subplots(1, 3, figsize=(13, 4), layout="constrained")
    lo, hi = chk.band
    for ax, ch in zip(axes, CHANNELS, strict=True):
        unit, scale = _UNITS[ch]
        w = chk.omega[1:]
        ax.loglog(w, chk.psd_sample[ch][1:] * scale**2, color="tab:blue", lw=1.0, label="simulated (Welch)")
        ax.loglog(w, chk.psd_spec[ch][1:] * scale**2, color="k", lw=1.4, ls="--", label="MIL-F-8785C Dryden")
        ax.axvspan(lo, hi, color="tab:green", alpha=0.07, lw=0, label="compared band")
        ax.set_xlabel("ω (rad/s)")
        ax.set_ylabel(f"PSD ({unit})²/(rad/s)")
        ax.set_title(f"{ch}: max error {chk.max_db_error[ch]:.2f} dB in band", fontsize=10)
        ax.grid(alpha=0.3, which="both")
    axes[0].legend(fontsize=8)
    fig.savefig(path, dpi=110)
    plt.close(fig)
