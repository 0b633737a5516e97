"""The ``rank-faults`` table: what each camera fault costs, with paired intervals."""

from __future__ import annotations

from rollrig.sim.metrics import METRIC_INFO

from . import CAUTION
from .table import Table, fmt_number

__all__ = ["ranking_table"]


def ranking_table(r):
    """The ``rank-faults`` table (one row per fault, most harmful first) with JSON records."""
    info = METRIC_INFO[r.metric]
    unit = f" ({info.unit})" if info.unit else ""
    f = lambda v: fmt_number(v * info.scale)  # noqa: E731
    t = Table(
        title=f"{r.scenario.title}: what each sensor fault costs in {info.label}{unit}, {r.runs} runs",
        columns=["rank", "fault", "setting", "cost [95 % CI]", "without it", "it alone"],
    )
    t.records = []
    for i, e in enumerate(r.effects, 1):
        c = e.cost
        t.add(
            i,
            e.fault.name,
            e.fault.setting,
            f"{f(c.mean)} [{f(c.ci95_low)}, {f(c.ci95_high)}]",
            f(e.without.mean),
            f(e.alone.mean),
        )
        t.records.append(
            {
                "rank": i,
                "fault": e.fault.name,
                "setting": e.fault.setting,
                "cost_mean_si": c.mean,
                "cost_ci95_si": [c.ci95_low, c.ci95_high],
                "without_mean_si": e.without.mean,
                "alone_mean_si": e.alone.mean,
                "pairs_left_out": c.n_diverged,
            }
        )
    t.notes.append(
        f"every fault: {f(r.every.mean)}{unit}; no sensor fault: {f(r.ideal.mean)}{unit} "
        "(means over the runs that did not diverge)."
    )
    t.notes.append(
        "cost = per-run (every fault − this one removed), mean with a paired Student-t interval; "
        "same seed for every variant, so other faults' draws and turbulence are identical."
    )
    left = sum(e.cost.n_diverged for e in r.effects)
    if left:
        t.notes.append(f"{left} run pairs left out where a run diverged or the metric was infinite.")
    t.notes.append(CAUTION)
    return t
