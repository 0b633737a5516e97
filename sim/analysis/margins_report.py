"""The margins report of one scenario: analytic and empirical margins, handling qualities.

:func:`margins_report` computes everything ``rollrig margins`` shows;
:func:`margins_tables` turns it into :class:`~sim.report.table.Table` objects
(terminal, CSV, JSON, Markdown) and :func:`write_margin_plots` into PNGs.

Requirements used for the ratings
---------------------------------
* Loop margins: MIL-F-9490D (1975) §3.1.3.6 — at least ±6 dB of gain margin
  and 45° of phase margin (docs/references.md "Loop margins"). The empirical gain
  margin is rated against the same 6 dB.
* Bare airframe: MIL-F-8785C Tables VII (roll-mode time constant), VIII
  (spiral time to double, 1980 values) and VI (Dutch roll ζ, ζωn, ωn), for the
  chosen aircraft class and flight-phase category
  (:mod:`sim.analysis.handling`).
* Closed loop: MIL-F-8785C Table IXa, Class I — time to bank through 60°
  (Categories A, B) or 30° (Category C) after a step command to 1.05 times
  that angle from wings level (:func:`sim.analysis.empirical.bank_step_time`).
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np
from rollrig.controllers.base import Controller
from rollrig.sim.errors import ScenarioError
from rollrig.sim.report.table import Table
from rollrig.sim.scenario import Scenario

from .empirical import EmpiricalMargins, EmpiricalSettings, bank_step_time, empirical_margins
from .handling import (
    LateralModes,
    Level,
    ModeRatings,
    identify_modes,
    rate_modes,
    rate_roll_mode,
    rate_roll_performance,
    roll_performance_bank_change_deg,
)
from .linear_loop import (
    LoopMargins,
    LoopParts,
    margins,
    open_loop_response,
)
from .loop_from_scenario import (
    CameraDelay,
    camera_delay,
    has_linear_model,
    loop_parts_from_scenario,
    schedule_stats,
)

__all__ = [
    "MarginsReport",
    "margins_report",
    "margins_tables",
    "run_margins_table",
    "near_tangent_crossovers",
    "stale_readings",
    "write_margin_plots",
]


@dataclass(frozen=True)
class MarginsReport:
    """Everything ``rollrig margins`` reports for one scenario.

    Attributes
    ----------
    scenario : Scenario
    aircraft_class, category : str
        MIL-F-8785C class and flight-phase category used for the ratings.
    delay : CameraDelay
        The camera's effective delay, part by part.
    parts : LoopParts or None
        The linear loop (``None`` when the controller has no linear model).
    analytic : LoopMargins or None
        Frequency-domain margins (``None`` without a linear model).
    empirical : EmpiricalMargins or None
        Margins by simulation (``None`` when not asked for).
    modes : LateralModes or None
        Bare-airframe modes (``None`` if they could not be identified).
    mode_ratings : ModeRatings or None
    mode_error : str
        Why the modes are missing, if they are.
    bank_change_deg : deg
        Angle timed for roll performance.
    time_to_bank_s : s or None
        Closed-loop time to bank through it (``inf`` never; ``None`` not run).
    roll_performance : Level or None
        Its Level (Class I only).
    timings_s : dict of str -> s
        Wall time of each part.
    stale_reading_s : s or None
        Oldest reading age at the ticks when it exceeds the PID's ``stale_after_s``.
    near_tangent : list of (rad/s, dB)
        Peaks or dips of ``|L|`` within 0.5 dB of 0 dB (ill-conditioned crossovers).
    """

    scenario: Scenario
    aircraft_class: str
    category: str
    delay: CameraDelay
    parts: LoopParts | None
    analytic: LoopMargins | None
    empirical: EmpiricalMargins | None
    modes: LateralModes | None
    mode_ratings: ModeRatings | None
    mode_error: str
    bank_change_deg: float
    time_to_bank_s: float | None
    roll_performance: Level | None
    timings_s: dict[str, float]
    stale_reading_s: float | None = None
    near_tangent: tuple[tuple[float, float], ...] = ()

    @property
    def total_s(self) -> float:
        """Wall time of the whole report, s."""
        return float(sum(self.timings_s.values()))


def margins_report(
    sc: Scenario,
    *,
    aircraft_class: str = "I",
    category: str = "B",
    empirical: bool = True,
    handling: bool = True,
    settings: EmpiricalSettings | None = None,
    controller: Controller | None = None,
    allow_code: bool = False,
) -> MarginsReport:
    """Analytic and empirical margins and handling-quality ratings of a scenario.

    Parameters
    ----------
    sc : Scenario
    aircraft_class : str
        MIL-F-8785C class, ``"I"`` … ``"IV"`` (``"II-C"``/``"II-L"`` in Cat C).
    category : str
        Flight-phase category ``"A"``, ``"B"`` or ``"C"``.
    empirical : bool
        Run the empirical margin search.
    handling : bool
        Rate the airframe modes and the closed-loop roll performance.
    settings : EmpiricalSettings, optional
        Empirical search settings; by default the judging windows are sized
        from the analytic crossovers when a linear model exists.
    controller : Controller, optional
        Overrides the scenario's controller (empirical parts only; the analytic
        part describes the scenario's PID).
    allow_code : bool
        Permission to import the scenario's user controller class.

    Returns
    -------
    MarginsReport

    Raises
    ------
    ValueError
        For an unknown class or category.
    """
    # Validate class and category first (cheap; a user mistake raises ValueError here).
    rate_roll_mode(0.0, aircraft_class, category)
    bank_change = roll_performance_bank_change_deg(category)
    timings: dict[str, float] = {}

    t = time.perf_counter()
    parts = analytic = None
    linear = has_linear_model(sc) and controller is None
    if linear:
        parts = loop_parts_from_scenario(sc)
        analytic = _scenario_margins(sc, parts)
    timings["analytic"] = time.perf_counter() - t

    emp = None
    if empirical:
        t = time.perf_counter()
        st = settings or EmpiricalSettings()
        if st.oscillation_rad_s is None and st.window_s is None and analytic is not None:
            freqs = [
                w
                for w in (analytic.gain_crossover_rad_s, analytic.phase_crossover_rad_s)
                if math.isfinite(w) and w > 0
            ]
            if freqs:
                st = replace(st, oscillation_rad_s=min(freqs))
        emp = empirical_margins(sc, st, controller=controller, allow_code=allow_code)
        timings["empirical"] = time.perf_counter() - t

    modes = ratings = None
    mode_error = ""
    t_bank = level_roll = None
    if handling:
        t = time.perf_counter()
        try:
            modes = identify_modes(sc.plant.a, sc.plant.state_names)
            ratings = rate_modes(modes, aircraft_class, category)
        except ValueError as exc:
            mode_error = str(exc)
        t_bank = bank_step_time(sc, bank_change, controller=controller, allow_code=allow_code)
        if aircraft_class.strip().upper() == "I":
            level_roll = rate_roll_performance(t_bank, aircraft_class, category)
        timings["handling"] = time.perf_counter() - t

    return MarginsReport(
        scenario=sc,
        aircraft_class=aircraft_class.strip().upper(),
        category=category.strip().upper(),
        delay=camera_delay(sc),
        parts=parts,
        analytic=analytic,
        empirical=emp,
        modes=modes,
        mode_ratings=ratings,
        mode_error=mode_error,
        bank_change_deg=bank_change,
        time_to_bank_s=t_bank,
        roll_performance=level_roll,
        timings_s=timings,
        stale_reading_s=stale_readings(sc),
        near_tangent=tuple(near_tangent_crossovers(parts)) if parts is not None else (),
    )


def _scenario_margins(sc: Scenario, parts: LoopParts) -> LoopMargins:
    """Analytic margins; a loop without gain is the user's model, named in one line."""
    try:
        return margins(parts)
    except ValueError as exc:
        if "no gain" not in str(exc):
            raise
        if not np.any(parts.plant_b[[parts.phi_index, parts.p_index]]) and not np.any(
            parts.plant_a[[parts.phi_index, parts.p_index]] @ parts.plant_b
        ):
            what = (
                "[aircraft]: the aileron has no effect on bank or roll rate; "
                'set l_da_per_s2 (model "derivatives") or the aileron column of b (model "matrices") non-zero'
            )
        else:
            what = "[controller]: kp, ki_per_s and kd_s are all 0; give the PID a gain"
        raise ScenarioError(f"{sc.path}: {what} (the loop has no gain, so it has no margins)") from None


def near_tangent_crossovers(parts: LoopParts) -> list[tuple[float, float]]:
    """Local extrema of |L| (dB) within ±0.5 dB of 0 dB: (ω rad/s, dB)."""
    w = np.logspace(-2.0, 2.0, 4001)
    db = 20.0 * np.log10(np.abs(open_loop_response(parts, w)))
    inner = db[1:-1]
    ext = ((inner > db[:-2]) & (inner > db[2:])) | ((inner < db[:-2]) & (inner < db[2:]))
    idx = np.nonzero(ext & (np.abs(inner) < 0.5))[0] + 1
    return [(float(w[i]), float(db[i])) for i in idx]


def stale_readings(sc: Scenario) -> float | None:
    """Oldest reading age (s) at the ticks if it exceeds the PID's ``stale_after_s``, else None."""
    if not has_linear_model(sc):
        return None
    age = schedule_stats(sc).max_age_s
    return age if age > sc.controller.pid.stale_after_s else None


def margins_tables(rep: MarginsReport, *, handling: bool = True, delay: bool = True) -> list[Table]:
    """Tables of a report (see :func:`sim.report.margins_tables.margins_tables`)."""
    from rollrig.sim.report.margins_tables import margins_tables as _tables

    return _tables(rep, handling=handling, delay=delay)


def write_margin_plots(rep: MarginsReport, folder: Path) -> list[Path]:
    """PNG plots of a report into ``folder`` (see :func:`sim.report.margin_plots.write_margin_plots`)."""
    from rollrig.sim.report.margin_plots import write_margin_plots as _write

    return _write(rep, folder)


def run_margins_table(sc: Scenario, *, allow_code: bool = False) -> Table:
    """The margins table alone (analytic beside empirical), for ``rollrig run --margins``."""
    from rollrig.sim.report.margins_tables import margin_table

    rep = margins_report(sc, handling=False, allow_code=allow_code)
    t = margin_table(rep)
    t.notes.append(f"Margins computed in {rep.total_s:.2f} s.")
    return t
