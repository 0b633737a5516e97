"""Tables for a judged batch: metrics (one run or Monte Carlo statistics) and criteria.

Display rows are in display units (degrees); records (JSON, CSV) are in SI
with the unit in the key or in a ``unit`` field, ``None`` for a value never
reached, and ``None`` statistics when every run diverged (see the README's
results schema).
"""

from __future__ import annotations

import numpy as np
from rollrig.sim.metrics import METRIC_INFO
from rollrig.sim.runner import CRITERIA_LABELS, RunOutcome, metric_spec

from . import CAUTION
from .metric_keys import file_key, si_unit
from .table import Table, fmt_number

__all__ = ["run_tables", "divergence_note", "STAT_FIELDS"]

_HIDDEN = {"diverged_at_s", "first_exceedance_s"}
_INF_TEXT = {
    "settling_time_s": "not settled",
    "rise_time_s": "not reached",
}
#: statistics of one metric, in the order of the JSON/CSV fields
STAT_FIELDS = ("mean", "ci95_low", "ci95_high", "std", "p5", "p50", "p95", "worst")


def _value(key: str, v: float) -> str:
    info = METRIC_INFO[key]
    if np.isinf(v):
        return _INF_TEXT.get(key, "∞")
    return fmt_number(v * info.scale)


def _label(key: str) -> str:
    info = METRIC_INFO[key]
    return f"{info.label} ({info.unit})" if info.unit else info.label


def divergence_note(run_index: np.ndarray, diverged_at: np.ndarray) -> str | None:
    """``"k of n runs diverged …"`` (or ``"all n runs diverged (first at t s)"``), or None."""
    div = np.isfinite(diverged_at)
    n = div.size
    if not div.any():
        return None
    if div.all():
        return f"all {n} runs diverged (first at {float(np.min(diverged_at)):.2f} s)"
    idx = run_index[div]
    shown = ", ".join(f"#{i} at {a:.2f} s" for i, a in zip(idx[:8], diverged_at[div][:8], strict=False))
    more = f" and {idx.size - 8} more" if idx.size > 8 else ""
    return f"{idx.size} of {n} runs diverged (left out of the statistics): {shown}{more}"


def _summary_record(k: str, s) -> dict:
    """JSON/CSV record of one metric's statistics (SI, ``None`` when not available)."""
    rec = {"metric": file_key(k), "unit": si_unit(k), "n": s.n, "n_diverged": s.n_diverged, "n_inf": s.n_inf}
    none = s.n == 0
    for f in STAT_FIELDS:
        rec[f] = None if none else getattr(s, f)
    rec["worst_run"] = None if none else s.worst_run
    return rec


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
            t.records.append({"metric": file_key(k), "value": v, "unit": si_unit(k)})
        if div[0]:
            t.add("diverged at (s)", fmt_number(tr.diverged_at[0]), style="bold red")
        t.records.append({"metric": "diverged_at_s", "value": float(tr.diverged_at[0]), "unit": "s"})
        ex = float(out.metrics["first_exceedance_s"][0])
        if np.isfinite(ex):
            t.add("first bank-limit exceedance (s)", fmt_number(ex), style="red")
        t.records.append({"metric": "first_exceedance_s", "value": ex, "unit": "s"})
    else:
        t = Table(
            title=f"{sc.title} — {n} runs, seed {tr.seed}",
            columns=["metric", "mean [95 % CI]", "std", "p5", "p50", "p95", "worst (run)"],
        )
        t.records = []
        all_div = bool(div.all())
        for k, s in out.summaries().items():
            if k in _HIDDEN:
                continue
            t.records.append(_summary_record(k, s))
            if all_div:
                continue
            info = METRIC_INFO[k]
            f = lambda v, k=k: _value(k, v)  # noqa: E731
            t.add(
                _label(k),
                f"{f(s.mean)} [{f(s.ci95_low)}, {f(s.ci95_high)}]",
                fmt_number(s.std * info.scale),
                f(s.p5),
                f(s.p50),
                f(s.p95),
                f"{f(s.worst)} (#{s.worst_run})",
            )
        note = divergence_note(tr.run_index, tr.diverged_at)
        if all_div:
            t.add(note, "", "", "", "", "", "", style="bold red")
        elif note:
            t.notes.append(note)
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
