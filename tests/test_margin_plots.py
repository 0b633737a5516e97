"""The margins figure, looked at as an engineer would (issue 9, "Plots"): every panel has
both axis labels, and no legend covers a drawn data point of its own panel."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from rollrig.sim.analysis.frequency_response_file import load_frequency_response
from rollrig.sim.analysis.linear_loop import margins
from rollrig.sim.analysis.loop_from_scenario import has_linear_model, loop_parts_from_scenario
from rollrig.sim.report.margin_plots import margin_figure
from rollrig.sim.report.plots import pyplot
from rollrig.sim.scenario import load_scenario

ROOT = Path(__file__).resolve().parents[1] / "scenarios"
LOOPS = {p.stem: p for p in sorted(ROOT.glob("*.toml"))}
LOOPS["ridge-runner-open-loop.csv"] = ROOT / "frequency-response" / "ridge-runner-open-loop.csv"


def _loop(path: Path):
    if path.suffix == ".csv":
        return load_frequency_response(path)
    sc = load_scenario(path)
    if not has_linear_model(sc):
        pytest.skip("no linear model")
    return loop_parts_from_scenario(sc)


@pytest.mark.parametrize("name", list(LOOPS))
def test_labels_present_and_legends_clear_of_data(name: str) -> None:
    loop = _loop(LOOPS[name])
    fig = margin_figure(loop, result=margins(loop))
    try:
        fig.canvas.draw()
        renderer = fig.canvas.get_renderer()
        for ax in fig.axes:
            assert ax.get_xlabel() and ax.get_ylabel(), ax.get_title()
            legend = ax.get_legend()
            assert legend is not None, ax.get_title()
            box = legend.get_window_extent(renderer)
            axbox = ax.get_window_extent(renderer)
            for line in ax.get_lines():
                if line.get_label().startswith("_") and len(line.get_xdata()) < 3:
                    continue  # reference markers and grid-like lines
                xy = ax.transData.transform(np.column_stack([line.get_xdata(), line.get_ydata()]))
                xy = xy[np.all(np.isfinite(xy), axis=1)]
                inside_axes = (
                    (xy[:, 0] >= axbox.x0)
                    & (xy[:, 0] <= axbox.x1)
                    & (xy[:, 1] >= axbox.y0)
                    & (xy[:, 1] <= axbox.y1)
                )
                covered = (
                    (xy[:, 0] > box.x0) & (xy[:, 0] < box.x1) & (xy[:, 1] > box.y0) & (xy[:, 1] < box.y1)
                )
                assert not np.any(covered & inside_axes), (ax.get_title(), line.get_label())
    finally:
        pyplot().close(fig)
