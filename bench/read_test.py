"""Speed of the image level: renderer, readers, the read-test sweep and the image-level closed loop.

Prints

* render, degrade and read throughput at 64 px (images per second);
* ``read-test`` of the built-in moment reader over 121 bank angles × 4
  degradation kinds × 5 strengths × 20 draws at 64 px (target < 60 s);
* the image-level closed loop, 100 runs × 60 s with a 30 Hz camera and the
  moment reader (target < 60 s), and the same loop with the fitted
  statistical camera model instead (the ratio is what reading pictures costs).

Run: ``python bench/read_test.py`` (add ``--quick`` for a smaller check).
Wall-clock figures on a shared machine vary with its load; the CPU time of
this process is printed beside each.
"""

from __future__ import annotations

import argparse
import time
from dataclasses import replace
from pathlib import Path

import numpy as np
from rollrig.sensors import image_degrade as D
from rollrig.sensors.instrument import Instrument
from rollrig.sensors.readers import MomentReader, RobustReader
from rollrig.sim.analysis.image_loop import image_scenario
from rollrig.sim.analysis.read_test import ReadTestSpec, fitted_scenario, load_read_test, run_read_test
from rollrig.sim.runner import run_scenario

ROOT = Path(__file__).resolve().parents[1]


def timed(f):
    w, c = time.perf_counter(), time.process_time()
    out = f()
    return out, time.perf_counter() - w, time.process_time() - c


def main() -> None:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--quick", action="store_true", help="a tenth of the sizes")
    a = p.parse_args()
    k = 10 if a.quick else 1

    n = 4096
    banks = np.radians(np.random.default_rng(1).uniform(-60, 60, n))
    ins = Instrument(64)
    img, w, _ = timed(lambda: ins.render(banks))
    print(f"render 64 px:               {n / w:10.0f} images/s")
    _, w, _ = timed(lambda: D.pixel_noise(img, 0.05, np.random.default_rng(2)))
    print(f"pixel noise:                {n / w:10.0f} images/s")
    _, w, _ = timed(lambda: D.warp(img, rotation_deg=5.0))
    print(f"camera-pose warp:           {n / w:10.0f} images/s")
    for r in (MomentReader(64), RobustReader(64)):
        _, w, _ = timed(lambda r=r: r(img))
        print(f"{r.name} reader:              {n / w:10.0f} images/s")

    draws = 20 // k if k > 1 else 20
    spec = ReadTestSpec(draws=draws)  # 121 banks × noise, glare, rotation, blur × 5 strengths
    res, w, c = timed(lambda: run_read_test(spec, MomentReader(64)))
    count = sum(v.size for v in res.readings.values())
    print(
        f"read-test, moment reader: {len(spec.banks_deg)} banks × {len(spec.kinds)} kinds × 5 strengths × "
        f"{draws} draws = {count} images: {w:.1f} s wall ({c:.1f} s CPU), target < 60 s"
    )

    sc = load_read_test(str(ROOT / "scenarios" / "read-test" / "light-single-camera-picture.toml")).scenario
    sc = replace(sc, run=replace(sc.run, duration_s=60.0, runs=100 // k))
    reader = MomentReader(64)
    fit = next(f for f in res.fits if f.kind == "noise")
    sc_img = image_scenario(sc, reader, degradations=(("noise", fit.strength),))
    _, wi, ci = timed(lambda: run_scenario(sc_img))
    _, wm, cm = timed(lambda: run_scenario(fitted_scenario(sc, fit)))
    frames = sc.run.runs * sc.run.duration_s * sc.camera.frame_rate_hz
    print(
        f"image-level closed loop, {sc.run.runs} runs × {sc.run.duration_s:g} s at "
        f"{sc.camera.frame_rate_hz:g} Hz ({frames:.0f} frames), moment reader: "
        f"{wi:.1f} s wall ({ci:.1f} s CPU), target < 60 s"
    )
    print(
        f"same loop, fitted statistical model: {wm:.1f} s wall ({cm:.1f} s CPU); "
        f"image level costs {wi / wm:.1f}×"
    )


if __name__ == "__main__":
    main()
