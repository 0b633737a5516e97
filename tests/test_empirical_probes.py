"""Empirical margin probes (issue 8): the scenario's own grid, servo limits that must not
bind, and the camera-delay margin of a loop that takes its derivative from the gyro.

Second method throughout: the analytic margins of the same loop (exact delays).
"""

from __future__ import annotations

import numpy as np
from numpy.testing import assert_allclose
from rollrig.sim.analysis.empirical import EmpiricalSettings, empirical_margins
from rollrig.sim.analysis.linear_loop import margins
from rollrig.sim.analysis.loop_from_scenario import loop_parts_from_scenario
from rollrig.sim.scenario import parse_scenario
from test_empirical_margins import A1, A2, LIGHT, UAV, doc


def test_search_runs_on_the_scenarios_grid_and_says_when_a_finer_one_moves_frames() -> None:
    sc = parse_scenario(doc(model=LIGHT, latency=0.05, frame_hz=30.0, pid={"kp": 0.5, "ki_per_s": 0.1}))
    quick = dict(loss=False, rounds=1, candidates=4, window_s=3.0)
    e = empirical_margins(sc, EmpiricalSettings(**quick))
    assert e.base_step_s == sc.run.base_step_s and not e.frames_moved
    # 30 Hz frames on 10 ms are captured at 0/30/70 ms; on 5 ms at 0/35/65 ms: a different loop
    fine = empirical_margins(sc, EmpiricalSettings(base_step_s=0.005, **quick))
    assert fine.base_step_s == 0.005 and fine.frames_moved
    # 25 Hz frames (40 ms) land on the same instants on either grid
    sc25 = parse_scenario(doc(model=LIGHT, latency=0.05, frame_hz=25.0, pid={"kp": 0.5, "ki_per_s": 0.1}))
    assert not empirical_margins(sc25, EmpiricalSettings(base_step_s=0.005, **quick)).frames_moved


def test_large_gain_margin_not_capped_by_servo_limits() -> None:
    # P loop with a 66x gain margin and a 2° servo: starting every candidate at 1° would ask
    # the servo for up to 64·0.05·1° = 3.2° (and its 30°/s rate limit) at once; the saturated
    # loop then looks 3.5 dB more stable than it is. The start is scaled by the round's
    # largest gain, so the servo stays linear and the answer matches the analytic 36.26 dB.
    d = doc(
        model={"model": "roll-only", "roll_damping_per_s": A1, "aileron_power_per_s2": A2},
        latency=0.05,
        frame_hz=50.0,
        pid={"kp": 0.05},
        ctrl_hz=100.0,
        servo_tau=0.05,
        base_step=0.005,
        actuator_extra={"limit_deg": 2.0, "rate_limit_deg_s": 30.0},
    )
    sc = parse_scenario(d)
    m = margins(loop_parts_from_scenario(sc))
    assert m.upper_gain_margin_db > 30.0
    e = empirical_margins(
        sc, EmpiricalSettings(loss=False, camera=False, oscillation_rad_s=m.phase_crossover_rad_s)
    )
    assert e.gain.bounded and not e.gain.saturation_limited
    assert_allclose(e.gain_margin_db, m.upper_gain_margin_db, atol=0.3)


def _gyro_pd_doc() -> dict:
    """UAV flown by a PD whose derivative comes from a 100 Hz gyro, camera 30 Hz, 0.1 s late."""
    return doc(
        model=UAV,
        latency=0.1,
        frame_hz=30.0,
        pid={"kp": 0.5, "kd_s": 0.2, "derivative_filter_hz": 8.0, "derivative": "gyro", "stale_after_s": 2.0},
        sensor_extra={"gyro": {"rate_hz": 100.0}},
    )


def test_gyro_derivative_loop_reports_camera_delay_margin_both_ways() -> None:
    # UAV, PD with the derivative from a 100 Hz gyro: the loop tolerates far more camera delay
    # (about 0.94 s) than delay at the aileron command (about 0.26 s).
    sc = parse_scenario(_gyro_pd_doc())
    m = margins(loop_parts_from_scenario(sc))
    assert m.camera_delay_margin_s > 3.0 * m.delay_margin_s
    e = empirical_margins(
        sc,
        EmpiricalSettings(
            loss=False, oscillation_rad_s=min(m.gain_crossover_rad_s, m.camera_delay_margin_rad_s)
        ),
    )
    assert e.camera is not None and e.camera.bounded
    # analytic (|C| = |1 + G|) against simulated (camera latency raised), within 5 %
    assert_allclose(e.camera.value, m.camera_delay_margin_s, rtol=0.05)
    assert e.camera.value > 2.5 * e.delay.value
    assert np.isfinite(e.delay.value)


def test_report_shows_both_delay_margins_for_a_gyro_loop() -> None:
    from rollrig.sim.analysis.margins_report import margins_report
    from rollrig.sim.report.margins_tables import margins_tables

    rep = margins_report(parse_scenario(_gyro_pd_doc()), empirical=False, handling=False)
    tables = margins_tables(rep, handling=False)
    rows = {r["figure"]: r for r in tables[0].records}
    assert_allclose(rows["camera_delay_margin_s"]["analytic"], rep.analytic.camera_delay_margin_s)
    assert rows["camera_delay_margin_s"]["analytic"] > 3 * rows["delay_margin_s"]["analytic"]
    assert any("camera-delay margin" in n for n in tables[0].notes)
    # every crossover is listed in the second table
    recs = tables[1].records
    assert [r["crossover"] for r in recs].count("gain") == len(rep.analytic.gain_crossovers_rad_s)
    # phase crossovers beyond ±40 dB (the delay wraps the phase) are counted in one summary row
    phase = [r for r in recs if r["crossover"] == "phase"]
    shown = sum(1 for r in phase if r["omega_rad_s"] is not None)
    more = sum(r.get("more_count", 0) for r in phase)
    assert shown + more == len(rep.analytic.phase_crossovers_rad_s)
