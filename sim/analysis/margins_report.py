"""The margins report of one scenario: analytic and empirical margins, handling qualities.

:func:`margins_report` computes everything ``rollrig margins`` shows;
:func:`margins_tables` turns it into :class:`~sim.report.table.Table` objects
(terminal, CSV, JSON, Markdown) and :func:`write_margin_plots` into PNGs.

Requirements used for the ratings
---------------------------------
* Loop margins: MIL-F-9490D (1975) §3.1.3.6 — at least ±6 dB of gain margin
  and 45° of phase margin (REFERENCES.md "Loop margins"). The empirical gain
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
from rollrig.sim.report.table import Table, fmt_number
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
    MIL_F_9490D_GAIN_MARGIN_DB,
    MIL_F_9490D_PHASE_MARGIN_DEG,
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
        analytic = margins(parts)
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
    )


# ------------------------------------------------------------------ tables
def _f(x: float | None, digits: int = 3) -> str:
    return "—" if x is None else fmt_number(x, digits)


def _ok(flag: bool | None) -> str:
    return "—" if flag is None else ("pass" if flag else "FAIL")


def _bracket(value: float, tol: float, digits: int = 3, scale: float = 1.0) -> str:
    if math.isinf(tol):
        return f"≥ {fmt_number(value * scale, digits)}"
    return f"{fmt_number(value * scale, digits)} ± {tol * scale:.2g}"


def _db(x: float) -> float:
    return 20.0 * math.log10(x) if x > 0 else -math.inf


def _margin_table(rep: MarginsReport) -> Table:
    a, e = rep.analytic, rep.empirical
    sc = rep.scenario
    t = Table(
        title=f"{sc.title} — stability margins (loop broken at the aileron command)",
        columns=["figure", "analytic", "empirical", "requirement", "rating"],
    )
    t.records = []

    def row(
        key: str,
        label: str,
        av: float | None,
        a_txt: str,
        ev: float | None,
        e_txt: str,
        req: str = "",
        ok: bool | None = None,
        **extra: float | None,
    ) -> None:
        t.add(label, a_txt, e_txt, req, _ok(ok), style=None if ok is not False else "red")
        t.records.append(
            {"figure": key, "analytic": av, "empirical": ev, "requirement": req, "pass": ok, **extra}
        )

    # gain margin
    a_gm = a.upper_gain_margin_db if a is not None else None
    a_txt = (
        "—"
        if a is None
        else (
            f"{_f(a_gm)} @ {_f(a.phase_crossover_rad_s)} rad/s"
            if math.isfinite(a_gm)
            else "∞ (no phase crossover)"
        )
    )
    e_gm = e_tol = None
    e_txt = "—"
    if e is not None:
        g = e.gain
        e_gm = _db(g.value)
        if g.bounded:
            e_tol = 0.5 * (_db(g.fails_at) - _db(max(g.settles_at, 1e-300)))
            e_txt = f"{_f(e_gm)} ± {e_tol:.2g}"
        else:
            e_txt = f"≥ {_f(e_gm)}"
    gm_vals = [v for v in (a_gm, e_gm) if v is not None]
    ok = None
    if a is not None:
        ok = a.gain_margin_ok
    elif e_gm is not None:
        ok = e.nominal_settles and e_gm >= MIL_F_9490D_GAIN_MARGIN_DB
    row(
        "gain_margin_db",
        "gain margin, increase (dB)",
        a_gm,
        a_txt,
        e_gm,
        e_txt,
        f"≥ {MIL_F_9490D_GAIN_MARGIN_DB:g} dB",
        ok if gm_vals else None,
        phase_crossover_rad_s=None if a is None else a.phase_crossover_rad_s,
        empirical_tolerance_db=e_tol,
    )
    if a is not None:
        lo = a.lower_gain_margin_db
        row(
            "lower_gain_margin_db",
            "gain margin, reduction (dB)",
            lo,
            "none (−∞)" if math.isinf(lo) else _f(lo),
            None,
            "—",
            f"≤ −{MIL_F_9490D_GAIN_MARGIN_DB:g} dB",
            lo <= -MIL_F_9490D_GAIN_MARGIN_DB,
        )
        row(
            "phase_margin_deg",
            "phase margin (deg)",
            a.phase_margin_deg,
            f"{_f(a.phase_margin_deg)} @ {_f(a.gain_crossover_rad_s)} rad/s",
            None,
            "—",
            f"≥ {MIL_F_9490D_PHASE_MARGIN_DEG:g}°",
            a.phase_margin_ok,
            gain_crossover_rad_s=a.gain_crossover_rad_s,
        )
    # delay margin
    a_dm = None if a is None else a.delay_margin_s
    e_dm = None if e is None else e.delay.value
    row(
        "delay_margin_s",
        "delay margin (s)",
        a_dm,
        _f(a_dm),
        e_dm,
        "—" if e is None else _bracket(e.delay.value, e.delay.tolerance),
        empirical_tolerance_s=None if e is None else e.delay.tolerance,
    )
    cam = rep.delay.total_s
    if cam > 0:
        row(
            "delay_margin_camera_multiple",
            "delay margin / camera delay",
            None if a_dm is None else a_dm / cam,
            "—" if a_dm is None else f"{_f(a_dm / cam)}×",
            None if e_dm is None else e_dm / cam,
            "—" if e_dm is None else f"{_f(e_dm / cam)}×",
        )
    if a is not None:
        row(
            "disk_margin",
            "disk margin (balanced)",
            a.disk_alpha,
            f"α {_f(a.disk_alpha)}: ±{_f(a.disk_gain_margin_db)} dB, ±{_f(a.disk_phase_margin_deg)}°",
            None,
            "—",
            disk_gain_margin_db=a.disk_gain_margin_db,
            disk_phase_margin_deg=a.disk_phase_margin_deg,
        )
        row(
            "sensitivity_peak_db",
            "sensitivity peak (dB)",
            a.sensitivity_peak_db,
            _f(a.sensitivity_peak_db),
            None,
            "—",
        )
        row(
            "bandwidth_rad_s",
            "closed-loop bandwidth (rad/s)",
            a.bandwidth_rad_s,
            _f(a.bandwidth_rad_s),
            None,
            "—",
        )
    if e is not None and e.loss is not None:
        lo = e.loss
        row(
            "loss_margin",
            "frame-loss margin (probability)",
            None,
            "—",
            lo.value,
            _bracket(lo.value, lo.tolerance, 2),
            empirical_tolerance=lo.tolerance,
        )
    stable_a = None if a is None else a.closed_loop_stable
    stable_e = None if e is None else e.nominal_settles
    row(
        "closed_loop_stable",
        "closed loop stable",
        None,
        "—" if a is None else ("yes" if stable_a else "NO") + f" (Padé {a.pade_order})",
        None,
        "—" if e is None else ("settles" if stable_e else "does NOT settle"),
        "stable",
        None
        if stable_a is None and stable_e is None
        else bool((stable_a is not False) and (stable_e is not False)),
        analytic_stable=stable_a,
        empirical_settles=stable_e,
    )

    if a is not None:
        t.notes.append(
            f"Analytic: exact delays e^(-jωτ) on the frequency response; Padé order {a.pade_order} "
            "only for the closed-loop stability flag. Plant: "
            + (
                "roll-only model φ/δa"
                if "beta" not in sc.plant.state_names
                else "full lateral model, aileron input, rudder fixed (rudder loop open)"
            )
            + f" ({sc.plant.name}); servo lag; servo limits left out."
        )
    else:
        t.notes.append(f"Analytic: none — controller kind {sc.controller.kind!r} has no linear model here.")
    if e is not None:
        t.notes.append(
            f"Empirical: noise, losses and disturbances off; start at {math.degrees(e.excitation_rad):g}° "
            f"bank, command 0; settles = no divergence, never past the bank limit, last {e.window_s:.3g} s "
            "window's peak |bank| below the start and below the window before (bank and roll rate)."
        )
        loss_txt = (
            f"; frame losses on one random stream (seed {e.seed}), loss margin also needs "
            "|bank| within the settling band at the end"
            if e.loss is not None
            else ""
        )
        t.notes.append(
            f"Empirical search: {e.rounds} rounds × {e.candidates} candidates per margin in one batch, "
            f"{e.runs_simulated} runs of {e.duration_s:.3g} s at base step {e.base_step_s * 1e3:.3g} ms "
            f"(delay resolution){loss_txt}; ± is half the final bracket."
        )
    stale = stale_readings(sc)
    if stale is not None:
        t.notes.append(
            f"Caution: at some ticks the reading is {stale * 1e3:.0f} ms old, beyond the PID's "
            f"stale_after_s = {sc.controller.pid.stale_after_s:g} s: the PID then holds its output "
            "(not a linear law), so the analytic margins do not describe this loop; trust the empirical ones."
        )
    if rep.parts is not None:
        near = near_tangent_crossovers(rep.parts)
        if near:
            t.notes.append(
                "Caution: |L| has a peak or dip within 0.5 dB of 0 dB near "
                + ", ".join(f"{w:.3g} rad/s ({db:+.2f} dB)" for w, db in near)
                + "; a crossover (and a delay margin) set there is ill-conditioned: a model error of a "
                "fraction of a dB adds or removes it, so analytic and empirical may differ."
            )
    if a is not None and e is not None:
        t.notes.append(
            "Remaining gaps: the analytic model replaces frame and tick sampling by mean delays "
            "(reading age + half a tick; no aliasing or sinc gain loss) and ignores saturation."
        )
    return t


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


def _delay_table(rep: MarginsReport) -> Table:
    d = rep.delay
    sc = rep.scenario
    t = Table(title="camera effective delay (analytic model)", columns=["part", "delay (ms)"])
    t.records = []
    parts = [
        ("processing latency", d.latency_s),
        ("mean random extra latency", d.latency_jitter_mean_s),
        ("mean frame hold at the controller ticks", d.frame_hold_s),
        ("exposure mid-point", d.exposure_mid_s),
        ("camera total", d.total_s),
        ("controller sample hold (half a tick)", 0.5 / sc.controller.rate_hz),
    ]
    if rep.parts is not None and rep.parts.derivative_delay_s > 0 and rep.parts.kd_s != 0:
        parts.append(("D term: extra delay of the frame difference", rep.parts.derivative_delay_s))
    for name, v in parts:
        t.add(name, fmt_number(v * 1e3))
        t.records.append({"part": name, "delay_s": v})
    return t


def _level(level: Level | None) -> str:
    return "—" if level is None else str(level)


def _handling_table(rep: MarginsReport) -> Table:
    sc = rep.scenario
    t = Table(
        title=f"handling qualities — MIL-F-8785C, Class {rep.aircraft_class}, Category {rep.category}",
        columns=["figure", "value", "source", "rating"],
    )
    t.records = []

    def row(key: str, label: str, value: float | None, text: str, source: str, level: Level | None) -> None:
        style = None if level is None or level == Level.LEVEL_1 else "yellow"
        t.add(label, text, source, _level(level), style=style)
        t.records.append(
            {"figure": key, "value": value, "source": source, "level": None if level is None else int(level)}
        )

    m, r = rep.modes, rep.mode_ratings
    if m is not None and r is not None:
        row(
            "roll_tau_s",
            "roll-mode time constant (s)",
            m.roll_tau_s,
            _f(m.roll_tau_s),
            "Table VII",
            r.roll_mode,
        )
        if m.spiral_lambda is not None:
            if m.spiral_lambda > 0:
                val = m.spiral_time_to_double_s
                text = f"diverges, doubles in {_f(val)} s"
            else:
                val = m.spiral_time_to_half_s
                text = f"stable, halves in {_f(val)} s"
            row("spiral_time_s", "spiral mode", val, text, "Table VIII (1980)", r.spiral)
        if m.dutch_zeta is not None and m.dutch_wn is not None:
            row(
                "dutch_roll",
                "Dutch roll ζ, ωn (rad/s), ζωn",
                m.dutch_zeta,
                f"{_f(m.dutch_zeta)}, {_f(m.dutch_wn)}, {_f(m.dutch_zeta * m.dutch_wn)}",
                "Table VI",
                r.dutch_roll,
            )
    else:
        t.notes.append(f"Airframe modes not rated: {rep.mode_error or 'not computed'}")
    if rep.time_to_bank_s is not None:
        tb = rep.time_to_bank_s
        row(
            "time_to_bank_s",
            f"closed loop: time to bank {rep.bank_change_deg:g}° (s)",
            tb,
            "not reached" if math.isinf(tb) else _f(tb),
            "Table IXa",
            rep.roll_performance,
        )
        t.notes.append(
            f"Roll performance: noise-free copy, from wings level, step command to "
            f"{1.05 * rep.bank_change_deg:g}° (1.05 × the angle) at t = 0; time until the bank first "
            f"reaches {rep.bank_change_deg:g}°. Servo limits and camera delay included."
        )
        if rep.roll_performance is None:
            t.notes.append("Table IXa covers Class I only: no rating for this class.")
    t.notes.append(f"Airframe: {sc.plant.name} (bare airframe, controls fixed).")
    return t


def margins_tables(rep: MarginsReport, *, handling: bool = True, delay: bool = True) -> list[Table]:
    """Tables of a report: margins, camera delay budget, handling qualities."""
    tables = [_margin_table(rep)]
    if delay:
        tables.append(_delay_table(rep))
    if handling and (rep.modes is not None or rep.time_to_bank_s is not None or rep.mode_error):
        tables.append(_handling_table(rep))
    times = ", ".join(f"{k} {v:.2f} s" for k, v in rep.timings_s.items())
    tables[-1].notes.append(f"Computed in {rep.total_s:.2f} s ({times}).")
    return tables


def run_margins_table(sc: Scenario, *, allow_code: bool = False) -> Table:
    """The margins table alone (analytic beside empirical), for ``rollrig run --margins``."""
    rep = margins_report(sc, handling=False, allow_code=allow_code)
    t = _margin_table(rep)
    t.notes.append(f"Margins computed in {rep.total_s:.2f} s.")
    return t


# ------------------------------------------------------------------ plots
def write_margin_plots(rep: MarginsReport, folder: Path) -> list[Path]:
    """PNG plots of a report into ``folder``: Bode/Nichols/Nyquist when a linear model exists.

    Returns
    -------
    list of pathlib.Path
        Files written.
    """
    from rollrig.sim.report.margin_plots import plot_margins

    out = []
    if rep.parts is not None:
        out.append(plot_margins(rep.parts, Path(folder) / "margins.png"))
    return out
