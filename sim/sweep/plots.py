"""Pictures of a sweep (matplotlib, Agg): a heatmap with the boundary for two
swept keys, lines with interval bands for one.

The boundary is the 0.5 level of the pass fraction (``pass_all``; judge
``criteria``) or of the settled fraction (``settled``; judge ``stability``):
on one side at least half the runs pass (settle), on the other fewer do.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from .axes import Axis
from .table import boundary_column

__all__ = ["write_sweep_plots", "stat_columns", "boundary_lines"]


def boundary_lines(xs: np.ndarray, ys: np.ndarray, frac: np.ndarray, level: float = 0.5) -> list[np.ndarray]:
    """The boundary drawn on a heatmap: the ``level`` contour of a fraction on a grid.

    Parameters
    ----------
    xs, ys : (nx,), (ny,)
        Grid values of the two keys (increasing).
    frac : (ny, nx)
        Pass or settled fraction at each grid point (``nan`` where missing).
    level : float
        Contour level.

    Returns
    -------
    list of (n, 2) arrays
        Polylines ``(x, y)``; between two grid points the crossing is
        interpolated linearly (``contourpy``, the contouring matplotlib uses).
    """
    import contourpy

    z = np.ma.masked_invalid(np.asarray(frac, float))
    gen = contourpy.contour_generator(np.asarray(xs, float), np.asarray(ys, float), z)
    return [np.asarray(line) for line in gen.lines(level)]


def stat_columns(metric: str, cols: list[str]) -> tuple[str, str | None, str | None, tuple[str, str] | None]:
    """Centre column, interval columns and (optional) spread columns of a metric.

    ``metric`` is a column (``pass_all``, ``settled``) or a metric stem
    (``settling_time_s``, ``overshoot_pct``, ``rms_error_deg``).
    """
    if metric in cols and f"{metric}_low" in cols:
        return metric, f"{metric}_low", f"{metric}_high", None
    if f"{metric}_mean" in cols:
        spread = (f"{metric}_p5", f"{metric}_p95") if f"{metric}_p5" in cols else None
        return f"{metric}_mean", f"{metric}_ci95_low", f"{metric}_ci95_high", spread
    if metric in cols:
        return metric, None, None, None
    raise KeyError(metric)


def _varying(axes: list[Axis], rows: list[dict]) -> list[Axis]:
    return [a for a in axes if len({r[a.key] for r in rows}) > 1]


def _finite(x: np.ndarray) -> np.ndarray:
    """Infinite values (never settled, never reached) shown at the largest finite value."""
    x = np.asarray(x, float)
    fin = np.isfinite(x)
    if not fin.any():
        return np.zeros_like(x)
    return np.where(fin, x, np.where(x > 0, x[fin].max(), x[fin].min()))


def write_sweep_plots(
    folder: Path, rows: list[dict], cols: list[str], axes: list[Axis], judge: str, metric: str | None = None
) -> list[str]:
    """Write the sweep's PNGs into ``folder``; return their names (none for 3+ varying keys)."""
    from rollrig.sim.report.plots import pyplot

    var = _varying(axes, rows)
    bcol = boundary_column(judge)
    metric = metric or bcol
    centre, lo, hi, spread = stat_columns(metric, cols)
    rows = sorted(rows, key=lambda r: r["point"])
    plt = pyplot()
    written: list[str] = []
    if len(var) == 1:
        ax_def = var[0]
        order = np.argsort([r[ax_def.key] for r in rows], kind="stable")
        x = np.array([rows[i][ax_def.key] for i in order])
        get = lambda c: _finite(np.array([rows[i][c] for i in order], float))  # noqa: E731
        fig, ax = plt.subplots(figsize=(7.5, 4.2), layout="constrained")
        if spread is not None:
            ax.fill_between(
                x, get(spread[0]), get(spread[1]), alpha=0.15, color="tab:blue", label="5–95 % of runs"
            )
        if lo is not None:
            band = "Wilson 95 % interval" if centre == metric else "95 % interval of the mean"
            ax.fill_between(x, get(lo), get(hi), alpha=0.35, color="tab:blue", label=band)
        ax.plot(x, get(centre), "o-", color="tab:blue", ms=3, label=centre)
        if ax_def.kind == "log":
            ax.set_xscale("log")
        ax.set_xlabel(ax_def.key)
        ax.set_ylabel(metric)
        ax.set_title(f"{metric} along {ax_def.key}")
        ax.grid(alpha=0.3)
        ax.legend(loc="best", fontsize=8)
        name = f"line_{metric}.png"
        fig.savefig(Path(folder) / name, dpi=110)
        plt.close(fig)
        written.append(name)
    elif len(var) == 2:
        ax_x, ax_y = var
        x = np.array([r[ax_x.key] for r in rows])
        y = np.array([r[ax_y.key] for r in rows])
        z = _finite(np.array([r[centre] for r in rows], float))
        b = np.array([r[bcol] for r in rows], float)
        fig, ax = plt.subplots(figsize=(7.5, 5.6), layout="constrained")
        xs, ys = np.unique(x), np.unique(y)
        on_grid = xs.size * ys.size == len(rows)
        if on_grid:
            Z = np.full((ys.size, xs.size), np.nan)
            B = np.full_like(Z, np.nan)
            ix, iy = np.searchsorted(xs, x), np.searchsorted(ys, y)
            Z[iy, ix], B[iy, ix] = z, b
            mesh = ax.pcolormesh(xs, ys, Z, shading="nearest", cmap="viridis")
            for k, line in enumerate(boundary_lines(xs, ys, B)):
                ax.plot(line[:, 0], line[:, 1], color="white", lw=2.0, label=None if k else f"{bcol} = 0.5")
        else:
            mesh = ax.tricontourf(x, y, z, levels=12, cmap="viridis")
            ax.plot(x, y, "k.", ms=2)
            if b.min() < 0.5 < b.max():
                ax.tricontour(x, y, b, levels=[0.5], colors="white", linewidths=2.0)
        fig.colorbar(mesh, ax=ax, label=centre)
        if ax_x.kind == "log":
            ax.set_xscale("log")
        if ax_y.kind == "log":
            ax.set_yscale("log")
        ax.set_xlabel(ax_x.key)
        ax.set_ylabel(ax_y.key)
        ax.set_title(f"{centre}; white line: {bcol} = 0.5")
        name = f"heatmap_{metric}.png"
        fig.savefig(Path(folder) / name, dpi=110)
        plt.close(fig)
        written.append(name)
    return written
