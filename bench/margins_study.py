"""Delay margin of each bundled scenario's PID against camera frame rate (README study).

For every bundled scenario with a PID controller, the camera frame rate is
swept from 5 to 60 Hz (latency, controller and airframe unchanged). The
analytic delay margin (exact-delay frequency response, :mod:`sim.analysis`)
is computed at every rate, the empirical one (simulation, noise off) at a few.
Writes ``docs/delay_margin_vs_frame_rate.png``, prints a table, and times a
full ``rollrig margins`` report of one scenario.

Run: ``PYTHONPATH=. python bench/margins_study.py``
"""

from __future__ import annotations

import math
import time
from dataclasses import replace
from pathlib import Path

import numpy as np
from rollrig.sim.analysis.empirical import EmpiricalSettings, empirical_margins
from rollrig.sim.analysis.linear_loop import margins
from rollrig.sim.analysis.loop_from_scenario import camera_delay, has_linear_model, loop_parts_from_scenario
from rollrig.sim.analysis.margins_report import (
    margins_report,
    margins_tables,
    near_tangent_crossovers,
    stale_readings,
)
from rollrig.sim.report.plots import pyplot
from rollrig.sim.scenario import load_scenario

ROOT = Path(__file__).resolve().parents[1]
RATES = np.array([5, 6, 7.5, 8, 10, 12.5, 15, 20, 25, 30, 40, 50, 60], dtype=float)
EMPIRICAL_RATES = (5.0, 10.0, 20.0, 30.0, 60.0)


def with_frame_rate(sc, hz: float):
    return replace(sc, camera=replace(sc.camera, frame_rate_hz=float(hz)))


def main() -> None:
    scenarios = [load_scenario(p) for p in sorted((ROOT / "scenarios").glob("*.toml"))]
    scenarios = [sc for sc in scenarios if has_linear_model(sc)]
    plt = pyplot()
    fig, ax = plt.subplots(figsize=(8, 4.8), layout="constrained")
    print(
        f"{'scenario':40s} {'fps':>5s} {'cam delay ms':>12s} {'DM analytic s':>14s} {'DM empirical s':>15s}"
    )
    for i, sc in enumerate(scenarios):
        name = Path(sc.path).stem
        dm = []
        for hz in RATES:
            s = with_frame_rate(sc, hz)
            parts = loop_parts_from_scenario(s)
            m = margins(parts)
            stale = stale_readings(s) is not None
            grazing = bool(near_tangent_crossovers(parts))
            # Not linear (PID holds stale readings): leave the analytic curve out there.
            dm.append(np.nan if stale else m.delay_margin_s)
            if grazing and not stale:
                ax.plot(hz, m.delay_margin_s, "x", color=f"C{i}", ms=8)
            emp = ""
            if hz in EMPIRICAL_RATES:
                w = min(m.gain_crossover_rad_s, m.phase_crossover_rad_s)
                e = empirical_margins(s, EmpiricalSettings(loss=False, oscillation_rad_s=w))
                ax.errorbar(
                    hz, e.delay.value, yerr=e.delay.tolerance, fmt="o", color=f"C{i}", ms=5, mfc="none"
                )
                emp = f"{e.delay.value:.3f} ± {e.delay.tolerance:.3f}"
            flag = " stale>limit" if stale else (" |L|~0dB" if grazing else "")
            print(
                f"{name:40s} {hz:5.1f} {camera_delay(s).total_s * 1e3:12.1f} "
                f"{m.delay_margin_s:14.3f} {emp:>15s}{flag}"
            )
        ax.plot(
            RATES, dm, "-", color=f"C{i}", label=f"{name} (latency {1e3 * float(sc.camera.latency_s):g} ms)"
        )
    ax.plot([], [], "o", color="0.3", mfc="none", label="empirical (simulation)")
    ax.plot([], [], "x", color="0.3", label="analytic, |L| grazes 0 dB (ill-conditioned)")
    ax.set_xscale("log")
    ax.set_xticks([5, 10, 20, 30, 60], labels=["5", "10", "20", "30", "60"])
    ax.set_xticks([], minor=True)
    ax.set_xlabel("camera frame rate (Hz)")
    ax.set_ylabel("delay margin (s)")
    ax.set_title(
        "Delay margin of the bundled PID loops vs camera frame rate\n"
        "lines: analytic (exact delays); circles: simulated, noise off"
    )
    ax.grid(True, which="both", alpha=0.3)
    ax.set_ylim(bottom=0.0)
    ax.legend(fontsize=8, loc="lower right")
    out = ROOT / "docs" / "delay_margin_vs_frame_rate.png"
    out.parent.mkdir(exist_ok=True)
    tmp = out.with_suffix(".tmp.png")
    fig.savefig(tmp, dpi=110)
    tmp.replace(out)
    print(f"wrote {out.relative_to(ROOT)}")

    sc = load_scenario(ROOT / "scenarios" / "light-single-wings-level.toml")
    t0 = time.perf_counter()
    rep = margins_report(sc)
    margins_tables(rep)
    wall = time.perf_counter() - t0
    cpu = time.process_time()
    print(
        f"full margins report, {Path(sc.path).stem}: {wall:.2f} s wall "
        f"({', '.join(f'{k} {v:.2f} s' for k, v in rep.timings_s.items())}); "
        f"process CPU so far {cpu:.1f} s"
    )
    assert math.isfinite(wall)


if __name__ == "__main__":
    main()
