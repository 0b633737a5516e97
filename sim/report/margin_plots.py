"""Plots of the loop margins: Bode (margins marked), Nichols, Nyquist near −1.

Takes any loop :func:`sim.analysis.linear_loop.margins` takes (the bank-hold
model with exact delays, a python-control system, or frequency-response data)
and the margins already computed for it. Margin labels go into each panel's
legend (placed by matplotlib where it covers the fewest data points), never
as free text over the curves; the Nyquist legend sits outside its axes.
"""

from __future__ import annotations

import math
import os
import tempfile
from pathlib import Path
from typing import Any

import numpy as np

__all__ = ["margin_figure", "plot_margins", "write_margin_plots"]


def _save(fig: Any, plt: Any, path: Path) -> Path:
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


def margin_figure(loop: Any, omega: Any = None, *, result: Any = None, title: str = "") -> Any:
    """The margins figure (matplotlib ``Figure``, Agg); see :func:`plot_margins`."""
    from rollrig.sim.analysis.linear_loop import margins
    from rollrig.sim.report.plots import pyplot

    plt = pyplot()
    m = result if result is not None else margins(loop, omega)
    from rollrig.sim.analysis.linear_loop import loop_evaluator

    ev = loop_evaluator(loop)
    lo, hi = m.omega_range_rad_s
    w = np.logspace(math.log10(lo), math.log10(hi), 4000) if omega is None else np.unique(omega)
    big_l = ev.loop(w)
    mag_db = 20.0 * np.log10(np.maximum(np.abs(big_l), 1e-300))
    phase = np.degrees(np.unwrap(np.angle(big_l)))
    # Shift the unwrapped phase so it starts in (−360, 0] for readability.
    phase -= 360.0 * math.ceil(phase[0] / 360.0)

    fig, axes = plt.subplots(2, 2, figsize=(13, 8.5), layout="constrained")
    ax_mag, ax_nic = axes[0]
    ax_ph, ax_nyq = axes[1]

    ax_mag.semilogx(w, mag_db, color="C0", label="|L(jω)|")
    ax_mag.axhline(0.0, color="k", lw=0.6)
    ax_mag.set_xlabel("ω (rad/s)")
    ax_mag.set_ylabel("|L| (dB)")
    ax_mag.set_title("Bode magnitude, loop broken at the plant input")
    ax_ph.semilogx(w, phase, color="C0", label="∠L(jω)")
    for k in range(-8, 1):
        ax_ph.axhline(-180.0 + 360.0 * k, color="k", lw=0.4, ls=":")
    ax_ph.set_ylim(max(phase.min(), -720.0) - 20.0, max(phase.max(), -90.0) + 20.0)
    ax_ph.set_ylabel("∠L (deg)")
    ax_ph.set_xlabel("ω (rad/s)")
    ax_ph.set_title("Bode phase")
    if math.isfinite(m.gain_crossover_rad_s):
        wc = m.gain_crossover_rad_s
        label = (
            f"PM {m.phase_margin_deg:.1f}° at {wc:.3g} rad/s, delay margin {m.delay_margin_s * 1e3:.0f} ms"
        )
        ax_mag.axvline(wc, color="C2", ls="--", lw=0.8)
        ax_ph.axvline(wc, color="C2", ls="--", lw=0.8, label=label)
        ax_ph.plot([wc], [np.interp(wc, w, phase)], "o", color="C2", ms=5)
    if math.isfinite(m.phase_crossover_rad_s) and m.phase_crossover_rad_s > 0.0:
        wp = m.phase_crossover_rad_s
        # the margin drawn as a vertical bar from |L| to 0 dB at the crossover
        ax_mag.plot(
            [wp, wp],
            [-m.gain_margin_db, 0.0],
            color="C3",
            lw=2.0,
            label=f"GM {m.gain_margin_db:.1f} dB at {wp:.3g} rad/s",
        )
    elif m.phase_crossover_rad_s == 0.0:
        ax_mag.plot([], [], color="C3", lw=2.0, label=f"GM {m.gain_margin_db:.1f} dB at ω = 0 (L(0) < 0)")
    for ax in (ax_mag, ax_ph):
        ax.grid(True, which="both", lw=0.3)
        ax.legend(loc="best", fontsize=8)

    sel = (mag_db > -40.0) & (mag_db < 40.0)
    ax_nic.plot(phase[sel], mag_db[sel], color="C0", label="L(jω)")
    if np.any(sel):
        lo_ph, hi_ph = phase[sel].min() - 30.0, phase[sel].max() + 30.0
        first = True
        for k in range(-8, 2):
            if lo_ph <= -180.0 + 360.0 * k <= hi_ph:
                ax_nic.plot(-180.0 + 360.0 * k, 0.0, "r+", ms=12, label="critical point" if first else None)
                first = False
    ax_nic.set_xlabel("∠L (deg)")
    ax_nic.set_ylabel("|L| (dB)")
    ax_nic.set_title("Nichols")
    ax_nic.grid(True, lw=0.3)
    ax_nic.legend(loc="best", fontsize=8)

    ax_nyq.plot(big_l.real, big_l.imag, color="C0", label="L(jω), ω > 0")
    ax_nyq.plot(big_l.real, -big_l.imag, color="C0", ls=":", lw=0.7, label="L(jω), ω < 0")
    ax_nyq.plot(-1.0, 0.0, "r+", ms=12, label="−1")
    th = np.linspace(0.0, 2.0 * math.pi, 361)
    ax_nyq.plot(np.cos(th), np.sin(th), color="0.6", lw=0.6, label="|L| = 1")
    # Balanced disk of "bad" loop values: L with |(1−L)/(1+L)|/2 ≥ 1/α.
    a = m.disk_alpha
    if a < 2.0:
        d_lo, d_hi = -(2.0 + a) / (2.0 - a), -(2.0 - a) / (2.0 + a)
        centre, radius = 0.5 * (d_lo + d_hi), 0.5 * (d_hi - d_lo)
        ax_nyq.plot(
            centre + radius * np.cos(th),
            radius * np.sin(th),
            color="C3",
            lw=0.8,
            label=f"disk α={a:.2f}: ±{m.disk_gain_margin_db:.1f} dB, ±{m.disk_phase_margin_deg:.1f}°",
        )
    if math.isfinite(m.stability_margin_rad_s):
        ls = complex(ev.loop(np.array([m.stability_margin_rad_s]))[0])
        ax_nyq.plot(
            [-1.0, ls.real],
            [0.0, ls.imag],
            color="C1",
            lw=1.2,
            label=f"min |1+L| = {m.stability_margin:.2f} at {m.stability_margin_rad_s:.3g} rad/s",
        )
    ax_nyq.set_xlim(-3.0, 1.0)
    ax_nyq.set_ylim(-2.0, 2.0)
    ax_nyq.set_aspect("equal")
    ax_nyq.set_xlabel("Re L")
    ax_nyq.set_ylabel("Im L")
    ax_nyq.set_title("Nyquist near −1")
    ax_nyq.legend(loc="upper left", bbox_to_anchor=(1.02, 1.0), fontsize=8, borderaxespad=0.0)
    ax_nyq.grid(True, lw=0.3)
    stable = {True: "stable", False: "UNSTABLE", None: "stability not known from data"}[m.closed_loop_stable]
    fig.suptitle(
        (f"{title} — " if title else "") + f"GM {m.gain_margin_db:.1f} dB, PM {m.phase_margin_deg:.1f}°, "
        f"bandwidth {m.bandwidth_rad_s:.3g} rad/s, {stable}, "
        f"MIL-F-9490D {'pass' if m.meets_mil_f_9490d else 'fail'}"
    )
    return fig


def plot_margins(
    loop: Any,
    path: str | os.PathLike[str],
    omega: Any = None,
    *,
    result: Any = None,
    title: str = "",
) -> Path:
    """Bode (margins marked), Nichols and Nyquist-near-−1 plots on one PNG.

    Parameters
    ----------
    loop : LoopParts, python-control system or frequency-response data
        The loop (see :func:`sim.analysis.linear_loop.margins`).
    path : str or path-like
        PNG file to write (atomically: temp file, then rename).
    omega : array_like, rad/s, optional
        Grid (default: the one :func:`margins` uses).
    result : LoopMargins, optional
        Margins already computed for ``loop`` (computed here if not given).
    title : str
        First part of the figure title.

    Returns
    -------
    pathlib.Path
        The written file.
    """
    from rollrig.sim.report.plots import pyplot

    fig = margin_figure(loop, omega, result=result, title=title)
    return _save(fig, pyplot(), Path(path))


def write_margin_plots(rep: Any, folder: Path) -> list[Path]:
    """PNG plots of a scenario's margins report into ``folder`` (when a linear model exists).

    Returns
    -------
    list of pathlib.Path
        Files written.
    """
    out = []
    if rep.parts is not None:
        out.append(
            plot_margins(
                rep.parts, Path(folder) / "margins.png", result=rep.analytic, title=rep.scenario.title
            )
        )
    return out
