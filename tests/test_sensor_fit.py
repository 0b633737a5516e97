"""Round trip: logs made by our own camera model are fitted back to its parameters.

Each log is one run of a closed loop flying bank changes, made with
:func:`sim.sensor_log.make_log`; the fit must recover the configuration
within the issue's tolerances: latency within half a base step, bias within
0.1°, scale within 1 %, noise std within 10 %, loss rate within 20 %
relative, mean burst length within 25 %. Seeds are fixed; the stated
standard errors show the margins (noted per configuration).
"""

from __future__ import annotations

import copy
import math

import numpy as np
import pytest
from numpy.testing import assert_allclose
from rollrig.sensors.fit import LogProblem, fit_sensor
from rollrig.sim.report.fit_report import sensor_toml
from rollrig.sim.scenario import parse_scenario
from rollrig.sim.section import Section
from rollrig.sim.sensor_log import make_log, read_log, write_log
from rollrig.sim.sensor_section import parse_sensor

_BANKS = [0, 25, -20, 10, -25, 15, 0, -15, 25, -10, 20, -25, 5, 25, -20, 10, -5, 20, -25, 15]


def _doc(sensor: dict, duration: float, dt: float, seed: int = 5) -> dict:
    times = np.arange(len(_BANKS) * 4) * (duration / (len(_BANKS) * 4))
    return {
        "aircraft": {"model": "light-single"},
        "actuator": {"time_constant_s": 0.08, "limit_deg": 20.0, "rate_limit_deg_s": 60.0},
        "sensor": copy.deepcopy(sensor),
        "controller": {"kind": "pid", "rate_hz": 50.0, "kp": 0.6, "ki_per_s": 0.1, "kd_s": 0.08},
        "command": {"profile": "sequence", "times_s": times.tolist(), "banks_deg": (_BANKS * 4)},
        "run": {"duration_s": duration, "base_step_s": dt, "seed": seed, "runs": 1},
    }


# name: (sensor section, duration s, base step s, expected effective latency s)
CONFIGS = {
    "independent-losses": (
        {
            "frame_rate_hz": 30.0,
            "latency_s": 0.05,
            "noise_deg": 0.3,
            "bias_deg": 0.8,
            "scale": 0.98,
            "dropout_prob": 0.05,
            "range_deg": 80.0,
        },
        120.0,
        0.01,
        0.05,
    ),
    "bursty-glare": (
        {
            "frame_rate_hz": 25.0,
            "latency_s": 0.12,
            "noise_deg": 0.5,
            "bias_deg": -1.5,
            "scale": 1.02,
            "range_deg": 80.0,
            "bursts": {"loss_rate": 0.15, "mean_burst_frames": 6.0},
        },
        400.0,
        0.01,
        0.12,
    ),
    "classifier-best": (
        {
            "frame_rate_hz": 20.0,
            "latency_s": 0.08,
            "noise_deg": 0.8,
            "bias_deg": 0.5,
            "range_deg": 80.0,
            "dropout_prob": 0.08,
            "classifier": {"class_width_deg": 2.0, "sharpness": 4.0, "decode": "best"},
        },
        150.0,
        0.01,
        0.08,
    ),
    "wander-outliers": (
        {
            "frame_rate_hz": 30.0,
            "latency_s": 0.06,
            "noise_deg": 0.2,
            "wander_deg": 0.3,
            "wander_time_s": 2.0,
            "bias_deg": 2.0,
            "scale": 1.04,
            "outlier_prob": 0.01,
            "outlier_deg": 20.0,
            "range_deg": 80.0,
        },
        300.0,
        0.01,
        0.06,
    ),
    "quantised-jitter-exposure": (
        {
            "frame_rate_hz": 20.0,
            "latency_s": 0.1,
            "jitter_s": 0.004,
            "exposure_s": 0.02,
            "noise_deg": 0.4,
            "quantization_deg": 0.5,
            "bias_deg": -0.7,
            "scale": 1.01,
            "dropout_prob": 0.1,
            "range_deg": 80.0,
        },
        120.0,
        0.005,
        0.11,
    ),
}


@pytest.fixture(scope="module")
def fits():
    out = {}
    for i, (name, (sensor, duration, dt, _)) in enumerate(CONFIGS.items()):
        # a different seed per configuration, so their random draws are independent
        log = make_log(parse_scenario(_doc(sensor, duration, dt, seed=11 + i), file=f"{name}.toml"))
        out[name] = (log, fit_sensor(log.t, log.reference, log.reading, log.valid))
    return out


@pytest.mark.parametrize("name", list(CONFIGS))
def test_round_trip(fits, name):
    sensor, duration, dt, latency = CONFIGS[name]
    log, fit = fits[name]
    deg = math.degrees
    assert abs(fit["latency_s"] - latency) <= dt / 2
    assert abs(deg(fit["bias_rad"]) - sensor.get("bias_deg", 0.0)) <= 0.1
    assert_allclose(fit["scale"], sensor.get("scale", 1.0), rtol=0.01)
    assert_allclose(fit["frame_rate_hz"], sensor["frame_rate_hz"], rtol=0.01)
    assert_allclose(deg(fit["noise_rad"]), sensor["noise_deg"], rtol=0.10)
    if "bursts" in sensor:
        b = sensor["bursts"]
        assert fit.bursty
        assert_allclose(fit["loss_rate"], b["loss_rate"], rtol=0.20)
        assert_allclose(fit["mean_burst_frames"], b["mean_burst_frames"], rtol=0.25)
    elif sensor.get("dropout_prob", 0) > 0:
        p = sensor["dropout_prob"]
        assert not fit.bursty
        assert_allclose(fit["loss_rate"], p, rtol=0.20)
        # independent losses: bursts geometric with mean 1/(1 − p) (Gilbert–Elliott with r = 1 − p)
        assert_allclose(fit["mean_burst_frames"], 1 / (1 - p), rtol=0.25)
    else:
        assert fit["loss_rate"] == 0.0
    if "classifier" in sensor:
        assert_allclose(deg(fit["quantization_rad"]), sensor["classifier"]["class_width_deg"], rtol=0.01)
    if "quantization_deg" in sensor:
        assert_allclose(deg(fit["quantization_rad"]), sensor["quantization_deg"], rtol=0.01)
    if "wander_deg" in sensor:
        # looser: a 300 s log holds ~150 correlation times; SE ≈ 6 % of σ, 20 % of τ
        assert_allclose(deg(fit["wander_rad"]), sensor["wander_deg"], rtol=0.25)
        assert_allclose(fit["wander_time_s"], sensor["wander_time_s"], rtol=0.5)
    if "outlier_prob" in sensor:
        assert_allclose(fit["outlier_prob"], sensor["outlier_prob"], rtol=0.3)  # ~90 outliers: SE 11 %
        assert_allclose(deg(fit["outlier_rad"]), sensor["outlier_deg"], rtol=0.15)
    if "jitter_s" in sensor:
        # time stamps snap to the base grid: adds dt²/12 to the jitter variance
        assert_allclose(fit["jitter_s"], math.hypot(sensor["jitter_s"], dt / math.sqrt(12)), rtol=0.15)
    # the written section is a valid [sensor] section
    import tomllib

    doc = tomllib.loads(sensor_toml(fit, name))
    parse_sensor(Section(doc["sensor"], file="fit.toml", path="sensor"), base_step_s=dt)


def test_log_file_round_trip(tmp_path, fits):
    log, fit = fits["bursty-glare"]
    write_log(tmp_path / "log.csv", log)
    back = read_log(tmp_path / "log.csv")
    assert_allclose(back.t, log.t, atol=1e-6)
    ok = log.valid
    assert_allclose(back.reading[ok], log.reading[ok], atol=1e-7)
    assert np.all(np.isnan(back.reading[~ok])) and np.array_equal(back.valid, log.valid)


@pytest.mark.parametrize(
    "change, message",
    [
        (lambda t, r, y, v: (t[:40], r[:40], y[:40], v[:40]), "too short"),
        (lambda t, r, y, v: (t[::-1].copy(), r, y, v), "backwards"),
        (lambda t, r, y, v: (t, r, y, np.zeros_like(v)), "invalid"),
        (
            lambda t, r, y, v: (
                t,
                np.where(np.arange(t.size) < t.size // 2, r, np.nan),
                np.where(np.arange(t.size) >= t.size // 2, y, np.nan),
                v,
            ),
            "overlap",
        ),
    ],
)
def test_refuses_unusable_logs(fits, change, message):
    log, _ = fits["independent-losses"]
    with pytest.raises(LogProblem, match=message):
        fit_sensor(*change(log.t, log.reference, log.reading, log.valid))


def test_cli_fits_the_bundled_example(tmp_path, capsys):
    import json
    from pathlib import Path

    from rollrig.sim.cli.main import main

    log = Path(__file__).parent.parent / "scenarios" / "logs" / "crop-duster-camera.csv"
    out = tmp_path / "fit"
    assert main(["fit-sensor", str(log), "--format", "json", "--out", str(out)]) == 0
    rows = {r["quantity"]: r for r in json.loads(capsys.readouterr().out)[0]["rows"]}
    # the scenario that made it: latency 0.08 s, bias 1.2°, scale 1.03, bursts 8 % x 5 frames
    assert abs(rows["latency_s"]["estimate"] - 0.08) <= 0.0025  # half the 5 ms base step
    assert abs(rows["bias_deg"]["estimate"] - 1.2) <= 3 * rows["bias_deg"]["se"] + 0.05
    assert_allclose(rows["scale"]["estimate"], 1.03, rtol=0.01)
    assert_allclose(rows["loss_rate"]["estimate"], 0.08, rtol=0.2)
    assert {p.name for p in out.iterdir()} >= {"sensor.toml", "fit.png", "manifest.json"}


def test_cli_refuses_bad_logs_with_one_line(tmp_path, capsys):
    from rollrig.sim.cli.main import main

    short = tmp_path / "short.csv"
    short.write_text("t_s,reference_deg,reading_deg\n" + "".join(f"{i * 0.1},0,0\n" for i in range(10)))
    assert main(["fit-sensor", str(short), "--no-files"]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "too short" in err and "short.csv" in err
    nocol = tmp_path / "nocol.csv"
    nocol.write_text("time,ref,cam\n0,0,0\n")
    assert main(["fit-sensor", str(nocol), "--no-files"]) == 2
    err = capsys.readouterr().err
    assert "'t_s' not found" in err and "--time-col" in err


# ------------------------------------------------------------ degenerate logs (issue 9, item 8)
def _csv(path, t, ref_deg, read_deg):
    rows = "".join(
        f"{a!r},{b!r},{c!r}\n"
        for a, b, c in zip(*(np.asarray(x, float).tolist() for x in (t, ref_deg, read_deg)), strict=True)
    )
    path.write_text("t_s,reference_deg,reading_deg\n" + rows)
    return path


def _swing(n: int = 600):
    t = np.arange(n) * (1 / 30)
    return t, 20 * np.sin(0.7 * t) + 5 * np.sin(2.3 * t)


def test_frozen_reading_is_refused_with_one_line(tmp_path, capsys):
    from rollrig.sim.cli.main import main

    t, ref = _swing()
    log = _csv(tmp_path / "frozen.csv", t, ref, np.full(t.size, 3.5))
    assert main(["fit-sensor", str(log), "--no-files"]) == 2
    captured = capsys.readouterr()
    assert captured.err.count("\n") == 1 and "never changes" in captured.err and "3.5" in captured.err


def test_reading_that_does_not_follow_the_reference_is_refused():
    t, ref = _swing()
    noise = np.random.default_rng(4).normal(0, 10, t.size)  # unrelated to the reference
    with pytest.raises(LogProblem, match="scale"):
        fit_sensor(t, np.radians(ref), np.radians(noise))


def test_reading_equal_to_reference_has_no_outliers():
    t, ref = _swing()
    fit = fit_sensor(t, np.radians(ref), np.radians(ref))
    assert fit["outlier_prob"] == 0.0 and not fit.outlier.any()
    assert abs(fit["latency_s"]) < 1e-3 and abs(fit["scale"] - 1) < 1e-6
    assert math.degrees(fit["noise_rad"]) < 1e-3  # no noise


def test_row_numbers_count_like_the_csv_reader(tmp_path):
    """Header = row 1, first data row = row 2, in the reader's and the fit's messages alike."""
    t, ref = _swing(100)
    t = t.copy()
    t[59] = t[57]  # data index 59 -> file line 61 goes backwards
    log = read_log(_csv(tmp_path / "back.csv", t, ref, ref))
    with pytest.raises(LogProblem, match="backwards at row 61"):
        fit_sensor(log.t, log.reference, log.reading, log.valid)
    lines = (tmp_path / "back.csv").read_text().splitlines()
    assert lines[60].startswith(repr(float(t[59])))  # row 61 is the file's 61st line
