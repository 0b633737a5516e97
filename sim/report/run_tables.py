"""Tables for a judged batch: metrics (one run or Monte Carlo statistics) and criteria."""

from __future__ import annotations

import numpy as np
from rollrig.sim.metrics import METRIC_INFO
from rollrig.sim.runner import CRITERIA_LABELS, RunOutcome, metric_spec

from . import CAUTION
from .table import Table, fmt_number

__all__ = ["run_tables"]

_HIDDEN = {"diverged_at_s", "first_exceedance_s"}
_INF_TEXT = {
    "settling_time_s": "not settled",
    "rise_time_s": "not reached",
}


def _value(key: str, v: float) -> str:
    info = METRIC_INFO[key]
    if np.isinf(v):
        return _INF_TEXT.get(key, "∞")
    return fmt_number(v * info.scale)


def _label(key: str) -> str:
    info = METRIC_INFO[key]
    return f"{info.label} ({info.unit})" if info.unit else info.label


def run_tables(out: RunOutcome) -> list[Table]:
    """Metric and criteria tables for the CLI and the report files."""
    tr = out.trace
    sc = out.scenario
    n = tr.batch
    tables = []
    keys = [
        k for k in out.metrics if METRIC_INFO.get(k) and METRIC_INFO[k].kind == "value" and k not in _HIDDEN
    ]
    div = tr.diverged
    if n == 1:
        t = Table(
            title=f"{sc.title} — run {int(tr.run_index[0])}, seed {tr.seed}", columns=["metric", "value"]
        )
        t.records = []
        for k in keys:
            v = float(out.metrics[k][0])
            t.add(_label(k), _value(k, v))
            t.records.append({"metric": k, "value": v, "unit": "SI"})
        if div[0]:
            t.add("diverged at (s)", fmt_number(tr.diverged_at[0]), style="bold red")
            t.records.append({"metric": "diverged_at_s", "value": float(tr.diverged_at[0])})
        ex = float(out.metrics["first_exceedance_s"][0])
        if np.isfinite(ex):
            t.add("first bank-limit exceedance (s)", fmt_number(ex), style="red")
    else:
        t = Table(
            title=f"{sc.title} — {n} runs, seed {tr.seed}",
            columns=["metric", "mean [95 % CI]", "std", "p5", "p50", "p95", "worst (run)"],
        )
        t.records = []
        for k, s in out.summaries().items():
            if k in _HIDDEN:
                continue
            info = METRIC_INFO[k]
            f = lambda v, k=k: _value(k, v)  # noqa: E731
            ci = f"{f(s.mean)} [{f(s.ci95_low)}, {f(s.ci95_high)}]"
            t.add(
                _label(k),
                ci,
                fmt_number(s.std * info.scale),
                f(s.p5),
                f(s.p50),
                f(s.p95),
                f"{f(s.worst)} (#{s.worst_run})",
            )
            t.records.append({"metric": k, **{f: getattr(s, f) for f in s.__dataclass_fields__}})
        if div.any():
            idx = tr.run_index[div]
            shown = ", ".join(
                f"#{i} at {a:.2f} s" for i, a in zip(idx[:8], tr.diverged_at[div][:8], strict=False)
            )
            more = f" and {idx.size - 8} more" if idx.size > 8 else ""
            t.notes.append(f"{idx.size} of {n} runs diverged (left out of the statistics): {shown}{more}")
    steps = [seg for seg in metric_spec(sc).steps if abs(seg.size_rad) > 1e-12]
    if len(steps) > 1:
        t.notes.append(
            f"Step metrics (rise, settling, overshoot, steady-state error, peak, ITAE) are the worst "
            f"over the {len(steps)} commanded steps; tracking metrics cover the whole run."
        )
    tables.append(t)

    c = Table(title="criteria", columns=["criterion", "limit", "passed", "95 % interval"])
    c.records = []
    crit = sc.criteria
    limits = {
        "bank_limit": f"|bank| ≤ {np.degrees(crit.bank_limit_rad):g}°",
        "settling": f"≤ {crit.max_settling_s:g} s" if crit.max_settling_s is not None else "",
        "overshoot": f"≤ {crit.max_overshoot_pct:g} %" if crit.max_overshoot_pct is not None else "",
        "rms_error": f"≤ {np.degrees(crit.max_rms_error_rad):g}°" if crit.max_rms_error_rad else "",
        "steady_error": f"≤ {np.degrees(crit.max_steady_error_rad):g}°" if crit.max_steady_error_rad else "",
    }
    for name, ps in out.pass_summaries().items():
        label = CRITERIA_LABELS.get(name, "all criteria")
        ok = ps.n_pass == ps.n
        frac = f"{ps.n_pass}/{ps.n}" if n > 1 else ("yes" if ok else "NO")
        interval = f"{100 * ps.low:.1f}–{100 * ps.high:.1f} %" if n > 1 else ""
        c.add(label, limits.get(name, ""), frac, interval, style=None if ok else "red")
        c.records.append(
            {
                "criterion": name,
                "n": ps.n,
                "n_pass": ps.n_pass,
                "fraction": ps.fraction,
                "wilson_low": ps.low,
                "wilson_high": ps.high,
            }
        )
    c.notes.append(CAUTION)
    tables.append(c)
    return tables
