"""The camera reader's timing, delivery buffer, per-run parameters and streams."""

from __future__ import annotations

import math

import numpy as np
import pytest
from numpy.testing import assert_allclose, assert_array_equal
from rollrig.sensors.camera import BurstConfig, CameraConfig, CameraReader, ClassifierConfig, frame_draws
from rollrig.sensors.timing import plan_frames
from rollrig.sim.errors import ScenarioError
from rollrig.sim.section import Section
from rollrig.sim.seeding import run_generators
from rollrig.sim.sensor_section import parse_sensor


def _rng_for(seed: int, batch: int):
    return lambda name: run_generators(seed, range(batch), name)


def _reader(cfg, dt, n_steps, ticks, batch, rng_for):
    cam = CameraReader(cfg, dt, n_steps, ticks, batch)
    cam.history = np.zeros((n_steps + 1, batch))
    cam.start(np.arange(batch), rng_for)
    return cam


def _drive(cfg: CameraConfig, bank_fn, *, dt=0.001, n_steps=20_000, batch=4, seed=1, every=1):
    """Run the reader alone against a known bank history; return readings at ticks."""
    ticks = np.arange(0, n_steps, every)
    cam = _reader(cfg, dt, n_steps, ticks, batch, _rng_for(seed, batch))
    t = np.arange(n_steps + 1) * dt
    cam.history = np.repeat(bank_fn(t)[:, None], batch, axis=1)
    out_b, out_v, out_a = [], [], []
    for j, k in enumerate(ticks):
        b, v, a = cam.read(j, k * dt)
        out_b.append(b.copy()), out_v.append(v.copy()), out_a.append(a.copy())
    return cam, ticks * dt, np.array(out_b), np.array(out_v), np.array(out_a)


def test_delivery_buffer_mean_delay_is_latency_plus_half_period():
    # Mean age of the newest reading at ticks asynchronous to frames = L + T/2
    # (a sample-and-hold of period T adds T/2 on average; docs/references.md "Loop
    # margins", zero-order hold adds about T/2 — textbook identity).
    L, rate = 0.05, 30.0
    cam, t, _, valid, age = _drive(CameraConfig(frame_rate_hz=rate, latency_s=L), lambda t: 0 * t)
    ok = np.isfinite(age[:, 0])
    assert_allclose(age[ok].mean(), L + 0.5 / rate, atol=0.001)  # dt = 1 ms grid
    assert age[ok].min() >= L - 1e-9


def test_delivery_in_order_with_random_latency():
    cfg = CameraConfig(frame_rate_hz=30.0, latency_s=0.02, latency_jitter_s=0.03)
    cam = _reader(cfg, 0.001, 20_000, np.arange(20_000), 8, _rng_for(2, 8))
    d, c = cam.plan.deliver_step, cam.plan.capture_step
    assert np.all(np.diff(d, axis=1) >= 0)  # in order
    extra = (d - c) * 0.001 - 0.02
    assert extra.min() >= -1e-9
    # in-order delivery can only add delay; mean extra ≥ the exponential mean
    assert extra.mean() >= 0.03 * 0.9


def test_capture_jitter_std():
    # White per-frame jitter σ: intervals between captures have std √2·σ.
    eps = np.random.default_rng(3).standard_normal((10, 3001))
    plan = plan_frames(25.0, 1e-4, 1_200_000, 10, jitter_eps=eps, jitter_s=0.004)
    intervals = np.diff(plan.capture_step, axis=1) * 1e-4
    assert_allclose(intervals.mean(), 0.04, rtol=1e-3)
    assert_allclose(intervals.std(), math.sqrt(2) * 0.004, rtol=0.03)  # SE ≈ 0.7 % (clip at 0.45T: 4.5σ)


def test_per_run_latency_and_dropout_arrays():
    batch = 3
    lat = np.array([0.0, 0.05, 0.1])
    drop = np.array([0.0, 0.2, 0.5])
    cfg = CameraConfig(frame_rate_hz=50.0, latency_s=lat, dropout_prob=drop)
    cam, t, bank, valid, age = _drive(cfg, lambda t: 0 * t, dt=0.002, n_steps=100_000, batch=batch, every=10)
    delay = (cam.plan.deliver_step - cam.plan.capture_step) * 0.002
    assert_allclose(delay[:, 5], lat, atol=1e-12)
    frame_valid = cam.frame_readings()[1].mean(axis=1)
    assert_allclose(frame_valid, 1.0 - drop, atol=0.02)  # 2500 frames: SE ≤ 1 %
    # a run of the batch with per-run values equals that run alone with floats
    solo = _reader(
        CameraConfig(frame_rate_hz=50.0, latency_s=0.05, dropout_prob=0.2),
        0.002,
        1000,
        np.arange(0, 1000, 10),
        1,
        lambda name: run_generators(1, [1], name),
    )
    assert_array_equal(solo.plan.deliver_step[0], cam.plan.deliver_step[1][: solo.plan.n_frames])
    with pytest.raises(ValueError):
        _reader(CameraConfig(dropout_prob=np.array([0.1, 0.2])), 0.01, 100, np.arange(100), 3, _rng_for(1, 3))


def test_per_run_burst_loss_rate():
    rates = np.array([0.05, 0.3])
    cfg = CameraConfig(frame_rate_hz=100.0, bursts=BurstConfig(loss_rate=rates, mean_burst_frames=4.0))
    cam = _reader(cfg, 0.01, 100_000, np.arange(0, 100_000, 2), 2, _rng_for(4, 2))
    lost = ~cam._kept
    # ~100 000 frames, burst variance factor (1+λ)/(1−λ) ≤ 8: SE ≤ 0.5 % abs
    assert_allclose(lost.mean(axis=0), rates, atol=0.02)


def test_adding_a_stage_never_shifts_another_stages_draws():
    rng_for = _rng_for(9, 5)
    base = frame_draws(CameraConfig(noise_rad=0.01, dropout_prob=0.1), 200, rng_for)
    more = frame_draws(
        CameraConfig(
            noise_rad=0.01,
            dropout_prob=0.1,
            wander_rad=0.01,
            jitter_s=0.001,
            outlier_prob=0.1,
            outlier_rad=0.2,
            bursts=BurstConfig(0.1, 3.0),
        ),
        200,
        rng_for,
    )
    assert_array_equal(base["noise"], more["noise"])
    assert_array_equal(base["dropout"], more["dropout"])


def test_exposure_lags_a_ramp_by_half_the_exposure():
    cfg = CameraConfig(frame_rate_hz=20.0, exposure_s=0.03)
    cam, *_ = _drive(cfg, lambda t: 0.5 * t, n_steps=5000, batch=2)
    cap_t = cam.capture_time[:-1, 0]
    later = cap_t > 0.05
    assert_allclose(cam.frame_readings()[0][0][later], 0.5 * (cap_t[later] - 0.015), atol=1e-12)


def test_classifier_reader_confidence_and_saturation():
    cfg = CameraConfig(
        frame_rate_hz=50.0,
        range_rad=math.radians(30.0),
        beyond_range="saturate",
        classifier=ClassifierConfig(math.radians(5.0), 3.0, "best"),
    )
    cam, *_ = _drive(cfg, lambda t: np.radians(40.0) * np.sin(t), n_steps=8000, batch=1)
    vals, valid, conf = cam.frame_readings()
    vals = np.degrees(vals)
    assert_allclose(vals, np.round(vals / 5.0) * 5.0, atol=1e-9)
    assert vals.max() <= 30.0 + 1e-9 and valid.all()
    assert np.all((conf > 0) & (conf <= 1))


def test_readings_at_ticks_equal_every_frame_evaluated_at_once():
    # The reader evaluates only the newest frame of each run at a tick; a
    # second method evaluates every frame in one vectorised call. The stages
    # are pure functions of the recorded bank and the frame's draws, so the
    # tick readings must be exactly the newest valid frame's value.
    cfg = CameraConfig(
        frame_rate_hz=30.0,
        latency_s=0.04,
        latency_jitter_s=0.01,
        jitter_s=0.003,
        noise_rad=0.01,
        wander_rad=0.01,
        outlier_prob=0.05,
        outlier_rad=0.3,
        quantization_rad=0.005,
        range_rad=0.5,
        dropout_prob=0.1,
        classifier=ClassifierConfig(0.02, 2.0, "weighted"),
        bursts=BurstConfig(0.1, 3.0),
    )
    fn = lambda t: 0.6 * np.sin(1.3 * t)  # noqa: E731  (goes beyond the range: invalid frames too)
    cam, _, bank, valid, _ = _drive(cfg, fn, dt=0.01, n_steps=3000, batch=5, every=2)
    values, ok, _ = cam.frame_readings()
    latest = cam.plan.latest_delivered(np.arange(0, 3000, 2))  # (ticks, batch)
    rows = np.arange(5)
    has = latest >= 0
    assert_array_equal(valid, has & ok[rows, np.where(has, latest, 0)])
    for b in rows:  # the reading held is the newest valid frame's value
        last = np.nan
        for j in range(latest.shape[0]):
            f = latest[j, b]
            if f >= 0 and ok[b, f]:
                last = values[b, f]
            if not np.isnan(last):
                assert bank[j, b] == last
    assert 0.05 < 1 - ok.mean() < 0.6


def test_sensor_section_keys_and_errors():
    doc = {
        "frame_rate_hz": 20.0,
        "jitter_s": 0.002,
        "exposure_s": 0.01,
        "latency_s": 0.08,
        "latency_jitter_s": 0.01,
        "noise_deg": 0.3,
        "wander_deg": 0.5,
        "wander_time_s": 3.0,
        "bias_deg": 1.0,
        "scale": 1.02,
        "quantization_deg": 0.5,
        "outlier_prob": 0.01,
        "outlier_deg": 15.0,
        "range_deg": 60.0,
        "beyond_range": "saturate",
        "dropout_prob": 0.01,
        "classifier": {"class_width_deg": 2.0, "sharpness": 3.0, "decode": "weighted"},
        "bursts": {"loss_rate": 0.1, "mean_burst_frames": 5.0},
        "gyro": {"rate_hz": 50.0, "noise_deg_s": 0.1, "bias_drift_deg_s": 0.05, "bias_drift_time_s": 60.0},
    }
    cam, gyro = parse_sensor(Section(doc, file="f.toml", path="sensor"), base_step_s=0.01)
    assert_allclose(cam.wander_rad, math.radians(0.5))
    assert cam.classifier.decode == "weighted" and cam.bursts.mean_burst_frames == 5.0
    assert_allclose(gyro.bias_drift_rad_s, math.radians(0.05))
    bad = [
        ({"beyond_range": "clip"}, "beyond_range"),
        ({"wander_deg": -1.0}, "wander_deg"),
        ({"exposure_s": 1.0}, "exposure_s"),
        ({"bursts": {"loss_rate": 0.8, "mean_burst_frames": 2.0}}, "mean_burst_frames"),
        ({"classifier": {"decode": "mean"}}, "decode"),
        ({"classifer": {}}, "classifer"),
        ({"bursts": {"loss_rate": 0.1}}, "mean_burst_frames"),
    ]
    for extra, key in bad:
        with pytest.raises(ScenarioError, match=key) as info:
            parse_sensor(Section(extra, file="f.toml", path="sensor"), base_step_s=0.01)
        assert "f.toml" in str(info.value) and "\n" not in str(info.value)


def test_latest_delivered_matches_per_run_search():
    # second method: a plain per-run searchsorted
    from rollrig.sensors.timing import FramePlan

    d = np.sort(np.random.default_rng(0).integers(0, 500, (7, 80)), axis=1)
    steps = np.arange(0, 520, 3)[::-1]  # any order of queries
    got = FramePlan(d, d).latest_delivered(steps)
    ref = np.array([[np.searchsorted(d[b], s, side="right") - 1 for b in range(7)] for s in steps])
    assert_array_equal(got, ref)
