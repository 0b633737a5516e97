"""Tables of the margins report (``rollrig margins``): margins, crossovers, delay budget, handling.

Presentation only: the figures come from :mod:`sim.analysis.margins_report`
(a scenario) or :func:`sim.analysis.linear_loop.margins` (any loop, including
a python-control system or frequency-response data). Each table carries
machine-readable ``records`` (numbers, ``None`` where a figure does not apply)
for the JSON rendering.
"""

from __future__ import annotations

import math
from typing import Any

from rollrig.sim.analysis.handling import Level
from rollrig.sim.analysis.linear_loop import (
    MIL_F_9490D_GAIN_MARGIN_DB,
    MIL_F_9490D_PHASE_MARGIN_DEG,
    LoopMargins,
)
from rollrig.sim.report import CAUTION
from rollrig.sim.report.table import Table, fmt_number

__all__ = ["margin_table", "crossover_table", "loop_tables", "margins_tables"]


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


def _lower_text(a: LoopMargins) -> str:
    lo = a.lower_gain_margin_db
    if math.isinf(lo):
        return "none (−∞)"
    w = _lower_crossover(a)
    return f"{_f(lo)} @ ω = 0 (L(0) < 0)" if w == 0.0 else f"{_f(lo)} @ {_f(w)} rad/s"


def _crossover_of(a: LoopMargins, gm_db: float) -> float | None:
    """Frequency of the phase crossover with gain margin ``gm_db`` (rad/s)."""
    for w, g in zip(a.phase_crossovers_rad_s, a.phase_crossover_margins_db, strict=True):
        if g == gm_db:
            return w
    return None


def _lower_crossover(a: LoopMargins) -> float | None:
    """Frequency of the phase crossover giving the lower gain margin (rad/s)."""
    for w, g in zip(a.phase_crossovers_rad_s, a.phase_crossover_margins_db, strict=True):
        if g == a.lower_gain_margin_db:
            return w
    return None


#: Phase crossovers whose gain margin exceeds this (dB) are summarised in one row.
_FAR_DB = 40.0


def crossover_table(a: LoopMargins) -> Table:
    """Every crossover of the loop: phase crossovers with their gain margins, gain crossovers
    with their phase and delay margins (python-control's ``returnall``).

    With exact delays the phase keeps falling, so phase crossovers repeat every
    ``2π/τ`` up to the top of the grid with ever larger gain margins; those beyond
    ±40 dB are summarised in one row (count and range; all are in ``LoopMargins``).
    """
    t = Table(title="every crossover", columns=["crossover", "ω (rad/s)", "margin there"])
    t.records = []
    far = []
    for w, g in zip(a.phase_crossovers_rad_s, a.phase_crossover_margins_db, strict=True):
        if abs(g) > _FAR_DB:
            far.append(w)
            continue
        where = "ω = 0 (L(0) real, negative)" if w == 0.0 else _f(w, 4)
        t.add("phase (∠L = −180°)", where, f"gain margin {_f(g)} dB")
        t.records.append({"crossover": "phase", "omega_rad_s": w, "gain_margin_db": g})
    if far:
        t.add(
            "phase (∠L = −180°)",
            f"{len(far)} more, {_f(min(far), 4)} … {_f(max(far), 4)}",
            f"gain margins beyond ±{_FAR_DB:g} dB (a delay wraps the phase every 2π/τ)",
        )
        t.records.append(
            {
                "crossover": "phase",
                "omega_rad_s": None,
                "gain_margin_db": None,
                "more_count": len(far),
                "more_from_rad_s": min(far),
                "more_to_rad_s": max(far),
            }
        )
    for w, pm, dm in zip(
        a.gain_crossovers_rad_s, a.gain_crossover_margins_deg, a.gain_crossover_delay_margins_s, strict=True
    ):
        t.add("gain (|L| = 1)", _f(w, 4), f"phase margin {_f(pm)}°, delay margin {_f(dm)} s")
        t.records.append(
            {"crossover": "gain", "omega_rad_s": w, "phase_margin_deg": pm, "delay_margin_s": dm}
        )
    if not t.rows:
        t.add("none", "—", "|L| never crosses 1 and ∠L never crosses −180°")
    lo, hi = a.omega_range_rad_s
    t.notes.append(f"Searched {lo:.3g} … {hi:.3g} rad/s ({a.source}).")
    return t


def loop_tables(a: LoopMargins, name: str) -> list[Table]:
    """Margins of a loop given without a scenario (python-control system or frequency-response data)."""
    t = Table(title=f"{name} — stability margins", columns=["figure", "value", "requirement", "rating"])
    t.records = []

    def row(
        key: str, label: str, value: float | None, text: str, req: str = "", ok: bool | None = None, **extra
    ):
        t.add(label, text, req, _ok(ok), style=None if ok is not False else "red")
        t.records.append({"figure": key, "value": value, "requirement": req, "pass": ok, **extra})

    up = a.upper_gain_margin_db
    row(
        "gain_margin_db",
        "gain margin, increase (dB)",
        up if math.isfinite(up) else None,
        "∞ (no phase crossover)" if math.isinf(up) else f"{_f(up)}",
        f"≥ {MIL_F_9490D_GAIN_MARGIN_DB:g} dB",
        a.gain_margin_ok,
    )
    lo = a.lower_gain_margin_db
    row(
        "lower_gain_margin_db",
        "gain margin, reduction (dB)",
        lo if math.isfinite(lo) else None,
        _lower_text(a),
        f"≤ −{MIL_F_9490D_GAIN_MARGIN_DB:g} dB",
        lo <= -MIL_F_9490D_GAIN_MARGIN_DB,
        phase_crossover_rad_s=_lower_crossover(a),
    )
    pm = a.phase_margin_deg
    row(
        "phase_margin_deg",
        "phase margin (deg)",
        pm if math.isfinite(pm) else None,
        "∞ (no gain crossover)" if math.isinf(pm) else f"{_f(pm)} @ {_f(a.gain_crossover_rad_s)} rad/s",
        f"≥ {MIL_F_9490D_PHASE_MARGIN_DEG:g}°",
        a.phase_margin_ok,
        gain_crossover_rad_s=a.gain_crossover_rad_s if math.isfinite(pm) else None,
    )
    dm = a.delay_margin_s
    row("delay_margin_s", "delay margin (s)", dm if math.isfinite(dm) else None, _f(dm))
    row(
        "stability_margin",
        "stability margin min |1+L|",
        a.stability_margin,
        f"{_f(a.stability_margin)} @ {_f(a.stability_margin_rad_s)} rad/s",
        stability_margin_rad_s=a.stability_margin_rad_s,
        sensitivity_peak_db=a.sensitivity_peak_db,
    )
    row(
        "disk_margin",
        "disk margin (balanced)",
        a.disk_alpha,
        f"α {_f(a.disk_alpha)}: ±{_f(a.disk_gain_margin_db)} dB, ±{_f(a.disk_phase_margin_deg)}° "
        f"@ {_f(a.disk_frequency_rad_s)} rad/s",
        disk_frequency_rad_s=a.disk_frequency_rad_s,
    )
    bw = a.bandwidth_rad_s
    row("bandwidth_rad_s", "bandwidth of L/(1+L) (rad/s)", bw if math.isfinite(bw) else None, _f(bw))
    stable = a.closed_loop_stable
    row(
        "closed_loop_stable",
        "closed loop stable",
        None,
        {True: "yes", False: "NO", None: "not known from data"}[stable],
        "stable",
        stable,
        analytic_stable=stable,
    )
    t.notes.append(f"Loop: {a.source}, unity negative feedback; bandwidth from L/(1+L).")
    t.notes.extend(a.notes)
    t.notes.append(CAUTION)
    return [t, crossover_table(a)]


def margin_table(rep: Any) -> Table:
    """Analytic beside empirical margins of a scenario's report, with MIL-F-9490D ratings."""
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
            f"{_f(a_gm)} @ {_f(_crossover_of(a, a_gm))} rad/s"
            if math.isfinite(a_gm)
            else "∞ (no phase crossover)"
        )
    )
    e_gm = e_tol = None
    e_txt = "—"
    if e is not None:
        g = e.gain
        e_gm = _db(g.value)
        if g.bounded and g.saturation_limited:
            e_gm = _db(g.settles_at)
            e_txt = f"≥ {_f(e_gm)} (limited by actuator saturation)"
        elif g.bounded:
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
        phase_crossover_rad_s=None if a is None else _crossover_of(a, a_gm),
        empirical_tolerance_db=e_tol,
        empirical_saturation_limited=None if e is None else e.gain.saturation_limited,
    )
    if a is not None:
        lo = a.lower_gain_margin_db
        row(
            "lower_gain_margin_db",
            "gain margin, reduction (dB)",
            lo,
            _lower_text(a),
            None,
            "—",
            f"≤ −{MIL_F_9490D_GAIN_MARGIN_DB:g} dB",
            lo <= -MIL_F_9490D_GAIN_MARGIN_DB,
            phase_crossover_rad_s=_lower_crossover(a),
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
    gyro_path = rep.parts is not None and rep.parts.derivative_source == "gyro" and rep.parts.kd_s != 0.0
    if gyro_path or (e is not None and e.camera is not None):
        a_cm = None if a is None else a.camera_delay_margin_s
        ec = None if e is None else e.camera
        row(
            "camera_delay_margin_s",
            "camera-delay margin (s)",
            a_cm,
            _f(a_cm),
            None if ec is None else ec.value,
            "—" if ec is None else _bracket(ec.value, ec.tolerance),
            empirical_tolerance_s=None if ec is None else ec.tolerance,
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
            f"α {_f(a.disk_alpha)}: ±{_f(a.disk_gain_margin_db)} dB, ±{_f(a.disk_phase_margin_deg)}° "
            f"@ {_f(a.disk_frequency_rad_s)} rad/s",
            None,
            "—",
            disk_frequency_rad_s=a.disk_frequency_rad_s,
            disk_gain_margin_db=a.disk_gain_margin_db,
            disk_phase_margin_deg=a.disk_phase_margin_deg,
        )
        row(
            "stability_margin",
            "stability margin min |1+L|",
            a.stability_margin,
            f"{_f(a.stability_margin)} @ {_f(a.stability_margin_rad_s)} rad/s "
            f"(sensitivity peak {_f(a.sensitivity_peak_db)} dB)",
            None,
            "—",
            stability_margin_rad_s=a.stability_margin_rad_s,
            sensitivity_peak_db=a.sensitivity_peak_db,
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
    stale = rep.stale_reading_s
    if stale is not None:
        t.notes.append(
            f"Caution: at some ticks the reading is {stale * 1e3:.0f} ms old, beyond the PID's "
            f"stale_after_s = {sc.controller.pid.stale_after_s:g} s: the PID then holds its output "
            "(not a linear law), so the analytic margins do not describe this loop; trust the empirical ones."
        )
    if rep.parts is not None:
        near = rep.near_tangent
        if near:
            t.notes.append(
                "Caution: |L| has a peak or dip within 0.5 dB of 0 dB near "
                + ", ".join(f"{w:.3g} rad/s ({db:+.2f} dB)" for w, db in near)
                + "; a crossover (and a delay margin) set there is ill-conditioned: a model error of a "
                "fraction of a dB adds or removes it, so analytic and empirical may differ."
            )
    if gyro_path:
        t.notes.append(
            "Derivative from the gyro: the delay margin is extra delay at the aileron command (every "
            "path); the camera-delay margin is extra delay of the camera reading alone (the gyro path "
            "keeps its own), found from |C| = |1 + G| (analytic) and by raising the camera latency "
            "(empirical)."
        )
    if e is not None and e.gain.saturation_limited:
        t.notes.append(
            "Empirical gain margin: the first failing gain drove the servo to a position or rate limit "
            "in the first window, so the failure may be the limit's; the loop holds at least the gain shown."
        )
    if e is not None and e.frames_moved:
        t.notes.append(
            f"Empirical search on a finer base step ({e.base_step_s * 1e3:.3g} ms) than the scenario's: "
            "frame capture instants moved, so it measured a slightly different loop."
        )
    if a is not None:
        t.notes.extend(a.notes)
    if a is not None and e is not None:
        t.notes.append(
            "Remaining gaps: the analytic model replaces frame and tick sampling by mean delays "
            "(reading age + half a tick; no aliasing or sinc gain loss) and ignores saturation."
        )
    t.notes.append(CAUTION)
    return t


def _delay_table(rep: Any) -> Table:
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


def _handling_table(rep: Any) -> Table:
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


def margins_tables(rep: Any, *, handling: bool = True, delay: bool = True) -> list[Table]:
    """Tables of a report: margins, camera delay budget, handling qualities."""
    tables = [margin_table(rep)]
    if rep.analytic is not None:
        tables.insert(1, crossover_table(rep.analytic))
    if delay:
        tables.append(_delay_table(rep))
    if handling and (rep.modes is not None or rep.time_to_bank_s is not None or rep.mode_error):
        tables.append(_handling_table(rep))
    times = ", ".join(f"{k} {v:.2f} s" for k, v in rep.timings_s.items())
    tables[-1].notes.append(f"Computed in {rep.total_s:.2f} s ({times}).")
    return tables
