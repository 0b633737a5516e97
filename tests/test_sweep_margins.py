"""A latency × frame-loss sweep judged for stability draws the boundary that
``rollrig margins`` finds by its own search (empirical margins)."""

from __future__ import annotations

import numpy as np
import pytest
from helpers import SCENARIO_DIR
from rollrig.sim.analysis.empirical import EmpiricalSettings, empirical_margins
from rollrig.sim.cli.main import main
from rollrig.sim.sweep.keys import scenario_with
from rollrig.sim.sweep.plan import load_doc
from rollrig.sim.sweep.plots import boundary_lines
from rollrig.sim.sweep.table import read_csv

BUNDLED = SCENARIO_DIR / "light-single-wings-level.toml"
WINDOW_S = 6.0
LAT_STEP = 0.02
LOSS_STEP = 0.05


def _crossing(lines: list[np.ndarray], *, at_x: float | None = None, at_y: float | None = None) -> float:
    """Where the drawn boundary crosses the line x = at_x (returns y) or y = at_y (returns x)."""
    for line in lines:
        a, b = (line[:, 0], line[:, 1]) if at_x is not None else (line[:, 1], line[:, 0])
        c = at_x if at_x is not None else at_y
        for i in range(len(a) - 1):
            if min(a[i], a[i + 1]) - 1e-12 <= c <= max(a[i], a[i + 1]) + 1e-12:
                t = 0.0 if a[i + 1] == a[i] else (c - a[i]) / (a[i + 1] - a[i])
                return float(b[i] + t * (b[i + 1] - b[i]))
    raise AssertionError("the boundary does not cross the cut")


def test_heatmap_boundary_agrees_with_empirical_margins(tmp_path):
    """The scenario's PID lets go of a reading older than stale_after_s = 0.25 s,
    which is less than its latency plus delay margin: beyond it the loop is open,
    not delayed. The sweep and the margins therefore both use stale_after_s = 5 s
    (a fixed --set), so that the camera latency only delays the loop.

    Tolerances: the delay margin is an extra delay of the aileron command on a
    5 ms grid, the latency delays the reading, which the controller uses at its
    next 50 Hz tick: the latency boundary lies within one controller period
    (0.02 s) plus half the latency grid step of nominal latency + delay margin.
    The loss boundary lies within half the loss grid step plus the margin's own
    bracket (0.01) of the loss-rate margin; both use seed 0 and run index 0, so
    the frames lost are the same draws.
    """
    doc, _ = load_doc(BUNDLED)
    sc = scenario_with(doc, {"controller.stale_after_s": 5.0}, file=str(BUNDLED))
    m = empirical_margins(sc, EmpiricalSettings(window_s=WINDOW_S, seed=0))
    lat0 = float(sc.camera.latency_s)
    lats = np.round(lat0 + np.arange(0.0, 0.4 + 1e-9, LAT_STEP), 6)
    losses = np.round(np.arange(0.0, 0.95 + 1e-9, LOSS_STEP), 6)
    out = tmp_path / "map"
    argv = [
        "sweep", str(BUNDLED), "--judge", "stability", "--window-s", str(WINDOW_S),
        "--runs", "1", "--seed", "0",
        "--set", "controller.stale_after_s=5",
        "--set", "sensor.latency_s=" + ",".join(map(str, lats)),
        "--set", "sensor.dropout_prob=" + ",".join(map(str, losses)),
        "--out", str(out), "--workers", "1", "--quiet",
    ]  # fmt: skip
    assert main(argv) == 0
    assert (out / "heatmap_settled.png").stat().st_size > 10_000
    _, rows = read_csv(out / "sweep.csv")
    grid = np.full((losses.size, lats.size), np.nan)
    for r in rows:
        grid[
            np.searchsorted(losses, r["sensor.dropout_prob"]), np.searchsorted(lats, r["sensor.latency_s"])
        ] = r["settled"]
    assert not np.isnan(grid).any()
    lines = boundary_lines(lats, losses, grid)  # what the heatmap draws

    lat_boundary = _crossing(lines, at_y=0.0)
    expected = lat0 + m.delay.value
    assert lat_boundary == pytest.approx(expected, abs=0.02 + LAT_STEP / 2 + m.delay.tolerance)

    loss_boundary = _crossing(lines, at_x=lat0)
    assert m.loss is not None and m.loss.bounded
    assert loss_boundary == pytest.approx(m.loss.value, abs=LOSS_STEP / 2 + 0.01 + m.loss.tolerance)
