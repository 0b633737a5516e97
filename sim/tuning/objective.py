"""Score and constraints of candidate gains over a degradation set.

Score
-----
Per run, a weighted mean of normalised terms::

    score = Σ w_i · min(m_i / ref_i, CAP) / Σ w_i

with ``m_i`` the run's ITAE, overshoot, settling time, aileron RMS (and RMS
error, weight 0 unless given). ``ref_i`` is the *starting* gains' mean on the
nominal case (floored at :data:`FLOORS`), so the start scores about 1 there
and each term reads as "fraction of where we started". A run that never
settles or diverges has an infinite term, capped at :data:`CAP`. A term the
scenario's command cannot produce (no step: no ITAE, overshoot or settling)
is left out. Each case's score is the mean over its seeds; the set's score
aggregates the cases: ``mean``, ``worst`` (largest) or ``cvar`` (mean of the
worst ``cvar_fraction`` of cases, at least one).

Constraints (all must hold for a candidate to be feasible)
----------------------------------------------------------
* gain margin ≥ ``gain_margin_db`` both ways and phase margin ≥
  ``phase_margin_deg`` (MIL-F-9490D §3.1.3.6: 6 dB, 45°), and delay margin ≥
  ``delay_margin_multiple`` × the set's worst camera delay, all on the
  analytic loop (:mod:`sim.analysis.loop_from_scenario`) at the set's slowest,
  highest-gain camera (:func:`~sim.tuning.cases.worst_delay_values`);
* no run exceeds the bank limit or diverges (when ``bank_limit``);
* at least ``min_pass_rate`` of all runs meet every [criteria] limit.

A candidate that misses has a *violation*: the sum of each shortfall as a
fraction of its threshold (0 when feasible). The search minimises
``score`` for feasible candidates and ``INFEASIBLE + violation`` otherwise,
so a feasible candidate always ranks above an infeasible one and infeasible
ones rank by how far they miss.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..scenario import Scenario
from .batch import GridResult
from .spec import Constraints, TuneSpec

__all__ = [
    "CAP",
    "FLOORS",
    "INFEASIBLE",
    "TERM_METRIC",
    "Scoring",
    "Margins",
    "make_scoring",
    "run_scores",
    "aggregate",
    "margin_screen",
    "violations",
]

#: Largest value a normalised term can take (a run that never settles or diverges).
CAP = 10.0
#: Penalty offset of an infeasible candidate (scores are ≤ CAP).
INFEASIBLE = 100.0
#: Score term -> metric key (SI).
TERM_METRIC = {
    "itae": "itae",
    "overshoot": "overshoot_pct",
    "settling": "settling_time_s",
    "aileron": "aileron_rms_rad",
    "rms_error": "rms_error_rad",
}
#: Smallest reference per term (SI): keeps a start with ~0 overshoot from
#: turning every percent into a huge score.
FLOORS = {
    "itae": 1e-6,
    "overshoot": 5.0,
    "settling": 0.5,
    "aileron": math.radians(0.1),
    "rms_error": math.radians(0.1),
}


@dataclass(frozen=True)
class Scoring:
    """Active score terms, their weights and reference values (SI)."""

    weights: dict[str, float]
    refs: dict[str, float]
    dropped: tuple[str, ...] = ()


def make_scoring(spec: TuneSpec, start_nominal: dict[str, np.ndarray]) -> Scoring:
    """Weights and references from the starting gains' nominal-case metrics.

    Parameters
    ----------
    spec : TuneSpec
    start_nominal : dict of arrays
        The start's metrics on the nominal case (any shape; averaged).

    Raises
    ------
    UserInputError
        If no weighted term can be computed for this scenario's command.
    """
    from ..errors import UserInputError

    weights, refs, dropped = {}, {}, []
    w_all = dict(spec.weights)
    if not spec.weights_given and "itae" not in start_nominal:
        w_all = {"aileron": 0.25, "rms_error": 1.0}  # a pure hold: track error, not a step
    for term, w in w_all.items():
        if w <= 0:
            continue
        key = TERM_METRIC[term]
        if key not in start_nominal:
            dropped.append(term)
            continue
        v = np.asarray(start_nominal[key], float)
        v = v[np.isfinite(v)]
        ref = float(np.mean(v)) if v.size else FLOORS[term]
        weights[term] = float(w)
        refs[term] = max(ref, FLOORS[term])
    if not weights:
        raise UserInputError(
            f"{spec.file}: [tune.weights] weight only terms this command cannot produce "
            f"({', '.join(dropped)}: they need a step); allowed: aileron or rms_error > 0"
        )
    return Scoring(weights, refs, tuple(dropped))


def run_scores(scoring: Scoring, metrics: dict[str, np.ndarray]) -> np.ndarray:
    """Score of every run (same shape as the metric arrays)."""
    total = sum(scoring.weights.values())
    out = None
    for term, w in scoring.weights.items():
        m = np.asarray(metrics[TERM_METRIC[term]], float)
        x = np.where(np.isfinite(m), m / scoring.refs[term], CAP)
        x = w * np.minimum(np.maximum(x, 0.0), CAP)
        out = x if out is None else out + x
    return out / total


def aggregate(case_scores: np.ndarray, how: str, fraction: float = 0.25) -> np.ndarray:
    """Aggregate ``(..., C)`` case scores over the cases: mean, worst or CVaR."""
    if how == "mean":
        return case_scores.mean(axis=-1)
    if how == "worst":
        return case_scores.max(axis=-1)
    k = max(1, int(math.ceil(fraction * case_scores.shape[-1])))
    return np.sort(case_scores, axis=-1)[..., -k:].mean(axis=-1)


@dataclass(frozen=True)
class Margins:
    """Margins of one candidate's loop (grid screen; see :func:`margin_screen`)."""

    upper_gm_db: float
    lower_gm_db: float
    pm_deg: float
    dm_s: float
    stable: bool


#: Screening grid, rad/s: 1e-3 … 1e3 at 250 points per decade.
SCREEN_OMEGA = np.logspace(-3.0, 3.0, 1501)


def margin_screen(sc: Scenario, names: tuple[str, ...], gains: np.ndarray) -> Margins | None:
    """Gain, phase and delay margins of the scenario's loop with these gains.

    Built with :func:`sim.analysis.loop_from_scenario.loop_parts_from_scenario`
    and evaluated with :func:`sim.analysis.linear_loop.open_loop_response` on
    :data:`SCREEN_OMEGA`, crossovers interpolated between grid points (log
    frequency), closed-loop stability from
    :func:`sim.analysis.linear_loop.closed_loop_stable` — the
    same definitions as :func:`sim.analysis.linear_loop.margins`, without its
    root refinement, which costs ~0.3 s per loop (a test holds the two
    together). ``None`` if the scenario has no linear model.
    """
    from ..analysis.linear_loop import closed_loop_stable, open_loop_response
    from ..analysis.loop_from_scenario import has_linear_model, loop_parts_from_scenario
    from .search import with_gains  # local: search imports this module

    if not has_linear_model(sc):
        return None
    parts = loop_parts_from_scenario(with_gains(sc, names, gains))
    stable = closed_loop_stable(parts, 6)
    w = SCREEN_OMEGA
    big_l = open_loop_response(parts, w)
    if abs(big_l[-1]) >= 1.0:  # a crossover beyond the grid: count it as no margin at all
        return Margins(0.0, 0.0, -180.0, 0.0, False)
    lw = np.log(w)
    # phase crossovers: Im L changes sign where Re L < 0
    im = big_l.imag
    idx = np.nonzero(np.sign(im[:-1]) * np.sign(im[1:]) < 0)[0]
    gms = []
    for i in idx:
        f = im[i] / (im[i] - im[i + 1])
        val = big_l[i] + f * (big_l[i + 1] - big_l[i])
        if val.real < 0:
            gms.append(-20.0 * math.log10(abs(val.real)))
    upper = min([g for g in gms if g >= 0.0], default=math.inf)
    lower = max([g for g in gms if g < 0.0], default=-math.inf)
    # gain crossovers: |L| = 1
    lm = np.log(np.abs(big_l))
    idx = np.nonzero(np.sign(lm[:-1]) * np.sign(lm[1:]) < 0)[0]
    pms, dms = [], []
    for i in idx:
        f = lm[i] / (lm[i] - lm[i + 1])
        wc = math.exp(lw[i] + f * (lw[i + 1] - lw[i]))
        a0, a1 = np.angle(-big_l[i]), np.angle(-big_l[i + 1])
        d = (a1 - a0 + math.pi) % (2 * math.pi) - math.pi  # unwrap across the step
        ang = math.degrees(a0 + f * d)
        ang = (ang + 180.0) % 360.0 - 180.0
        pms.append(ang)
        dms.append(math.radians(ang % 360.0) / wc)
    pm = pms[int(np.argmin(np.abs(pms)))] if pms else math.inf
    dm = min(dms, default=math.inf)
    return Margins(float(upper), float(lower), float(pm), float(dm) if stable else 0.0, stable)


def violations(
    cons: Constraints,
    margins: list[Margins | None],
    worst_camera_delay_s: float,
    grid: GridResult,
) -> tuple[np.ndarray, dict[str, np.ndarray]]:
    """Total violation per candidate and each constraint's share of it.

    Returns
    -------
    total : (P,) float, 0 when feasible
    parts : dict of (P,) float
    """
    n_p = grid.passed.shape[0]
    gm, pm, dm = np.zeros(n_p), np.zeros(n_p), np.zeros(n_p)
    need_dm = cons.delay_margin_multiple * worst_camera_delay_s
    for i, m in enumerate(margins):
        if m is None:
            continue
        if not m.stable:  # unstable: one whole unit, plus how far the margins are off
            gm[i] = 1.0
        if cons.gain_margin_db > 0:
            gm[i] += max(0.0, cons.gain_margin_db - m.upper_gm_db) / cons.gain_margin_db
            gm[i] += max(0.0, m.lower_gm_db + cons.gain_margin_db) / cons.gain_margin_db
        if cons.phase_margin_deg > 0:
            pm[i] = max(0.0, cons.phase_margin_deg - m.pm_deg) / cons.phase_margin_deg
        if need_dm > 0:
            dm[i] = max(0.0, need_dm - m.dm_s) / need_dm
    gm = np.minimum(gm, 10.0)  # an infinite shortfall cannot rank candidates
    axes = (1, 2)
    bank = (1.0 - grid.bank_ok.mean(axis=axes)) if cons.bank_limit else np.zeros(n_p)
    pass_gap = np.maximum(0.0, cons.min_pass_rate - grid.passed.mean(axis=axes))
    parts = {
        "gain_margin": gm,
        "phase_margin": pm,
        "delay_margin": dm,
        "bank_limit": bank,
        "pass_rate": pass_gap,
    }
    return sum(parts.values()), parts
