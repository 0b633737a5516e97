"""Plots of a controller comparison: bank responses, metric bars with intervals, linear loops."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
from rollrig.sim.metrics import METRIC_INFO

from .plots import pyplot

__all__ = ["plot_bank_overlay", "plot_metric_bars", "plot_loops", "worst_metric"]

_DEG = 180.0 / math.pi


def worst_metric(cmp_) -> str:
    """The metric that picks each controller's worst run (ITAE for steps, RMS error for holds)."""
    return "itae" if "itae" in cmp_.headline else "rms_error_rad"


def plot_bank_overlay(cmp_, path: Path) -> None:
    """Top: every controller's bank in the shown run; bottom: each controller's worst run."""
    plt = pyplot()
    fig, axes = plt.subplots(2, 1, figsize=(9, 7), sharex=True)
    key = worst_metric(cmp_)
    t = cmp_.results[0].t
    for ax in axes:
        ax.plot(t, cmp_.bank_cmd * _DEG, color="black", lw=1.0, ls="--", label="command")
    for i, r in enumerate(cmp_.results):
        color = f"C{i}"
        if cmp_.shown_run in r.bank:
            axes[0].plot(r.t, r.bank[cmp_.shown_run] * _DEG, color=color, lw=1.2, label=r.candidate)
        s = r.summaries.get(key)
        if s is not None and s.worst_run in r.bank:
            axes[1].plot(
                r.t,
                r.bank[s.worst_run] * _DEG,
                color=color,
                lw=1.2,
                label=f"{r.candidate} (run {s.worst_run})",
            )
    axes[0].set_title(f"{cmp_.scenario.title}: run {cmp_.shown_run} (identical noise and losses)")
    axes[1].set_title(f"each controller's worst run by {METRIC_INFO[key].label}")
    for ax in axes:
        ax.set_ylabel("bank (deg)")
        ax.grid(alpha=0.3)
        ax.legend(loc="best", fontsize=8)
    axes[1].set_xlabel("time (s)")
    fig.tight_layout()
    fig.savefig(path, dpi=110)
    plt.close(fig)


def plot_metric_bars(cmp_, path: Path) -> None:
    """One panel per headline metric: mean per controller with its 95 % interval."""
    plt = pyplot()
    keys = list(cmp_.headline)
    fig, axes = plt.subplots(1, len(keys), figsize=(3.2 * len(keys), 3.8))
    axes = np.atleast_1d(axes)
    names = [r.candidate for r in cmp_.results]
    x = np.arange(len(names))
    for ax, k in zip(axes, keys, strict=True):
        info = METRIC_INFO[k]
        means, lo, hi = [], [], []
        for r in cmp_.results:
            s = r.summaries.get(k)
            ok = s is not None and math.isfinite(s.mean)
            m = s.mean * info.scale if ok else np.nan
            means.append(m)
            fin = ok and math.isfinite(s.ci95_low) and math.isfinite(s.ci95_high)
            lo.append(m - s.ci95_low * info.scale if fin else 0.0)
            hi.append(s.ci95_high * info.scale - m if fin else 0.0)
        ax.bar(x, means, color=[f"C{i}" for i in range(len(names))], yerr=[lo, hi], capsize=4)
        for xi, m in zip(x, means, strict=True):
            if not np.isfinite(m):  # means are over runs that did not diverge: some never got there
                ax.text(xi, 0, "∞ (some runs never)", rotation=90, ha="center", va="bottom", fontsize=8)
        ax.set_xlim(-0.6, len(names) - 0.4)  # every slot shown, with or without a bar
        ax.set_xticks(x, names, rotation=30, ha="right", fontsize=8)
        ax.set_title(f"{info.label}" + (f" ({info.unit})" if info.unit else ""), fontsize=9)
        ax.grid(alpha=0.3, axis="y")
    fig.suptitle(f"{cmp_.scenario.title}: means with 95 % intervals", fontsize=10)
    fig.tight_layout()
    fig.savefig(path, dpi=110)
    plt.close(fig)


def plot_loops(loops: list[tuple[str, np.ndarray]], omega: np.ndarray, path: Path) -> bool:
    """Bode (gain, phase) and Nichols overlay of loop responses ``(label, L(jω))``; False if none."""
    if not loops:
        return False
    plt = pyplot()
    keep = omega <= 40.0  # beyond ~40 rad/s the delays' phase hides the crossovers
    w = omega[keep]
    fig = plt.figure(figsize=(11, 6))
    ax_g = fig.add_subplot(2, 2, 1)
    ax_p = fig.add_subplot(2, 2, 3, sharex=ax_g)
    ax_n = fig.add_subplot(1, 2, 2)
    for i, (label, big_l) in enumerate(loops):
        big_l = np.asarray(big_l)[keep]
        gain_db = 20 * np.log10(np.abs(big_l))
        phase = np.degrees(np.unwrap(np.angle(big_l)))
        phase -= 360.0 * np.round((phase[0] + 90.0) / 360.0)  # start near −90° (integrating loop)
        ax_g.semilogx(w, gain_db, color=f"C{i}", label=label)
        ax_p.semilogx(w, phase, color=f"C{i}")
        ax_n.plot(phase, gain_db, color=f"C{i}", label=label)
    ax_g.axhline(0, color="grey", lw=0.8)
    ax_p.axhline(-180, color="grey", lw=0.8)
    ax_n.plot([-180], [0], "k+", ms=12)
    ax_g.set_ylabel("|L| (dB)")
    ax_p.set_ylabel("phase L (deg)")
    ax_p.set_xlabel("frequency (rad/s)")
    ax_n.set_xlabel("phase L (deg)")
    ax_n.set_ylabel("|L| (dB)")
    ax_n.set_title("Nichols (critical point +)")
    ax_g.set_title("Bode, loop broken at the aileron command")
    ax_n.set_ylim(-40, 40)
    ax_n.set_xlim(-540, 0)
    ax_p.set_ylim(-540, 0)
    for ax in (ax_g, ax_p, ax_n):
        ax.grid(alpha=0.3)
    ax_g.legend(fontsize=8)
    fig.tight_layout()
    fig.savefig(path, dpi=110)
    plt.close(fig)
    return True
