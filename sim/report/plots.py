"""PNG plots of a batch (matplotlib, Agg backend, imported only when plotting)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
from rollrig.sim.trace import Trace

__all__ = ["plot_bank", "plot_aileron", "plot_envelope", "plot_histograms", "pyplot", "LABEL_STYLE"]

#: how every figure labels an axis: quantity, then the unit in parentheses
LABEL_STYLE = "{quantity} ({unit})"

_DEG = 180.0 / np.pi


def pyplot():
    """matplotlib.pyplot on the Agg backend (no display needed)."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    return plt


def _limit_lines(ax, limit_rad: float, label: str, data_deg: np.ndarray | None = None) -> None:
    """Dotted red lines at ±limit (drawn in degrees), labelled once.

    With ``data_deg`` given, the lines are drawn only when the data come
    within half the limit; otherwise the axis stays fitted to the data and
    the legend says where the limit is.
    """
    if data_deg is not None:
        finite = np.abs(data_deg[np.isfinite(data_deg)])
        if finite.size and finite.max() < 0.5 * limit_rad * _DEG:
            ax.plot(
                [], [], color="tab:red", lw=0.8, ls=":", label=f"{label} ±{limit_rad * _DEG:g}° (off scale)"
            )
            return
    for sign in (1, -1):
        ax.axhline(
            sign * limit_rad * _DEG, color="tab:red", lw=0.8, ls=":", label=label if sign == 1 else None
        )


def _finish_time_plot(plt, fig, ax, path: Path, ylabel: str, title: str) -> None:
    """Axis labels, grid and legend of a time-history plot; save it as PNG and close it."""
    ax.set_xlabel("time (s)")
    ax.set_ylabel(ylabel)
    ax.set_title(title)
    ax.grid(alpha=0.3)
    ax.legend(loc="best", fontsize=8)
    fig.savefig(path, dpi=110)
    plt.close(fig)


def _invalid_spans(
    t_ctrl: np.ndarray, valid: np.ndarray, age: np.ndarray | None = None
) -> list[tuple[float, float]]:
    """Time spans where the newest delivered frame was invalid."""
    bad = ~valid.astype(bool)
    if age is not None:  # before the first frame arrives there is nothing to lose
        bad &= np.isfinite(age)
    if not bad.any():
        return []
    edges = np.diff(np.concatenate([[0], bad.astype(int), [0]]))
    starts, ends = np.flatnonzero(edges == 1), np.flatnonzero(edges == -1)
    dt = t_ctrl[1] - t_ctrl[0] if t_ctrl.size > 1 else 0.0
    return [(t_ctrl[s], t_ctrl[e - 1] + dt) for s, e in zip(starts, ends, strict=True)]


def plot_bank(
    trace: Trace, path: Path, *, run: int = 0, bank_limit_rad: float | None = None, title: str = ""
) -> None:
    """True, measured and commanded bank of one run; invalid frames shaded."""
    plt = pyplot()
    fig, ax = plt.subplots(figsize=(10, 4.2), layout="constrained")
    for i, (a, b) in enumerate(_invalid_spans(trace.t_ctrl, trace.valid[run], trace.age[run])):
        ax.axvspan(a, b, color="0.85", lw=0, label="invalid or lost frame" if i == 0 else None)
    reading = np.where(np.isfinite(trace.age[run]), trace.bank_meas[run] * _DEG, np.nan)
    ax.step(trace.t_ctrl, reading, where="post", color="tab:orange", lw=1.0, label="camera reading used")
    ax.plot(trace.t, trace.bank[run] * _DEG, color="tab:blue", lw=1.6, label="true bank")
    ax.plot(trace.t, trace.bank_cmd[run] * _DEG, color="k", lw=1.0, ls="--", label="command")
    if bank_limit_rad is not None:
        _limit_lines(ax, bank_limit_rad, "bank limit", trace.bank[run] * _DEG)
    if np.isfinite(trace.diverged_at[run]):
        ax.axvline(trace.diverged_at[run], color="tab:red", lw=1.5, label="diverged")
    _finish_time_plot(
        plt,
        fig,
        ax,
        path,
        "bank angle (deg, right wing down +)",
        title or f"bank angle, run {int(trace.run_index[run])}",
    )


def plot_aileron(trace: Trace, path: Path, *, run: int = 0, limit_rad: float, title: str = "") -> None:
    """Aileron position and command of one run, with the position limits."""
    plt = pyplot()
    fig, ax = plt.subplots(figsize=(10, 3.4), layout="constrained")
    ax.step(
        trace.t_ctrl, trace.aileron_cmd[run] * _DEG, where="post", color="tab:gray", lw=0.9, label="command"
    )
    ax.plot(trace.t, trace.aileron[run] * _DEG, color="tab:green", lw=1.4, label="position")
    _limit_lines(ax, limit_rad, "travel limit")
    _finish_time_plot(
        plt, fig, ax, path, "aileron (deg)", title or f"aileron, run {int(trace.run_index[run])}"
    )


def plot_envelope(trace: Trace, path: Path, *, bank_limit_rad: float | None = None, title: str = "") -> None:
    """Percentile bands of bank over time across the runs that did not diverge."""
    plt = pyplot()
    keep = ~trace.diverged
    fig, ax = plt.subplots(figsize=(10, 4.2), layout="constrained")
    p = None
    if keep.any():
        b = trace.bank[keep] * _DEG
        p = np.percentile(b, [0, 5, 25, 50, 75, 95, 100], axis=0)
        ax.fill_between(trace.t, p[0], p[6], color="tab:blue", alpha=0.12, lw=0, label="min–max")
        ax.fill_between(trace.t, p[1], p[5], color="tab:blue", alpha=0.25, lw=0, label="5–95 %")
        ax.fill_between(trace.t, p[2], p[4], color="tab:blue", alpha=0.45, lw=0, label="25–75 %")
        ax.plot(trace.t, p[3], color="tab:blue", lw=1.4, label="median")
    ax.plot(trace.t, trace.bank_cmd[0] * _DEG, color="k", ls="--", lw=1.0, label="command")
    if bank_limit_rad is not None:
        _limit_lines(ax, bank_limit_rad, "bank limit", None if p is None else np.concatenate([p[0], p[6]]))
    n_div = int((~keep).sum())
    default = f"bank envelope over {int(keep.sum())} runs" + (
        f" ({n_div} diverged, not shown)" if n_div else ""
    )
    _finish_time_plot(plt, fig, ax, path, "bank angle (deg)", title or default)


def plot_histograms(
    metrics: dict, info: dict, path: Path, *, diverged: np.ndarray, keys: list[str], title: str = ""
) -> bool:
    """Histograms of headline metrics across the runs that did not diverge.

    Runs with an infinite value (e.g. never settled) are counted in the panel
    title rather than drawn; a metric with no finite value among those runs
    (one that does not apply) gets no panel. Returns ``False`` (and writes
    nothing) when no panel is left.
    """
    keep = ~np.asarray(diverged, bool)
    keys = [k for k in keys if k in metrics and np.isfinite(np.asarray(metrics[k], float)[keep]).any()]
    if not keys:
        return False
    plt = pyplot()
    cols = min(3, max(1, len(keys)))
    rows = int(np.ceil(len(keys) / cols))
    fig, axes = plt.subplots(
        rows, cols, figsize=(4.2 * cols, 3.0 * rows), layout="constrained", squeeze=False
    )
    for ax, k in zip(axes.ravel(), keys, strict=False):
        v = np.asarray(metrics[k], float)[keep] * info[k].scale
        finite = v[np.isfinite(v)]
        n_inf = v.size - finite.size
        if finite.size:
            ax.hist(finite, bins=min(30, max(5, finite.size // 3)), color="tab:blue", alpha=0.8)
        unit = f" ({info[k].unit})" if info[k].unit else ""
        ax.set_xlabel(f"{info[k].label}{unit}")
        ax.set_ylabel("runs")
        ax.set_title(f"{info[k].label}" + (f" — {n_inf} runs ∞" if n_inf else ""), fontsize=9)
        ax.ticklabel_format(axis="x", useOffset=False)
        ax.grid(alpha=0.3)
    for ax in axes.ravel()[len(keys) :]:
        ax.set_visible(False)
    n_div = int((~keep).sum())
    fig.suptitle((title or "metric histograms") + (f" ({n_div} diverged runs left out)" if n_div else ""))
    fig.savefig(path, dpi=100)
    plt.close(fig)
    return True
