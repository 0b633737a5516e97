"""Table and figure of a Dryden turbulence check (see :mod:`rollrig.sim.analysis.turbulence_check`)."""

from __future__ import annotations

import math
from pathlib import Path

from rollrig.sim.analysis.turbulence_check import CHANNELS, TurbulenceCheck

from .table import Table, fmt_number

__all__ = ["turbulence_table", "plot_turbulence", "turbulence_title"]

_UNITS = {"v_gust": ("m/s", 1.0), "p_gust": ("deg/s", 180 / math.pi), "r_gust": ("deg/s", 180 / math.pi)}
_SI = {"v_gust": "m/s", "p_gust": "rad/s", "r_gust": "rad/s"}


def turbulence_title(chk: TurbulenceCheck, altitude_ft: float | None = None) -> str:
    """``Dryden turbulence (MIL-F-8785C): V = … m/s, h = … ft, b = … m``."""
    p = chk.params
    alt = "" if altitude_ft is None else f", h = {altitude_ft:.4g} ft"
    return f"Dryden turbulence (MIL-F-8785C): V = {p.airspeed_mps:.3g} m/s{alt}, b = {p.span_m:.3g} m"


def turbulence_table(chk: TurbulenceCheck, altitude_ft: float | None = None) -> Table:
    p = chk.params
    t = Table(
        title=(
            f"{turbulence_title(chk, altitude_ft)}, "
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
                "unit": _SI[ch],
                "sigma_spec": chk.sigma_spec[ch],
                "sigma_sample": chk.sigma_sample[ch],
                "ratio": ratio,
                "sigma_standard_error": chk.sigma_se[ch],
                "psd_max_error_db": chk.max_db_error[ch],
            }
        )
    t.notes.append(
        f"{chk.runs} records of {chk.duration_s:g} s at dt = {chk.dt:g} s; PSD compared over "
        f"{chk.band[0]:.3g}–{chk.band[1]:.3g} rad/s (Welch estimate, one-sided in ω)."
    )
    return t


def plot_turbulence(chk: TurbulenceCheck, path: Path, altitude_ft: float | None = None) -> None:
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
    axes[0].legend(fontsize=8, loc="lower left")
    fig.suptitle(turbulence_title(chk, altitude_ft))
    fig.savefig(path, dpi=110)
    plt.close(fig)
