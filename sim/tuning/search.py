"""Robust gain search: differential evolution over a degradation set.

:func:`prepare` fixes everything a search needs (cases, start, score
references, the loop analysed for margins); :func:`assess` judges a whole
population at once — one batch of the core for candidates × cases × seeds
(:func:`~sim.tuning.batch.simulate_grid`), then each candidate's margins on
the analytic loop; :func:`tune` runs SciPy's
:func:`scipy.optimize.differential_evolution` (seeded, bounded,
``vectorized=True``: each call is a whole generation) and keeps the best
candidate seen, so Ctrl-C ends the search with the best so far; :func:`validate`
runs the start and the best on the held-back set.

The initial population holds the scenario's own gains, the roll-loop design
rule's gains (:mod:`sim.tuning.design_rule`) and a Latin-hypercube spread of
the search box.
"""

from __future__ import annotations

import dataclasses
import math
import time
from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np

from ..scenario import Scenario
from .batch import GridResult, simulate_grid
from .cases import CaseSet, held_back_cases, scenario_for_case, search_cases, worst_delay_values
from .design_rule import RollRule, roll_design_rule
from .objective import (
    INFEASIBLE,
    Margins,
    Scoring,
    aggregate,
    make_scoring,
    margin_screen,
    run_scores,
    violations,
)
from .spec import TuneSpec

__all__ = ["Problem", "Assessment", "Generation", "TuneResult", "prepare", "assess", "tune", "validate"]


@dataclass(frozen=True)
class Problem:
    """Everything fixed during one search."""

    sc: Scenario
    spec: TuneSpec
    names: tuple[str, ...]
    bounds: np.ndarray  # (G, 2)
    cases: CaseSet
    held: CaseSet
    start: np.ndarray  # (G,) the scenario's own gains
    rule: RollRule | None
    rule_gains: np.ndarray | None  # (G,) clipped to the bounds
    margin_sc: Scenario | None  # the slowest, highest-gain camera of the set
    worst_delay_s: float
    scoring: Scoring


@dataclass
class Assessment:
    """A population judged on a case set."""

    gains: np.ndarray  # (P, G)
    score: np.ndarray  # (P,) aggregated over cases
    case_scores: np.ndarray  # (P, C) mean over seeds
    violation: np.ndarray  # (P,)
    parts: dict[str, np.ndarray]
    margins: list[Margins | None]
    grid: GridResult

    @property
    def fitness(self) -> np.ndarray:
        """What the search minimises: the score if feasible, else INFEASIBLE + violation."""
        return np.where(self.violation > 0, INFEASIBLE + self.violation, self.score)

    @property
    def feasible(self) -> np.ndarray:
        return self.violation <= 0


@dataclass(frozen=True)
class Generation:
    """One generation's summary (for the progress bar and convergence plot)."""

    index: int
    best_fitness: float  # best seen so far
    best_score: float  # score of the best seen so far
    best_feasible: bool
    population_best: float
    population_median: float
    n_feasible: int
    population: int


@dataclass
class TuneResult:
    problem: Problem
    best: np.ndarray  # (G,)
    best_fitness: float
    history: list[Generation] = field(default_factory=list)
    interrupted: bool = False
    candidates: int = 0
    candidate_runs: int = 0
    wall_s: float = 0.0
    sim_wall_s: float = 0.0
    margin_wall_s: float = 0.0

    @property
    def feasible(self) -> bool:
        return self.best_fitness < INFEASIBLE


def _pid_gains(sc: Scenario, names) -> np.ndarray:
    pid = sc.controller.pid
    return np.array([float(getattr(pid, n)) for n in names])


def prepare(sc: Scenario, spec: TuneSpec) -> Problem:
    """Cases, start, design-rule gains, score references and the margin loop."""
    from ..analysis.loop_from_scenario import camera_delay, has_linear_model

    names = spec.gains
    bounds = np.array([spec.bounds[n] for n in names], float)
    cases = search_cases(spec, sc)
    start = _pid_gains(sc, names)
    rule = roll_design_rule(sc)
    rule_gains = None
    if rule is not None:
        full = {"kp": rule.kp, "kd_s": rule.kd_s, "ki_per_s": sc.controller.pid.ki_per_s}
        rule_gains = np.clip([full[n] for n in names], bounds[:, 0], bounds[:, 1])
    worst = dict(zip(cases.names, worst_delay_values(spec, sc).tolist(), strict=True))
    margin_sc = scenario_for_case(sc, worst) if has_linear_model(sc) else None
    worst_delay = camera_delay(margin_sc if margin_sc is not None else sc).total_s
    nominal = CaseSet(cases.names, cases.values[:1], cases.kinds[:1], cases.seed_indices)
    grid = simulate_grid(sc, names, start[None, :], nominal, chunk_runs=spec.chunk_runs)
    scoring = make_scoring(spec, {k: v[0, 0] for k, v in grid.metrics.items()})
    return Problem(
        sc=sc,
        spec=spec,
        names=names,
        bounds=bounds,
        cases=cases,
        held=held_back_cases(spec, sc),
        start=start,
        rule=rule,
        rule_gains=rule_gains,
        margin_sc=margin_sc,
        worst_delay_s=worst_delay,
        scoring=scoring,
    )


def assess(problem: Problem, gains: np.ndarray, cases: CaseSet | None = None) -> tuple[Assessment, float]:
    """Judge a population (``(P, G)`` gains) on a case set (default: the search set).

    Returns the assessment and the seconds spent on margins.
    """
    spec = problem.spec
    gains = np.atleast_2d(np.asarray(gains, float))
    cases = problem.cases if cases is None else cases
    grid = simulate_grid(problem.sc, problem.names, gains, cases, chunk_runs=spec.chunk_runs)
    case_scores = run_scores(problem.scoring, grid.metrics).mean(axis=2)
    score = aggregate(case_scores, spec.aggregate, spec.cvar_fraction)
    t0 = time.perf_counter()
    if problem.margin_sc is None:
        margins: list[Margins | None] = [None] * gains.shape[0]
    else:
        margins = [margin_screen(problem.margin_sc, problem.names, g) for g in gains]
    margin_s = time.perf_counter() - t0
    total, parts = violations(spec.constraints, margins, problem.worst_delay_s, grid)
    return Assessment(gains, score, case_scores, total, parts, margins, grid), margin_s


def initial_population(problem: Problem) -> np.ndarray:
    """The scenario's gains, the design rule's, and a Latin-hypercube spread (seeded)."""
    from scipy.stats import qmc

    spec = problem.spec
    lo, hi = problem.bounds[:, 0], problem.bounds[:, 1]
    u = qmc.LatinHypercube(d=lo.size, seed=np.random.default_rng([spec.seed, 3])).random(spec.population)
    pop = lo + u * (hi - lo)
    pop[0] = np.clip(problem.start, lo, hi)
    if problem.rule_gains is not None and spec.population > 1:
        pop[1] = problem.rule_gains
    return pop


def tune(problem: Problem, on_generation: Callable[[Generation], None] | None = None) -> TuneResult:
    """Search the gains; Ctrl-C (KeyboardInterrupt) stops and keeps the best so far."""
    from scipy.optimize import differential_evolution

    spec = problem.spec
    result = TuneResult(
        problem=problem, best=np.clip(problem.start, *problem.bounds.T), best_fitness=math.inf
    )
    best_score = [math.inf]
    t_start = time.perf_counter()

    def fitness(x: np.ndarray) -> np.ndarray:
        pop = np.asarray(x, float).T  # DE hands (G, P)
        a, margin_s = assess(problem, pop)
        f = a.fitness
        i = int(np.argmin(f))
        if f[i] < result.best_fitness:
            result.best, result.best_fitness, best_score[0] = pop[i].copy(), float(f[i]), float(a.score[i])
        result.candidates += pop.shape[0]
        result.candidate_runs += a.grid.runs
        result.sim_wall_s += a.grid.wall_s
        result.margin_wall_s += margin_s
        gen = Generation(
            index=len(result.history),
            best_fitness=result.best_fitness,
            best_score=best_score[0],
            best_feasible=result.best_fitness < INFEASIBLE,
            population_best=float(f[i]),
            population_median=float(np.median(f)),
            n_feasible=int(a.feasible.sum()),
            population=pop.shape[0],
        )
        result.history.append(gen)
        if on_generation is not None:
            on_generation(gen)
        return f

    try:
        differential_evolution(
            fitness,
            bounds=[tuple(b) for b in problem.bounds],
            maxiter=spec.generations,
            init=initial_population(problem),
            rng=np.random.default_rng(spec.seed),
            polish=False,
            vectorized=True,
            updating="deferred",
            tol=0.0,
        )
    except KeyboardInterrupt:
        result.interrupted = True
    result.wall_s = time.perf_counter() - t_start
    return result


@dataclass
class Validation:
    """Start and best on the search set and on the held-back set."""

    search: Assessment  # rows: start, best
    held: Assessment
    gap: np.ndarray  # (2,) held-back score − search score (start, best)


def validate(result: TuneResult) -> Validation:
    """Run the start and the best gains on the search set and the held-back set."""
    problem = result.problem
    pair = np.vstack([problem.start, result.best])
    search, _ = assess(problem, pair)
    held, _ = assess(problem, pair, problem.held)
    return Validation(search, held, held.score - search.score)


def with_gains(sc: Scenario, names: tuple[str, ...], gains: np.ndarray) -> Scenario:
    """The scenario with its PID gains replaced."""
    pid = dataclasses.replace(sc.controller.pid, **{n: float(g) for n, g in zip(names, gains, strict=True)})
    return dataclasses.replace(sc, controller=dataclasses.replace(sc.controller, pid=pid))
