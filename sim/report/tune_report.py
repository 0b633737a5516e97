"""Tables, plots and the output folder of ``rollrig tune``.

Presentation only: the numbers come from :mod:`sim.tuning`. The before/after
table compares the scenario's own gains ("start") with the tuned gains on
the nominal case, on each design's worst case of the search set and on the
worst case of the held-back set; the margins table holds the full
:func:`sim.analysis.linear_loop.margins` of both designs on the nominal loop
and on the set's slowest camera; the sensitivity table calls
:func:`sim.analysis.fault_ranking.rank_faults` on the tuned design's worst case.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from . import CAUTION
from .table import Table, fmt_number

__all__ = [
    "TuneReport",
    "build_report",
    "gains_table",
    "before_after_table",
    "margins_table",
    "sensitivity_table",
    "plot_convergence",
    "plot_worst_cases",
    "write_folder",
]

_DEG = 180.0 / math.pi

#: Rows of the before/after table (metric keys; labels and units from METRIC_INFO).
_ROWS = (
    "itae",
    "overshoot_pct",
    "settling_time_s",
    "aileron_rms_rad",
    "rms_error_rad",
    "peak_abs_bank_rad",
)


@dataclass
class TuneReport:
    tables: list[Table]
    margins: dict  # name -> LoopMargins (start/tuned × nominal/slowest)
    sensitivity: object | None  # FaultRanking
    worst_cases: tuple[int, int]  # search-set case index where start / tuned score worst


def _f(x) -> str:
    return fmt_number(x)


def gains_table(result, validation) -> Table:
    p = result.problem
    t = Table(
        title=f"{p.sc.title}: gains",
        columns=["gain", "start (scenario)", "design rule", "tuned", "search box"],
    )
    rule = p.rule
    rule_full = {"kp": rule.kp, "kd_s": rule.kd_s} if rule is not None else {}
    t.records = []
    for j, n in enumerate(p.names):
        lo, hi = p.bounds[j]
        r = rule_full.get(n)
        t.add(n, _f(p.start[j]), "—" if r is None else _f(r), _f(result.best[j]), f"[{_f(lo)}, {_f(hi)}]")
        t.records.append(
            {"gain": n, "start": p.start[j], "design_rule": r, "tuned": result.best[j], "bounds": [lo, hi]}
        )
    if rule is not None:
        how = (
            "the roll-only model" if rule.exact else "the roll-only reduction (aφ1 = −A(p,p), aφ2 = B(p,δa))"
        )
        t.notes.append(
            f"design rule (Beard & McLain 2012, §6.3.1) on {how}: aφ1 = {rule.a1_per_s:.3g} 1/s, "
            f"aφ2 = {rule.a2_per_s2:.3g} 1/s², eφ_max = {rule.error_max_rad * _DEG:.3g}°, "
            f"δa_max = {rule.aileron_max_rad * _DEG:.3g}°, ζ = {rule.zeta:g}, "
            f"ωn = {rule.omega_n_rad_s:.3g} rad/s; "
            "it seeds the initial population."
        )
    return t


def before_after_table(result, validation) -> tuple[Table, tuple[int, int]]:
    p = result.problem
    s, h = validation.search, validation.held
    worst_s = [int(np.argmax(s.case_scores[i])) for i in (0, 1)]
    worst_h = [int(np.argmax(h.case_scores[i])) for i in (0, 1)]
    cols = ["", "nominal: start", "tuned", "worst case: start", "tuned", "held-back worst: start", "tuned"]
    t = Table(title=f"{p.sc.title}: before and after tuning", columns=cols)
    t.records = []

    def cells(key, scale):
        out = []
        for a, cs in ((s, (0, 0)), (s, worst_s), (h, worst_h)):
            for i in (0, 1):
                out.append(
                    float(np.mean(a.grid.metrics[key][i, cs[i]])) * scale if key in a.grid.metrics else None
                )
        return out

    def row(label, values, fmt=_f):
        t.add(label, *[("—" if v is None else fmt(v)) for v in values])
        t.records.append({"row": label, "values": values, "columns": cols[1:]})

    row(
        "score (case, seed mean)",
        [
            s.case_scores[0, 0],
            s.case_scores[1, 0],
            s.case_scores[0, worst_s[0]],
            s.case_scores[1, worst_s[1]],
            h.case_scores[0, worst_h[0]],
            h.case_scores[1, worst_h[1]],
        ],
    )
    from rollrig.sim.metrics import METRIC_INFO

    for key in _ROWS:
        if key in s.grid.metrics:
            info = METRIC_INFO[key]
            row(f"{info.label} ({info.unit})" if info.unit else info.label, cells(key, info.scale))
    agg = p.spec.aggregate + (f" {p.spec.cvar_fraction:g}" if p.spec.aggregate == "cvar" else "")
    row(f"set score ({agg})", [None, None, s.score[0], s.score[1], h.score[0], h.score[1]])
    row(
        "runs passing every criterion (%)",
        [
            None,
            None,
            100 * s.grid.passed[0].mean(),
            100 * s.grid.passed[1].mean(),
            100 * h.grid.passed[0].mean(),
            100 * h.grid.passed[1].mean(),
        ],
    )
    row(
        "runs over the bank limit or diverged (%)",
        [
            None,
            None,
            100 * (1 - s.grid.bank_ok[0].mean()),
            100 * (1 - s.grid.bank_ok[1].mean()),
            100 * (1 - h.grid.bank_ok[0].mean()),
            100 * (1 - h.grid.bank_ok[1].mean()),
        ],
    )
    t.notes.append(
        f"worst case: start on ({p.cases.label(worst_s[0])}), tuned on ({p.cases.label(worst_s[1])}); "
        f"held-back worst: start on ({p.held.label(worst_h[0])}), tuned on ({p.held.label(worst_h[1])})."
    )
    t.notes.append(
        f"generalisation gap (held-back − search set score): start {validation.gap[0]:+.3g}, "
        f"tuned {validation.gap[1]:+.3g}; the held-back set has {p.held.n_cases} off-grid cases × "
        f"{p.held.seed_indices.size} seeds the search never saw."
    )
    from rollrig.sim.tuning.objective import TERM_METRIC

    sc_ = p.scoring

    def ref(k: str) -> str:
        info = METRIC_INFO[TERM_METRIC[k]]
        return f"{sc_.refs[k] * info.scale:.3g} {info.unit}".rstrip()

    terms = ", ".join(f"{w:g}·{k}/({ref(k)})" for k, w in sc_.weights.items())
    t.notes.append(
        f"score per run = ({terms}) / {sum(sc_.weights.values()):g}, each term capped at 10; "
        "the references are the start's nominal-case means."
    )
    return t, (worst_s[0], worst_s[1])


def _full_margins(sc, names, gains):
    from rollrig.sim.analysis.linear_loop import margins
    from rollrig.sim.analysis.loop_from_scenario import loop_parts_from_scenario
    from rollrig.sim.tuning.search import with_gains

    return margins(loop_parts_from_scenario(with_gains(sc, names, gains)))


def margins_table(result) -> tuple[Table | None, dict]:
    from rollrig.sim.analysis.loop_from_scenario import camera_delay

    p = result.problem
    if p.margin_sc is None:
        return None, {}
    c = p.spec.constraints
    ms = {
        "start, nominal": _full_margins(p.sc, p.names, p.start),
        "tuned, nominal": _full_margins(p.sc, p.names, result.best),
        "start, slowest camera": _full_margins(p.margin_sc, p.names, p.start),
        "tuned, slowest camera": _full_margins(p.margin_sc, p.names, result.best),
    }
    t = Table(title=f"{p.sc.title}: loop margins (analytic, exact delays)", columns=["", "required", *ms])
    need_dm = c.delay_margin_multiple * p.worst_delay_s
    rows = (
        ("gain margin up (dB)", f"≥ {c.gain_margin_db:g}", lambda m: m.upper_gain_margin_db),
        ("gain margin down (dB)", f"≤ −{c.gain_margin_db:g}", lambda m: m.lower_gain_margin_db),
        ("phase margin (deg)", f"≥ {c.phase_margin_deg:g}", lambda m: m.phase_margin_deg),
        ("delay margin (s)", f"≥ {need_dm:.3g}", lambda m: m.delay_margin_s),
        ("bandwidth (rad/s)", "", lambda m: m.bandwidth_rad_s),
        ("closed loop stable", "yes", lambda m: m.closed_loop_stable),
    )
    t.records = []
    for label, req, get in rows:
        vals = [get(m) for m in ms.values()]
        t.add(label, req, *[("yes" if v else "NO") if isinstance(v, bool) else _f(v) for v in vals])
        t.records.append({"row": label, "required": req, **dict(zip(ms, vals, strict=True))})
    t.notes.append(
        f"slowest camera = ({', '.join(f'{n}={v:.3g}' for n, v in _worst_values(p).items())}): "
        f"effective camera delay {camera_delay(p.margin_sc).total_s * 1000:.0f} ms; the delay-margin "
        f"requirement is {c.delay_margin_multiple:g} × that. Gain/phase thresholds: MIL-F-9490D §3.1.3.6."
    )
    return t, ms


def _worst_values(p) -> dict[str, float]:
    from rollrig.sim.tuning.cases import worst_delay_values

    return dict(zip(p.cases.names, worst_delay_values(p.spec, p.sc).tolist(), strict=True))


def sensitivity_table(result, case_index: int) -> tuple[Table | None, object]:
    """What each camera fault costs the tuned design on its worst case.

    Calls :func:`sim.analysis.fault_ranking.rank_faults` (each fault removed,
    each alone, same seeds) in the score's heaviest-weighted metric, and
    converts the paired cost into score units (``w / Σw / ref``; the term cap
    is ignored in that conversion).
    """
    from rollrig.sim.analysis.fault_ranking import active_faults, rank_faults
    from rollrig.sim.metrics import METRIC_INFO
    from rollrig.sim.tuning.cases import scenario_for_case
    from rollrig.sim.tuning.objective import TERM_METRIC
    from rollrig.sim.tuning.search import with_gains

    p = result.problem
    case_sc = with_gains(scenario_for_case(p.sc, p.cases.row(case_index)), p.names, result.best)
    case_sc = case_sc.with_run(runs=max(2, p.spec.seeds))
    if not active_faults(case_sc):
        return None, None
    w = p.scoring.weights
    term = max(w, key=w.get)
    metric = TERM_METRIC[term]
    ranking = rank_faults(case_sc, metric)
    per = w[term] / sum(w.values()) / p.scoring.refs[term]
    info = METRIC_INFO[metric]
    unit = f" ({info.unit})" if info.unit else ""
    t = Table(
        title=f"{p.sc.title}: score sensitivity to each camera fault (tuned gains, their worst case)",
        columns=["rank", "fault", "setting", f"cost in {info.label}{unit} [95 % CI]", "cost in score"],
    )
    t.records = []
    for k, e in enumerate(ranking.effects, 1):
        c = e.cost
        t.add(
            k,
            e.fault.name,
            e.fault.setting,
            f"{_f(c.mean * info.scale)} [{_f(c.ci95_low * info.scale)}, {_f(c.ci95_high * info.scale)}]",
            _f(c.mean * per),
        )
        t.records.append(
            {
                "rank": k,
                "fault": e.fault.name,
                "setting": e.fault.setting,
                "cost_si": c.mean,
                "cost_ci95_si": [c.ci95_low, c.ci95_high],
                "cost_score": c.mean * per,
            }
        )
    t.notes.append(
        f"case ({p.cases.label(case_index)}), {ranking.runs} seeds; cost = every fault − that fault removed, "
        f"paired over the same seeds (rollrig rank-faults); score units = {info.label} × {per:.3g} "
        f"({term} is the heaviest score term). Turbulence is not a camera fault and is not ranked."
    )
    return t, ranking


def plot_convergence(history, path: Path, title: str) -> None:
    """Best score so far, generation best and median (feasible ones); below, the
    share of feasible candidates and, while none is feasible, the closest miss."""
    from .plots import pyplot

    plt = pyplot()
    fig, (ax, ax2) = plt.subplots(
        2, 1, figsize=(8, 5.6), layout="constrained", sharex=True, height_ratios=(2, 1)
    )
    g = np.array([h.index for h in history])
    best = np.array([h.best_score if h.best_feasible else np.nan for h in history])
    pop = np.array([h.population_best for h in history])
    med = np.array([h.population_median for h in history])
    ax.plot(g, best, "o-", color="tab:blue", label="best feasible so far")
    feas = pop < 100
    ax.plot(g[feas], pop[feas], ".", color="tab:green", ms=8, label="generation best (feasible)")
    ok = med < 100
    ax.plot(g[ok], med[ok], "--", color="tab:gray", label="generation median (when feasible)")
    ax.set_ylabel("score (lower is better)")
    ax.set_title(title)
    ax.grid(alpha=0.3)
    ax.legend(loc="upper right", fontsize=8)
    ax2.bar(g, [h.n_feasible / h.population * 100 for h in history], color="tab:orange", alpha=0.5, width=0.8)
    ax2.set_ylabel("feasible trials (%)")
    ax2.set_ylim(0, 105)
    miss = np.array([h.best_fitness - 100.0 if not h.best_feasible else np.nan for h in history])
    if np.isfinite(miss).any():
        ax3 = ax2.twinx()
        ax3.plot(g, miss, "s-", color="tab:red", ms=4)
        ax3.set_ylabel("closest miss", color="tab:red")
    ax2.set_xlabel("generation (0 = initial population)")
    ax2.grid(alpha=0.3)
    fig.savefig(path, dpi=110)
    plt.close(fig)


def plot_worst_cases(result, worst: tuple[int, int], path: Path) -> None:
    """Bank responses of start and tuned gains on each design's worst case (first seed)."""
    from rollrig.sim.runner import run_scenario
    from rollrig.sim.tuning.batch import controller_for
    from rollrig.sim.tuning.cases import scenario_for_case

    from .plots import pyplot

    p = result.problem
    plt = pyplot()
    fig, axes = plt.subplots(1, 2, figsize=(12, 4.2), layout="constrained", sharey=True)
    seed0 = [int(p.cases.seed_indices[0])]
    for ax, who, c in zip(axes, ("start", "tuned"), worst, strict=True):
        case_sc = scenario_for_case(p.sc, p.cases.row(c))
        for label, gains, color in (("start", p.start, "tab:red"), ("tuned", result.best, "tab:blue")):
            out = run_scenario(case_sc, controller=controller_for(p.sc, p.names, gains), run_indices=seed0)
            tr = out.trace
            ax.plot(tr.t, tr.bank[0] * _DEG, color=color, lw=1.3, label=f"{label} gains: true bank")
            ax.step(tr.t_ctrl, tr.bank_meas[0] * _DEG, where="post", color=color, lw=0.6, alpha=0.5)
        ax.plot(tr.t, tr.bank_cmd[0] * _DEG, "k--", lw=1.0, label="command")
        lim = p.sc.criteria.bank_limit_rad * _DEG
        lo, hi = ax.get_ylim()
        for y in (lim, -lim):
            if lo - 0.3 * (hi - lo) < y < hi + 0.3 * (hi - lo):  # only a limit near the response
                ax.axhline(y, color="tab:red", ls=":", lw=0.8, label="bank limit" if y > 0 else None)
        ax.set_title(f"{who}'s worst case: {p.cases.label(c)}", fontsize=8)
        ax.set_xlabel("time (s)")
        ax.grid(alpha=0.3)
        ax.legend(fontsize=8, loc="best")
    axes[0].set_ylabel("bank angle (deg); thin steps: camera reading")
    fig.suptitle("worst-case responses before and after tuning (first seed)")
    fig.savefig(path, dpi=110)
    plt.close(fig)


def build_report(result, validation, *, sensitivity: bool = True) -> TuneReport:
    """Every table of the report (margins and sensitivity are computed here)."""
    tables = [gains_table(result, validation)]
    ba, worst = before_after_table(result, validation)
    tables.append(ba)
    mt, ms = margins_table(result)
    if mt is not None:
        tables.append(mt)
    ranking = None
    if sensitivity:
        st, ranking = sensitivity_table(result, worst[1])
        if st is not None:
            tables.append(st)
    tables.append(summary_table(result, validation))
    return TuneReport(tables, ms, ranking, worst)


def summary_table(result, validation) -> Table:
    p = result.problem
    spec = p.spec
    t = Table(title=f"{p.sc.title}: search", columns=["item", "value"])
    n_c, n_s = p.cases.n_cases, p.cases.seed_indices.size
    kinds = {k: p.cases.kinds.count(k) for k in dict.fromkeys(p.cases.kinds)}
    items = [
        (
            "degradation axes",
            ", ".join(
                f"{a.name} {'∈ ' + str(list(a.values)) if a.values else f'[{a.lo:g}, {a.hi:g}]'}"
                for a in spec.axes
            )
            or "none",
        ),
        ("search set", f"{n_c} cases ({', '.join(f'{v} {k}' for k, v in kinds.items())}) × {n_s} seeds"),
        (
            "aggregate",
            spec.aggregate
            + (f" (worst {spec.cvar_fraction:g} of cases)" if spec.aggregate == "cvar" else ""),
        ),
        (
            "generations × population",
            f"{len(result.history) - 1} × {spec.population}"
            + (" (stopped by Ctrl-C)" if result.interrupted else ""),
        ),
        ("candidates simulated", f"{result.candidates} ({result.candidate_runs} runs)"),
        ("feasible", "yes" if result.feasible else "no"),
        (
            "time",
            f"{result.wall_s:.1f} s (simulation {result.sim_wall_s:.1f} s, "
            f"margins {result.margin_wall_s:.1f} s)",
        ),
        (
            "candidate-runs per second",
            f"{result.candidate_runs / max(result.sim_wall_s, 1e-9):.0f} (simulation only)",
        ),
    ]
    t.records = []
    for k, v in items:
        t.add(k, v)
        t.records.append({"item": k, "value": v})
    t.notes.append(CAUTION)
    return t


def tuned_scenario_text(result, template: str) -> str:
    """The tuned scenario as TOML (the user's file with new gains; [tune] left out)."""
    import tomlkit
    from rollrig.sim.scenario_writer import scenario_to_toml
    from rollrig.sim.tuning.search import with_gains

    doc = tomlkit.parse(template)
    if "tune" in doc:
        del doc["tune"]
    p = result.problem
    sc = with_gains(p.sc, p.names, result.best)
    out = tomlkit.parse(scenario_to_toml(sc, template=tomlkit.dumps(doc)))
    ctrl = out.get("controller")
    for name, before in zip(p.names, p.start, strict=True):
        if ctrl is not None and name in ctrl:  # say where the number came from (replaces a stale comment)
            ctrl[name].comment(f"rollrig tune (was {before:.4g})")
    return tomlkit.dumps(out)


def write_folder(tmp: Path, result, validation, report: TuneReport, template: str, manifest: dict) -> None:
    """Write every file of the output folder into ``tmp`` (the caller makes it atomic)."""
    from .outdir import write_json
    from .table import render

    (tmp / "tuned.toml").write_text(tuned_scenario_text(result, template))
    (tmp / "report.md").write_text(render(report.tables, "md"))
    write_json(
        tmp / "report.json",
        [{"title": t.title, "records": t.records, "notes": t.notes} for t in report.tables],
    )
    write_json(tmp / "history.json", [dataclasses.asdict(h) for h in result.history])
    plot_convergence(result.history, tmp / "convergence.png", f"{result.problem.sc.title}: convergence")
    plot_worst_cases(result, report.worst_cases, tmp / "worst_cases.png")
    write_json(tmp / "manifest.json", manifest)
