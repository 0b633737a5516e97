"""The engine's figures, in one run (issue "one engine for every workflow").

Prints, for 1,000 runs x 60 s of the light-single loop (base step 10 ms,
controller 50 Hz, 30 Hz camera with latency, noise, rounding and losses; PID):

1. the core's batch time against a lean hand-fused numpy loop of the same
   physics written below (exact plant+servo step, servo limits, camera frame
   timing, noise, rounding, losses, PID with measured-rate derivative); the
   lean loop draws from one generator (no per-run streams) and has no
   divergence bookkeeping, records or observation objects, so it is a floor;
2. moderate Dryden turbulence / baseline;
3. every camera stage and a drifting gyro / baseline;
4. one controller tick at batch 1 (two base steps, camera read, PID), µs;
5. a per-run-parameter batch (10 gain/noise settings mixed in one batch of
   1,000) against the same runs as 10 separate batches of 100;
6. ``rollrig run`` of 1,000 runs x 60 s of a bundled scenario as a whole
   process (writing its folder, no plots) against the core's own time for
   the same batch, measured here;
7. peak memory (tracemalloc) of the two recording levels at 10,000 runs x
   600 s: ``metrics`` is measured on two chunks of 600 s runs (the peak is
   one chunk's, whatever the number of runs); ``full`` is measured on a
   few 600 s runs and scaled to 10,000 (it grows with the runs).

Usage: ``python bench/engine.py [--quick]`` (``--quick``: 200 runs, skips 6-7).
The machine's load changes the absolute times; the ratios are measured in
the same run.
"""

from __future__ import annotations

import argparse
import math
import os
import subprocess
import sys
import tempfile
import time
import tracemalloc
from dataclasses import replace
from pathlib import Path

import numpy as np
import scipy.linalg
from rollrig.controllers.pid import PIDConfig, PIDController
from rollrig.sim.core import Stepper
from rollrig.sim.driver import run_batch

sys.path.insert(0, str(Path(__file__).resolve().parent))
from camera_stages import ALL, GYRO  # noqa: E402
from core_throughput import CAMERA, CTRL_EVERY, DT, DURATION, PID, base_setup, variants  # noqa: E402

ROOT = Path(__file__).resolve().parent.parent


def best_of(fn, repeats: int = 3) -> float:
    best = math.inf
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - t0)
    return best


def core_time(setup, runs: int, ctrl_cfg: PIDConfig = PID, repeats: int = 3) -> float:
    return best_of(
        lambda: run_batch(setup, PIDController(ctrl_cfg), seed=1, run_indices=range(runs)), repeats
    )


# ------------------------------------------------------------------ the lean loop
def lean_loop(runs: int) -> np.ndarray:
    """The baseline loop's physics hand-fused in numpy (a floor for the core's time)."""
    s = base_setup()
    plant, act, cam = s.plant, s.actuator, CAMERA
    nx, n, dt, every = plant.n_states, s.n_steps, s.dt, CTRL_EVERY
    lag = np.zeros((nx + 2, nx + 2))
    lag[:nx, :nx] = plant.a
    lag[:nx, nx] = plant.b_control[:, 0]
    lag[nx, nx] = -1.0 / act.time_constant_s
    lag[nx, nx + 1] = 1.0 / act.time_constant_s
    m = scipy.linalg.expm(lag * dt)[: nx + 1]
    ad = scipy.linalg.expm(plant.a * dt)
    b_ail = np.linalg.solve(plant.a, (ad - np.eye(nx)) @ plant.b_control[:, 0])
    lim, mc, alpha = act.limit_rad, act.rate_limit_rad_s * dt, -math.expm1(-dt / act.time_constant_s)
    phi = plant.phi_index
    # camera timing: shared by every run
    period = 1.0 / cam.frame_rate_hz
    n_frames = int(n * dt / period) + 1
    cap = np.rint(np.arange(n_frames) * period / dt).astype(int)
    deliver = cap + int(round(cam.latency_s / dt))
    ticks = np.arange(0, n, every)
    latest = np.searchsorted(deliver, ticks, side="right") - 1
    rng = np.random.default_rng(1)
    noise = cam.noise_rad * rng.standard_normal((n_frames, runs))
    kept = rng.random((n_frames, runs)) >= cam.dropout_prob
    q = cam.quantization_rad
    hist = np.empty((n + 1, runs))
    X = np.zeros((nx + 2, runs))
    Y = np.zeros_like(X)
    hist[0] = X[phi]
    kp, ki, kd = PID.kp, PID.ki_per_s, PID.kd_s
    tc = every * dt
    a_f = -math.expm1(-2 * math.pi * PID.derivative_filter_hz * tc)
    ilim, ulim = PID.integrator_limit_rad, PID.output_limit_rad
    last = np.zeros(runs)
    last_cap = np.full(runs, -np.inf)
    prev_bank = np.zeros(runs)
    prev_cap = np.full(runs, -np.inf)
    integ = np.zeros(runs)
    rate_f = np.zeros(runs)
    prev_f = -2
    k = 0
    for j, f in enumerate(latest):
        if f != prev_f and f >= 0:
            reading = np.round((hist[cap[f]] + noise[f]) / q) * q
            ok = kept[f]
            last = np.where(ok, reading, last)
            last_cap = np.where(ok, cap[f] * dt, last_cap)
            prev_f = f
        t = j * tc
        fresh = (t - last_cap) <= PID.stale_after_s
        new = fresh & (last_cap > prev_cap)
        with np.errstate(invalid="ignore"):
            gap = last_cap - prev_cap
            rate = np.where(new & np.isfinite(gap), (last - prev_bank) / gap, rate_f)
        prev_bank = np.where(new, last, prev_bank)
        prev_cap = np.where(new, last_cap, prev_cap)
        rate_f += a_f * (rate - rate_f) * fresh
        err = s.bank_cmd[k] - last
        u = np.clip(kp * err + integ - kd * rate_f, -ulim, ulim)
        integ = np.clip(integ + ki * err * tc * fresh, -ilim, ilim)
        X[-1] = u
        near = np.flatnonzero((np.abs(u) > lim) | (alpha * np.abs(u - X[nx]) > mc))
        for _ in range(every):
            np.matmul(m, X, out=Y[:-1])
            Y[-1] = u
            if near.size:
                before, free = X[nx, near], Y[nx, near]
                bind = (np.abs(free - before) > mc) | (np.abs(free) > lim)
                if bind.any():
                    r = near[bind]
                    clipped = np.clip(before[bind] + np.clip(free[bind] - before[bind], -mc, mc), -lim, lim)
                    Y[:nx, r] = ad @ X[:nx, r] + b_ail[:, None] * (0.5 * (before[bind] + clipped))
                    Y[nx, r] = clipped
            X, Y = Y, X
            k += 1
            hist[k] = X[phi]
    return hist


# ------------------------------------------------------------------ figures
def one_tick_us(ticks: int = 3000) -> float:
    """Mean wall time of one controller tick (advance + PID) at batch 1, µs."""
    setup = base_setup()
    st = Stepper(setup)
    ctrl = PIDController(PID)
    best = math.inf
    for _ in range(3):
        obs = st.reset(1, [0], record="none")
        ctrl.reset(1)
        t0 = time.perf_counter()
        for _ in range(ticks):
            obs = st.advance(ctrl.step(obs))
        best = min(best, (time.perf_counter() - t0) / ticks)
    return best * 1e6


def mixed_vs_separate(runs: int) -> tuple[float, float]:
    """One batch with per-run gains and noise (10 settings) vs 10 separate batches."""
    groups = 10
    per = runs // groups
    kp = np.repeat(np.linspace(0.3, 1.2, groups), per)
    noise = np.repeat(np.radians(np.linspace(0.1, 1.0, groups)), per)
    base = base_setup()
    mixed_setup = replace(base, camera=replace(base.camera, noise_rad=noise))
    mixed_cfg = replace(PID, kp=kp)

    def mixed():
        run_batch(mixed_setup, PIDController(mixed_cfg), seed=1, run_indices=range(per * groups))

    def separate():
        for g in range(groups):
            s = replace(base, camera=replace(base.camera, noise_rad=float(noise[g * per])))
            run_batch(s, PIDController(replace(PID, kp=float(kp[g * per]))), seed=1, run_indices=range(per))

    return best_of(mixed, 2), best_of(separate, 2)


def whole_process(runs: int = 1000) -> tuple[float, float, str]:
    """``rollrig run`` wall time vs the core's own time for the same batch."""
    from rollrig.sim.build import build_setup
    from rollrig.sim.scenario import load_scenario

    name = "light-single-wings-level.toml"
    path = ROOT / "scenarios" / name
    sc = load_scenario(path)
    sc = replace(sc, run=replace(sc.run, runs=runs))
    setup = build_setup(sc)
    from rollrig.sim.build import make_controller

    core = best_of(
        lambda: run_batch(setup, make_controller(sc.controller), seed=sc.run.seed, run_indices=range(runs)), 2
    )
    exe = Path(sys.executable).with_name("rollrig")
    cmd = [str(exe)] if exe.exists() else [sys.executable, "-m", "rollrig.sim.cli.main"]
    best = math.inf
    for _ in range(2):
        with tempfile.TemporaryDirectory() as tmp:
            t0 = time.perf_counter()
            subprocess.run(
                [
                    *cmd,
                    "run",
                    str(path),
                    "--runs",
                    str(runs),
                    "--out",
                    os.path.join(tmp, "o"),
                    "--format",
                    "csv",
                ],
                check=True,
                stdout=subprocess.DEVNULL,
            )
            best = min(best, time.perf_counter() - t0)
    return best, core, f"{name} ({sc.run.duration_s:g} s runs)"


def peak_memory() -> tuple[float, float, int, int]:
    """Peak bytes at 10,000 x 600 s: metrics level (measured on 2 chunks) and full level (scaled)."""
    from rollrig.sim.driver import chunk_size
    from rollrig.sim.metrics import MetricSpec, StepSegment
    from rollrig.sim.runner import metric_spec  # noqa: F401  (the spec below is the run's own)

    setup = base_setup()
    n = int(round(600.0 / DT))
    t = np.arange(n + 1) * DT
    long = replace(setup, n_steps=n, bank_cmd=np.where(t >= 1.0, math.radians(20), 0.0))
    spec = MetricSpec(
        steps=(StepSegment(1.0, 600.0, 0.0, math.radians(20)),),
        settle_band_frac=0.05,
        settle_band_rad=None,
        hold_band_rad=math.radians(2),
        bank_limit_rad=math.radians(60),
        aileron_limit_rad=setup.actuator.limit_rad,
        aileron_rate_limit_rad_s=setup.actuator.rate_limit_rad_s,
    )
    chunk = chunk_size(long, 10_000, "metrics")
    tracemalloc.start()
    run_batch(
        long, PIDController(PID), seed=1, run_indices=range(2 * chunk), record="metrics", metric_spec=spec
    )
    _, metrics_peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    few = 8
    tracemalloc.start()
    run_batch(long, PIDController(PID), seed=1, run_indices=range(few), metric_spec=spec)
    _, full_peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    return metrics_peak, full_peak / few * 10_000, chunk, few


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument(
        "--quick", action="store_true", help="200 runs; skip the whole-process and memory figures"
    )
    args = ap.parse_args()
    runs = 200 if args.quick else 1000
    print(
        f"engine figures: {runs} runs x {DURATION:g} s, base {1 / DT:g} Hz, "
        f"controller {1 / (DT * CTRL_EVERY):g} Hz"
    )
    print(f"  machine load average (1 min): {os.getloadavg()[0]:.1f} on {os.cpu_count()} CPUs")
    setups = variants()
    base = core_time(setups["baseline"], runs)
    lean = best_of(lambda: lean_loop(runs), 3)
    print(
        f"1. baseline core {base:.3f} s, lean hand-fused loop {lean:.3f} s: {base / lean:.2f}x (target <= 2)"
    )
    turb = core_time(setups["moderate turbulence"], runs)
    print(f"2. moderate turbulence {turb:.3f} s: {turb / base:.2f}x baseline (target <= 1.6)")
    stages = core_time(replace(setups["baseline"], camera=ALL, gyro=GYRO), runs)
    print(f"3. every camera stage + gyro {stages:.3f} s: {stages / base:.2f}x baseline (target <= 2)")
    tick = one_tick_us()
    print(f"4. one controller tick at batch 1: {tick:.0f} µs (target <= 100)")
    mixed, separate = mixed_vs_separate(runs)
    print(
        f"5. per-run parameters: one mixed batch {mixed:.3f} s vs 10 separate batches {separate:.3f} s "
        f"({separate / mixed:.2f}x faster mixed)"
    )
    if args.quick:
        return
    wall, core, what = whole_process(1000)
    print(
        f"6. rollrig run 1000 runs of {what}: {wall:.2f} s whole process, "
        f"core {core:.2f} s: {wall / core:.2f}x (target <= 1.5)"
    )
    m_peak, f_peak, chunk, few = peak_memory()
    print(
        f"7. peak memory at 10,000 runs x 600 s: metrics level {m_peak / 2**30:.2f} GiB "
        f"(measured: 2 chunks of {chunk} runs; the peak is one chunk's), "
        f"full trace {f_peak / 2**30:.1f} GiB (measured on {few} runs, scaled linearly)"
    )


if __name__ == "__main__":
    main()
