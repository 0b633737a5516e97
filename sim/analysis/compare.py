"""Controllers side by side on the same scenarios, with common random numbers.

Every pairing of a scenario and a candidate controller runs the scenario's
Monte Carlo set with the scenario's seed and the same run indices. Every
random component draws from its own per-run stream (``sim.seeding``), so
each controller meets identical camera noise, frame losses, gusts and
turbulence: the per-run difference of a metric between two controllers is
a paired comparison (:func:`rollrig.sim.stats.paired_difference`), and adding,
removing or reordering candidates changes no other candidate's numbers.

A candidate is a :class:`~rollrig.sim.controller_section.ControllerSpec`: the
scenario's own ``[controller]`` or a controller file read against each
scenario's base step. Anything :func:`rollrig.sim.build.make_controller` can
build is accepted, so new kinds need no change here.

Margins: analytic ones (exact delays) where the controller's loop is linear
and modelled here (the PID, :mod:`.linear_loop`; the cascade, LQG and Smith
predictor, :mod:`.compare_loops`), with a closed-loop stability check; by experiment
(:mod:`.empirical`, gain and delay at the aileron command) for every
controller when asked.
"""

from __future__ import annotations

import dataclasses
import math
import os
from collections.abc import Callable, Sequence
from concurrent.futures import ProcessPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..build import make_controller
from ..controller_section import ControllerSpec, load_controller_file
from ..errors import UserInputError
from ..metrics import METRIC_INFO
from ..runner import metric_spec, run_scenario
from ..scenario import Scenario
from ..stats import MetricSummary, PassSummary, paired_difference

__all__ = [
    "Candidate",
    "PairingResult",
    "ScenarioComparison",
    "headline_metrics",
    "resolve_candidates",
    "compare",
    "rank",
    "parse_rank_by",
]

STEP_HEADLINE = ("settling_time_s", "overshoot_pct", "itae", "rms_error_rad", "aileron_rms_rad")
HOLD_HEADLINE = ("rms_error_rad", "max_abs_error_rad", "time_outside_band_s", "aileron_rms_rad")


@dataclass(frozen=True)
class Candidate:
    """A controller to compare: the scenario's own, or a controller file.

    ``path`` is ``None`` for the scenario's own ``[controller]``.
    """

    name: str
    path: str | None = None

    def spec_for(self, sc: Scenario) -> ControllerSpec:
        if self.path is None:
            return sc.controller
        return load_controller_file(
            self.path, base_step_s=sc.run.base_step_s, aileron_limit_rad=sc.actuator.limit_rad
        )


@dataclass
class PairingResult:
    """One scenario × one controller: per-run metrics, their summaries, margins and kept traces."""

    candidate: str
    kind: str
    metrics: dict[str, np.ndarray]
    passed: dict[str, np.ndarray]
    diverged: np.ndarray
    diverged_at: np.ndarray
    run_index: np.ndarray
    summaries: dict[str, MetricSummary]
    passes: dict[str, PassSummary]
    t: np.ndarray
    bank: dict[int, np.ndarray]  # run index -> bank (rad) over t
    analytic: object | None = None  # LoopMargins, or None without a linear model
    analytic_note: str = ""
    loop_response: np.ndarray | None = None  # L(jω) on compare_loops.OMEGA (Bode/Nichols)
    empirical: object | None = None  # EmpiricalMargins, or None when not asked


@dataclass
class ScenarioComparison:
    """All candidates on one scenario; ``diffs[name][metric]`` is the paired difference from the baseline."""

    scenario: Scenario
    headline: tuple[str, ...]
    results: list[PairingResult]
    baseline: str
    diffs: dict[str, dict[str, MetricSummary]] = field(default_factory=dict)
    bank_cmd: np.ndarray | None = None
    shown_run: int = 0

    def result(self, name: str) -> PairingResult:
        return next(r for r in self.results if r.candidate == name)


def headline_metrics(sc: Scenario) -> tuple[str, ...]:
    """Step metrics when the command has a step, else hold metrics."""
    has_step = any(abs(seg.size_rad) > 1e-12 for seg in metric_spec(sc).steps)
    return STEP_HEADLINE if has_step else HOLD_HEADLINE


def resolve_candidates(
    scenarios: Sequence[Scenario], files: Sequence[str], *, own: bool, allow_code: bool
) -> list[Candidate]:
    """Candidates in order (the scenarios' own first, then the files); checks every pairing builds.

    Raises
    ------
    UserInputError
        Fewer than two candidates, two with the same name, or a pairing that
        cannot be built (e.g. a kind that needs a gyro on a scenario without one).
    """
    cands: list[Candidate] = []
    if own:
        names = {sc.controller.name for sc in scenarios}
        label = names.pop() if len(names) == 1 else "own"
        cands.append(Candidate(f"{label} (scenario)" if files else label))
    for f in files:
        spec = load_controller_file(
            f, base_step_s=scenarios[0].run.base_step_s, aileron_limit_rad=scenarios[0].actuator.limit_rad
        )
        name = spec.label or Path(f).stem
        cands.append(Candidate(name, str(f)))
    if len(cands) < 2:
        raise UserInputError(
            f"compare needs at least two controllers, got {len(cands)}; allowed: the scenario's own "
            "plus one or more --controller FILE, or two or more --controller FILE"
        )
    seen: set[str] = set()
    for c in cands:
        if c.name in seen:
            raise UserInputError(
                f"two controllers are named {c.name!r}; allowed: distinct names (set label in a file)"
            )
        seen.add(c.name)
    for sc in scenarios:  # fail before any simulation
        for c in cands:
            make_controller(c.spec_for(sc), allow_code=allow_code, scenario=_with(sc, c.spec_for(sc)))
    return cands


def _with(sc: Scenario, spec: ControllerSpec) -> Scenario:
    return dataclasses.replace(sc, controller=spec)


def _analytic(sc: Scenario):
    """(margins, note, loop response on :data:`.compare_loops.OMEGA`) of a linear loop."""
    from .compare_loops import OMEGA, analytic_loop, loop_margins
    from .linear_loop import margins, open_loop_response
    from .loop_from_scenario import has_linear_model, loop_parts_from_scenario

    spec = sc.controller
    try:
        loop = analytic_loop(sc)
        if loop is not None:
            if spec.kind == "smith":
                from .compare_loops_smith import smith_margins

                m = smith_margins(loop)
            else:
                m = loop_margins(loop)
            resp = loop.response(OMEGA)
            resp[OMEGA >= loop.nyquist_rad_s] = np.nan  # the fundamental means nothing past Nyquist
            return m, "", resp
        if not has_linear_model(sc):
            return None, "no linear model here", None
        parts = loop_parts_from_scenario(sc)
        return margins(parts), "", open_loop_response(parts, OMEGA)
    except Exception as exc:  # an analysis failure must not sink the comparison
        return None, f"analytic margins failed: {exc}", None


def _run_pairing(
    sc: Scenario, cand: Candidate, allow_code: bool, margins: str, keep_runs: Sequence[int]
) -> PairingResult:
    spec = cand.spec_for(sc)
    scp = _with(sc, spec)
    ctrl = make_controller(spec, allow_code=allow_code, scenario=scp)
    out = run_scenario(scp, controller=ctrl)
    tr = out.trace
    summaries = out.summaries()
    keep = set(int(k) for k in keep_runs)
    for key in headline_metrics(sc):
        s = summaries.get(key)
        if s is not None and s.worst_run >= 0:
            keep.add(s.worst_run)
    rows = {int(r): i for i, r in enumerate(tr.run_index)}
    res = PairingResult(
        candidate=cand.name,
        kind=spec.kind,
        metrics={k: np.asarray(v) for k, v in out.metrics.items()},
        passed=out.passed,
        diverged=tr.diverged.copy(),
        diverged_at=tr.diverged_at.copy(),
        run_index=tr.run_index.copy(),
        summaries=summaries,
        passes=out.pass_summaries(),
        t=tr.t.copy(),
        bank={r: tr.bank[rows[r]].copy() for r in sorted(keep) if r in rows},
    )
    if margins in ("analytic", "all"):
        res.analytic, res.analytic_note, res.loop_response = _analytic(scp)
    if margins == "all":
        from .empirical import EmpiricalSettings, empirical_margins

        settings = EmpiricalSettings(base_step_s=None, candidates=8, rounds=2, loss=False)
        res.empirical = empirical_margins(
            scp, settings, controller=make_controller(spec, allow_code=allow_code, scenario=scp)
        )
    return res


def _job(args):
    return _run_pairing(*args)


def compare(
    scenarios: Sequence[Scenario],
    candidates: Sequence[Candidate],
    *,
    baseline: str | None = None,
    allow_code: bool = False,
    margins: str = "all",
    shown_run: int = 0,
    workers: int = 1,
    progress: Callable[[str], None] | None = None,
) -> list[ScenarioComparison]:
    """Run every scenario × candidate pairing with common random numbers.

    Parameters
    ----------
    scenarios : sequence of Scenario
    candidates : sequence of Candidate
        In table order; names distinct.
    baseline : str, optional
        Candidate the paired differences are taken against (default: the first).
    margins : {"none", "analytic", "all"}
        Which margins to compute ("all" adds the experimental ones).
    shown_run : int
        Run index whose bank history is kept for every controller (plots).
    workers : int
        Processes to spread the pairings over (1: in this process). The
        results do not depend on it.
    """
    names = [c.name for c in candidates]
    base = baseline if baseline is not None else names[0]
    if base not in names:
        raise UserInputError(f"--baseline {base}: allowed: {', '.join(names)}")
    jobs = [(sc, c, allow_code, margins, (shown_run,)) for sc in scenarios for c in candidates]
    if workers > 1 and len(jobs) > 1:
        import multiprocessing

        ctx = multiprocessing.get_context("fork" if os.name == "posix" else "spawn")
        with ProcessPoolExecutor(max_workers=workers, mp_context=ctx) as pool:
            flat = list(pool.map(_job, jobs))
    else:
        flat = []
        for j in jobs:
            if progress is not None:
                progress(f"{j[0].title}: {j[1].name}")
            flat.append(_job(j))
    out = []
    for i, sc in enumerate(scenarios):
        results = flat[i * len(candidates) : (i + 1) * len(candidates)]
        cmp_ = ScenarioComparison(
            scenario=sc,
            headline=headline_metrics(sc),
            results=results,
            baseline=base,
            bank_cmd=sc.command.on_grid(results[0].t),
            shown_run=shown_run,
        )
        ref = cmp_.result(base)
        for r in results:
            if r.candidate == base:
                continue
            cmp_.diffs[r.candidate] = {
                key: paired_difference(
                    r.metrics[key],
                    ref.metrics[key],
                    r.run_index,
                    excluded_a=r.diverged,
                    excluded_b=ref.diverged,
                )
                for key in cmp_.headline
                if key in r.metrics and key in ref.metrics
            }
        out.append(cmp_)
    return out


def parse_rank_by(text: str, headline: Sequence[str]) -> dict[str, float]:
    """``"itae"`` or ``"itae=1,rms_error_rad=2"`` -> weights (checked against the headline metrics)."""
    weights: dict[str, float] = {}
    for part in text.split(","):
        key, _, w = part.strip().partition("=")
        key = key.strip()
        if key not in METRIC_INFO or METRIC_INFO[key].kind != "value":
            allowed = ", ".join(sorted(k for k, v in METRIC_INFO.items() if v.kind == "value"))
            raise UserInputError(f"--rank-by {text}: unknown metric {key!r}; allowed: {allowed}")
        try:
            weight = float(w) if w else 1.0
        except ValueError:
            raise UserInputError(f"--rank-by {text}: weight {w!r} is not a number") from None
        if not (math.isfinite(weight) and weight > 0):
            raise UserInputError(f"--rank-by {text}: weight {w!r}; allowed: a number > 0")
        weights[key] = weight
    return weights


def rank(cmp_: ScenarioComparison, weights: dict[str, float]) -> dict[str, float]:
    """Score per controller, lower is better.

    One metric: its mean in the metric's display unit (sign-flipped where
    smaller is worse). Several: the
    weighted sum of each mean divided by the baseline's mean (unit-free), so
    ``1.0`` per unit weight is "as good as the baseline". A controller with a
    diverged run or an infinite mean scores ``inf``.
    """
    ref = cmp_.result(cmp_.baseline)
    scores = {}
    for r in cmp_.results:
        total = 0.0
        for key, w in weights.items():
            s = r.summaries.get(key)
            if s is None or s.n_diverged or not math.isfinite(s.mean):
                total = math.inf
                break
            sign = 1.0 if METRIC_INFO[key].larger_is_worse else -1.0
            if len(weights) == 1:
                total = sign * s.mean * METRIC_INFO[key].scale
            else:
                b = ref.summaries[key].mean
                total += w * sign * (s.mean / b if b not in (0.0,) and math.isfinite(b) else s.mean)
        scores[r.candidate] = total
    return scores
