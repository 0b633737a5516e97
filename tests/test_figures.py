"""Every figure ``rollrig run --plot`` draws for every bundled scenario, looked at
as an engineer would (issue: plots): each panel with data has both axis
labels, and no legend covers a data point of its own panel."""

from __future__ import annotations

import numpy as np
import pytest
from helpers import BUNDLED, SCENARIO_DIR


def _problems(fig) -> list[str]:
    fig.canvas.draw()
    renderer = fig.canvas.get_renderer()
    out = []
    for ax in fig.axes:
        if not ax.has_data():
            continue
        name = ax.get_title() or fig.get_suptitle() or "panel"
        shared = ax.get_shared_x_axes().get_siblings(ax)  # stacked panels label the bottom one
        if not any(a.get_xlabel() for a in shared):
            out.append(f"{name}: no x label")
        if not ax.get_ylabel():
            out.append(f"{name}: no y label")
        legend = ax.get_legend()
        if legend is None:
            continue
        box = legend.get_window_extent(renderer)
        axbox = ax.get_window_extent(renderer)
        for line in ax.get_lines():
            x, y = np.asarray(line.get_xdata(), float), np.asarray(line.get_ydata(), float)
            if x.size < 3:
                continue  # reference lines (limits, targets)
            xy = ax.transData.transform(np.column_stack([x, y]))
            xy = xy[np.all(np.isfinite(xy), axis=1)]
            inside = (
                (xy[:, 0] >= axbox.x0)
                & (xy[:, 0] <= axbox.x1)
                & (xy[:, 1] >= axbox.y0)
                & (xy[:, 1] <= axbox.y1)
            )
            covered = (xy[:, 0] > box.x0) & (xy[:, 0] < box.x1) & (xy[:, 1] > box.y0) & (xy[:, 1] < box.y1)
            if np.any(covered & inside):
                out.append(
                    f"{name}: legend covers {int(np.sum(covered & inside))} points of {line.get_label()!r}"
                )
    return out


def _checked_figures(monkeypatch) -> dict[str, list[str]]:
    """Check every figure as it is saved; returns file name -> problems found."""
    from matplotlib.figure import Figure

    seen: dict[str, list[str]] = {}
    save = Figure.savefig

    def checked_save(self, fname, *args, **kwargs):
        seen[str(fname).rsplit("/", 1)[-1]] = _problems(self)
        return save(self, fname, *args, **kwargs)

    monkeypatch.setattr(Figure, "savefig", checked_save)
    return seen


@pytest.mark.parametrize("path", BUNDLED, ids=[p.stem for p in BUNDLED])
def test_run_figures_have_labels_and_clear_legends(path, cli, tmp_path, monkeypatch):
    seen = _checked_figures(monkeypatch)
    code, _, err = cli(["run", path, "--runs", "3", "--plot", "--out", tmp_path / "out", "--format", "csv"])
    assert code == 0, err
    assert {"bank.png", "aileron.png"} <= set(seen), sorted(seen)
    bad = {name: p for name, p in seen.items() if p}
    assert not bad, bad


def test_fit_and_turbulence_figures_have_labels_and_clear_legends(cli, tmp_path, monkeypatch):
    seen = _checked_figures(monkeypatch)
    log = SCENARIO_DIR / "logs" / "crop-duster-camera.csv"
    code, _, err = cli(["fit-sensor", log, "--out", tmp_path / "fit", "--format", "csv"])
    assert code == 0, err
    scenario = SCENARIO_DIR / "uav-ridge-turbulence.toml"
    code, _, err = cli(
        ["turbulence", scenario, "--duration-s", "200", "--records", "4", "--out", tmp_path / "t"]
    )
    assert code == 0, err
    assert len(seen) >= 2, sorted(seen)
    bad = {name: p for name, p in seen.items() if p}
    assert not bad, bad


def test_the_check_itself_finds_missing_labels_and_covered_data():
    from rollrig.sim.report.plots import pyplot

    plt = pyplot()
    fig, ax = plt.subplots()
    t = np.linspace(0.0, 1.0, 50)
    ax.plot(t, 0.5 + 0.0 * t, label="flat line through the middle")
    ax.legend(loc="center")
    try:
        found = _problems(fig)
    finally:
        plt.close(fig)
    assert any("no x label" in p for p in found) and any("no y label" in p for p in found)
    assert any("legend covers" in p for p in found)
