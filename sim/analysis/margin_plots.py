"""Plots of the loop margins: Bode (margins marked), Nichols, Nyquist near −1.

Moved out of :mod:`sim.analysis.linear_loop` (which keeps a thin
``plot_margins`` wrapper for existing callers). Frequency responses use the
exact delays of :func:`sim.analysis.linear_loop.open_loop_response`.
"""

from __future__ import annotations

import math
import os
import tempfile
from pathlib import Path
from typing import Any

import numpy as np

from .linear_loop import DEFAULT_OMEGA, LoopParts, _as_omega, margins, open_loop_response

__all__ = ["plot_margins"]


def plot_margins(parts: LoopParts, path: str | os.PathLike[str], omega: Any = None) -> Path:
    """Bode (margins marked), Nichols and Nyquist-near-−1 plots on one PNG.

    Parameters
    ----------
    parts : LoopParts
        The loop.
    path : str or path-like
        PNG file to write (atomically: temp file, then rename).
    omega : array_like, rad/s, optional
        Grid (default :data:`DEFAULT_OMEGA`).

    Returns
    -------
    pathlib.Path
        The written file.
    """
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    w = np.unique(_as_omega(DEFAULT_OMEGA if omega is None else omega))
    m = margins(parts, w)
    big_l = open_loop_response(parts, w)
    mag_db = 20.0 * np.log10(np.abs(big_l))
    phase = np.degrees(np.unwrap(np.angle(big_l)))
    # Shift the unwrapped phase so it starts in (−360, 0] for readability.
    phase -= 360.0 * math.ceil(phase[0] / 360.0)

    fig, axes = plt.subplots(2, 2, figsize=(12, 8))
    ax_mag, ax_nic = axes[0]
    ax_ph, ax_nyq = axes[1]

    ax_mag.semilogx(w, mag_db, color="C0")
    ax_mag.axhline(0.0, color="k", lw=0.6)
    ax_mag.set_ylabel("|L| (dB)")
    ax_mag.set_title("Loop broken at aileron command (exact delays)")
    ax_ph.semilogx(w, phase, color="C0")
    for k in range(-8, 1):
        ax_ph.axhline(-180.0 + 360.0 * k, color="k", lw=0.4, ls=":")
    ax_ph.set_ylim(max(phase.min(), -720.0) - 20.0, max(phase.max(), -90.0) + 20.0)
    ax_ph.set_ylabel("∠L (deg)")
    ax_ph.set_xlabel("ω (rad/s)")
    if math.isfinite(m.gain_crossover_rad_s):
        wc = m.gain_crossover_rad_s
        ph_c = np.interp(wc, w, phase)
        ax_mag.axvline(wc, color="C2", ls="--", lw=0.8)
        ax_ph.axvline(wc, color="C2", ls="--", lw=0.8)
        ax_ph.annotate(
            f"PM {m.phase_margin_deg:.1f}° @ {wc:.3g} rad/s\ndelay margin {m.delay_margin_s * 1e3:.0f} ms",
            (wc, ph_c),
            textcoords="offset points",
            xytext=(10, -40),
            color="C2",
        )
    if math.isfinite(m.phase_crossover_rad_s):
        wp = m.phase_crossover_rad_s
        ax_mag.axvline(wp, color="C3", ls="--", lw=0.8)
        ax_mag.annotate(
            f"GM {m.gain_margin_db:.1f} dB @ {wp:.3g} rad/s",
            (wp, -m.gain_margin_db),
            textcoords="offset points",
            xytext=(8, -14),
            color="C3",
        )
    for ax in (ax_mag, ax_ph):
        ax.grid(True, which="both", lw=0.3)

    sel = (mag_db > -40.0) & (mag_db < 40.0)
    ax_nic.plot(phase[sel], mag_db[sel], color="C0")
    if np.any(sel):
        lo_ph, hi_ph = phase[sel].min() - 30.0, phase[sel].max() + 30.0
        for k in range(-8, 2):
            if lo_ph <= -180.0 + 360.0 * k <= hi_ph:
                ax_nic.plot(-180.0 + 360.0 * k, 0.0, "r+", ms=12)
    ax_nic.set_xlabel("∠L (deg)")
    ax_nic.set_ylabel("|L| (dB)")
    ax_nic.set_title("Nichols")
    ax_nic.grid(True, lw=0.3)

    ax_nyq.plot(big_l.real, big_l.imag, color="C0", label="L(jω)")
    ax_nyq.plot(big_l.real, -big_l.imag, color="C0", ls=":", lw=0.7)
    ax_nyq.plot(-1.0, 0.0, "r+", ms=12)
    th = np.linspace(0.0, 2.0 * math.pi, 361)
    ax_nyq.plot(np.cos(th), np.sin(th), color="0.6", lw=0.6, label="|L| = 1")
    # Balanced disk of "bad" loop values: L with |(1−L)/(1+L)|/2 ≥ 1/α.
    a = m.disk_alpha
    if a < 2.0:
        lo, hi = -(2.0 + a) / (2.0 - a), -(2.0 - a) / (2.0 + a)
        centre, radius = 0.5 * (lo + hi), 0.5 * (hi - lo)
        ax_nyq.plot(
            centre + radius * np.cos(th),
            radius * np.sin(th),
            color="C3",
            lw=0.8,
            label=f"disk α={a:.2f}: ±{m.disk_gain_margin_db:.1f} dB, ±{m.disk_phase_margin_deg:.1f}°",
        )
    ax_nyq.set_xlim(-3.0, 1.0)
    ax_nyq.set_ylim(-2.0, 2.0)
    ax_nyq.set_aspect("equal")
    ax_nyq.set_title("Nyquist near −1")
    ax_nyq.legend(loc="lower right", fontsize=8)
    ax_nyq.grid(True, lw=0.3)
    fig.suptitle(
        f"GM {m.gain_margin_db:.1f} dB, PM {m.phase_margin_deg:.1f}°, "
        f"bandwidth {m.bandwidth_rad_s:.3g} rad/s, "
        f"{'stable' if m.closed_loop_stable else 'UNSTABLE'} (Padé {m.pade_order}), "
        f"MIL-F-9490D {'pass' if m.meets_mil_f_9490d else 'fail'}"
    )
    fig.tight_layout()

    out = Path(path)
    out.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(suffix=".png", dir=out.parent)
    os.close(fd)
    try:
        fig.savefig(tmp, dpi=110, format="png")
        os.replace(tmp, out)
    finally:
        plt.close(fig)
        if os.path.exists(tmp):
            os.remove(tmp)
    return out
