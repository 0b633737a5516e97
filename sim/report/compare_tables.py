"""Tables and tidy files of a controller comparison (``rollrig compare``)."""

from __future__ import annotations

import csv
import io
import math

from rollrig.sim.metrics import METRIC_INFO
from rollrig.sim.runner import CRITERIA_LABELS

from . import CAUTION
from .table import Table, fmt_number

__all__ = ["comparison_table", "difference_table", "tidy_rows", "tidy_csv", "BEST", "FAILED"]

BEST = "★"
FAILED = "✗"


def _unit(key: str) -> str:
    u = METRIC_INFO[key].unit
    return f" ({u})" if u else ""


def _interval(mean: float, lo: float, hi: float, scale: float) -> str:
    m = fmt_number(mean * scale)
    if not (math.isfinite(lo) and math.isfinite(hi)) or lo == hi:
        return m
    return f"{m} [{fmt_number(lo * scale)}, {fmt_number(hi * scale)}]"


def _pct(p) -> str:
    return f"{100 * p.fraction:.0f} % [{100 * p.low:.0f}, {100 * p.high:.0f}]"


def comparison_table(
    cmp_, scores: dict[str, float] | None = None, rank_label: str = "", part: str = "metrics"
) -> Table:
    """Rows controllers; ``part="metrics"``: headline metrics (mean, 95 % CI); ``part="checks"``:
    divergence, pass rate per criterion (Wilson interval) and margins. Same row order in both."""
    sc = cmp_.scenario
    runs = len(cmp_.results[0].run_index)
    order = [r.candidate for r in cmp_.results]
    if scores is not None:
        order = sorted(order, key=lambda n: (scores[n], order.index(n)))
    crit = [k for k in cmp_.results[0].passes if k != "all"]
    has_analytic = any(r.analytic is not None for r in cmp_.results)
    has_emp = any(r.empirical is not None for r in cmp_.results)
    cols = ["controller", "kind"]
    if scores is not None:
        cols = ["rank", *cols, f"score ({rank_label})"]
    metrics = part == "metrics"
    if metrics:
        cols += [f"{METRIC_INFO[k].label}{_unit(k)}" for k in cmp_.headline]
    else:
        cols = cols[:-1] if scores is not None else cols
        cols += ["diverged"] + [f"pass: {CRITERIA_LABELS.get(k, k)}" for k in crit] + ["pass: all"]
        if has_analytic:
            cols += ["analytic GM (dB)", "analytic PM (°)", "analytic delay margin (s)"]
        if has_emp:
            cols += ["exp. gain margin (×)", "exp. delay margin (s)"]
    title = (
        f"{sc.title}: {len(order)} controllers, {runs} runs each, seed {sc.run.seed} "
        "(same noise, gusts and lost frames for every controller)"
        if metrics
        else f"{sc.title}: pass rates and margins"
    )
    t = Table(title=title, columns=cols)
    # best mean per metric column (only among controllers without divergence)
    best = {}
    for k in cmp_.headline:
        vals = {
            r.candidate: r.summaries[k].mean
            for r in cmp_.results
            if k in r.summaries and r.summaries[k].n_diverged == 0 and math.isfinite(r.summaries[k].mean)
        }
        if vals:
            pick = min if METRIC_INFO[k].larger_is_worse else max
            best[k] = pick(vals.values())
    t.records = []
    for i, name in enumerate(order, 1):
        r = cmp_.result(name)
        cells: list[str] = [name, r.kind]
        rec: dict = {"scenario": sc.title, "controller": name, "kind": r.kind}
        if scores is not None:
            cells = [str(i), *cells] + ([fmt_number(scores[name])] if metrics else [])
            rec.update(rank=i, score=scores[name])
        for k in cmp_.headline if metrics else ():
            s = r.summaries.get(k)
            if s is None:
                cells.append("—")
                continue
            text = _interval(s.mean, s.ci95_low, s.ci95_high, METRIC_INFO[k].scale)
            if s.n_inf:
                text += f" ({s.n_inf} never)"
            if k in best and s.n_diverged == 0 and s.mean == best[k]:
                text += f" {BEST}"
            cells.append(text)
            rec[k] = {"mean_si": s.mean, "ci95_si": [s.ci95_low, s.ci95_high], "n": s.n, "n_inf": s.n_inf}
        n_div = int(r.diverged.sum())
        if metrics:
            t.add(*cells, style="red" if n_div else None)
            t.records.append(rec)
            continue
        first = float(r.diverged_at[r.diverged].min()) if n_div else math.inf
        cells.append(f"{n_div} (first at {first:.1f} s) {FAILED}" if n_div else "0")
        rec["diverged"] = n_div
        for k in [*crit, "all"]:
            p = r.passes[k]
            cells.append(_pct(p) + ("" if p.n_pass == p.n else f" {FAILED}"))
            rec[f"pass_{k}"] = {"fraction": p.fraction, "wilson95": [p.low, p.high], "n": p.n}
        if has_analytic:
            m = r.analytic
            if m is None:
                cells += ["—", "—", "—"]
            elif getattr(m, "closed_loop_stable", None) is False:
                cells += [f"unstable {FAILED}", "—", "—"]
                rec["analytic"] = {"closed_loop_stable": False}
            else:
                cells += [
                    fmt_number(m.gain_margin_db),
                    fmt_number(m.phase_margin_deg),
                    fmt_number(m.delay_margin_s),
                ]
                rec["analytic"] = {
                    "gain_margin_db": m.gain_margin_db,
                    "phase_margin_deg": m.phase_margin_deg,
                    "delay_margin_s": m.delay_margin_s,
                    "closed_loop_stable": getattr(m, "closed_loop_stable", None),
                    **getattr(m, "extra", {}),
                }
        if has_emp:
            e = r.empirical
            if e is None:
                cells += ["—", "—"]
            elif not e.nominal_settles:
                cells += [f"does not settle {FAILED}", "—"]
            else:
                cells += [
                    f"{fmt_number(e.gain.value)} ± {fmt_number(e.gain.tolerance)}",
                    f"{fmt_number(e.delay.value)} ± {fmt_number(e.delay.tolerance)}",
                ]
                rec["empirical"] = {"gain": e.gain.value, "delay_s": e.delay.value, "settles": True}
        t.add(*cells, style="red" if n_div else None)
        t.records.append(rec)
    if metrics:
        t.notes.append(
            f"means with 95 % Student-t intervals over runs that did not diverge; {BEST} best mean in its "
            "column (among controllers without divergence)."
        )
        return t
    t.notes.append(f"pass rates with Wilson 95 % intervals (diverged runs fail); {FAILED} some runs fail.")
    if has_analytic:
        notes = {r.analytic_note for r in cmp_.results if r.analytic is None and r.analytic_note}
        t.notes.append(
            "analytic margins: linear loop broken at the aileron command with exact delays (PID, cascade, "
            "LQG with its stationary Kalman gain, Smith predictor; limits assumed not to bind; frame "
            "sampling as a mean delay); 'unstable': the linear closed loop is unstable"
            + (f"; {'; '.join(sorted(notes))} for the others." if notes else ".")
        )
    if has_emp:
        t.notes.append(
            "experimental margins: largest gain factor / extra delay at the aileron command at which the "
            "noise-free loop still settles (rollrig margins' experiment), ± half the final bracket."
        )
    t.notes.append(CAUTION)
    return t


def difference_table(cmp_) -> Table:
    """Paired differences (controller − baseline) per headline metric, with paired 95 % intervals."""
    cols = ["controller"] + [f"Δ {METRIC_INFO[k].label}{_unit(k)}" for k in cmp_.headline]
    t = Table(
        title=f"{cmp_.scenario.title}: difference from {cmp_.baseline} (same runs, paired)",
        columns=cols,
    )
    t.records = []
    for name, diffs in cmp_.diffs.items():
        cells = [name]
        rec = {"scenario": cmp_.scenario.title, "controller": name, "baseline": cmp_.baseline}
        for k in cmp_.headline:
            d = diffs.get(k)
            if d is None:
                cells.append("—")
                continue
            text = _interval(d.mean, d.ci95_low, d.ci95_high, METRIC_INFO[k].scale)
            better_low = METRIC_INFO[k].larger_is_worse
            if d.n >= 2 and (d.ci95_high < 0 if better_low else d.ci95_low > 0):
                text += " better"
            elif d.n >= 2 and (d.ci95_low > 0 if better_low else d.ci95_high < 0):
                text += " worse"
            if d.n_diverged:
                text += f" ({d.n_diverged} pairs out)"
            cells.append(text)
            rec[k] = {"mean_si": d.mean, "ci95_si": [d.ci95_low, d.ci95_high], "pairs": d.n}
        t.add(*cells)
        t.records.append(rec)
    t.notes.append(
        "Δ = controller − baseline per run, mean with a paired Student-t 95 % interval; 'better'/'worse' "
        "when the interval excludes zero. Pairs where either run diverged or a value is infinite "
        "are left out."
    )
    return t


def tidy_rows(comparisons) -> list[dict]:
    """One value per row: scenario, controller, quantity, statistic, value (SI)."""
    rows = []
    for c in comparisons:
        for r in c.results:
            base = {"scenario": c.scenario.title, "controller": r.candidate}
            for k in c.headline:
                s = r.summaries.get(k)
                if s is None:
                    continue
                for stat in ("mean", "ci95_low", "ci95_high", "std", "p50", "p95", "worst"):
                    rows.append({**base, "quantity": k, "statistic": stat, "value": getattr(s, stat)})
                rows.append({**base, "quantity": k, "statistic": "n", "value": s.n})
            for k, p in r.passes.items():
                for stat in ("fraction", "low", "high"):
                    rows.append(
                        {**base, "quantity": f"pass_{k}", "statistic": stat, "value": getattr(p, stat)}
                    )
            rows.append(
                {**base, "quantity": "diverged", "statistic": "count", "value": int(r.diverged.sum())}
            )
            d = c.diffs.get(r.candidate, {})
            for k, s in d.items():
                for stat in ("mean", "ci95_low", "ci95_high"):
                    rows.append(
                        {
                            **base,
                            "quantity": f"diff_{k}_vs_{c.baseline}",
                            "statistic": stat,
                            "value": getattr(s, stat),
                        }
                    )
            if r.analytic is not None:
                stable = getattr(r.analytic, "closed_loop_stable", None)
                if stable is not None:
                    rows.append(
                        {
                            **base,
                            "quantity": "analytic_closed_loop_stable",
                            "statistic": "value",
                            "value": int(stable),
                        }
                    )
                for q in ("gain_margin_db", "phase_margin_deg", "delay_margin_s"):
                    if stable is False:
                        break
                    rows.append(
                        {
                            **base,
                            "quantity": f"analytic_{q}",
                            "statistic": "value",
                            "value": getattr(r.analytic, q),
                        }
                    )
                for q, v in getattr(r.analytic, "extra", {}).items():
                    rows.append({**base, "quantity": f"analytic_{q}", "statistic": "value", "value": v})
            if r.empirical is not None and r.empirical.nominal_settles:
                rows.append(
                    {
                        **base,
                        "quantity": "exp_gain_margin",
                        "statistic": "value",
                        "value": r.empirical.gain.value,
                    }
                )
                rows.append(
                    {
                        **base,
                        "quantity": "exp_delay_margin_s",
                        "statistic": "value",
                        "value": r.empirical.delay.value,
                    }
                )
    return rows


def tidy_csv(rows: list[dict]) -> str:
    buf = io.StringIO()
    w = csv.DictWriter(
        buf, fieldnames=["scenario", "controller", "quantity", "statistic", "value"], lineterminator="\n"
    )
    w.writeheader()
    for r in rows:
        v = r["value"]
        w.writerow({**r, "value": repr(float(v)) if isinstance(v, float) else v})
    return buf.getvalue()
