"""The figures of a ``rollrig run`` folder: worst run's bank and aileron, envelope, histograms."""

from __future__ import annotations

from pathlib import Path

from rollrig.sim.runner import RunOutcome

from .run_files import worst_run

__all__ = ["write_run_plots", "HEADLINE_METRICS"]

#: metrics drawn as histograms for Monte Carlo sets
HEADLINE_METRICS = [
    "settling_time_s",
    "overshoot_pct",
    "rms_error_rad",
    "peak_abs_bank_rad",
    "aileron_rms_rad",
    "time_outside_band_s",
]


def write_run_plots(folder: Path, outcome: RunOutcome) -> list[str]:
    """Write the PNG figures of a judged batch into ``folder``; return their names.

    Figures with nothing to show are not written: no envelope and no
    histograms when every run diverged.
    """
    from rollrig.sim.metrics import METRIC_INFO

    from .plots import plot_aileron, plot_bank, plot_envelope, plot_histograms

    sc, tr = outcome.scenario, outcome.trace
    worst, why = worst_run(outcome)
    which = "" if tr.batch == 1 else f" ({why} of {tr.batch})"
    run_no = int(tr.run_index[worst])
    plot_bank(
        tr,
        folder / "bank.png",
        run=worst,
        bank_limit_rad=sc.criteria.bank_limit_rad,
        title=f"{sc.title}: bank angle, run {run_no}{which}",
    )
    plot_aileron(
        tr,
        folder / "aileron.png",
        run=worst,
        limit_rad=sc.actuator.limit_rad,
        title=f"{sc.title}: aileron, run {run_no}{which}",
    )
    written = ["bank.png", "aileron.png"]
    if tr.batch > 1 and not tr.diverged.all():
        plot_envelope(
            tr,
            folder / "envelope.png",
            bank_limit_rad=sc.criteria.bank_limit_rad,
            title=f"{sc.title}: bank envelope, {tr.batch} runs",
        )
        if plot_histograms(
            outcome.metrics,
            METRIC_INFO,
            folder / "histograms.png",
            diverged=tr.diverged,
            keys=HEADLINE_METRICS,
            title=f"{sc.title}: {tr.batch} runs",
        ):
            written.append("histograms.png")
        written.append("envelope.png")
    return written
