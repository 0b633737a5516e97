"""Whole-process time of ``rollrig compare``: 4 controllers x 3 scenarios x 100 runs x 60 s.

The three scenarios are the bundled ``lossy-camera-turn``, ``uav-slow-coarse-camera``
and ``uav-ridge-turbulence`` (the last two with a rate gyro added, which the
cascade needs), each stretched to 60 s and 100 runs; the controllers are each
scenario's PID and the bundled cascade, LQG and Smith-predictor files. Margins
are left out of the timed figure (``--margins none``: the experiment is a
separate cost, printed on its own line with the default ``--margins all``). Prints
wall-clock seconds of the whole ``rollrig compare`` process (start-up,
simulation, statistics, tables; no files) with one and with two worker
processes, and, for scale, one PID-only pairing through the same command.

Target: under 15 s on a 2-core machine.
Run: ``python bench/compare.py [--repeats N]``.
"""

from __future__ import annotations

import argparse
import os
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
GYRO = "\n[sensor.gyro]\nrate_hz = 100.0\nnoise_deg_s = 0.2\n"


def _stretch(src: Path, dst: Path, add_gyro: bool) -> None:
    text = src.read_text()
    lines = []
    for line in text.splitlines():
        key = line.split("=")[0].strip()
        if key == "duration_s":
            line = "duration_s = 60.0"
        elif key == "runs":
            line = "runs = 100"
        lines.append(line)
    text = "\n".join(lines) + "\n"
    if add_gyro:
        text = text.replace("\n[controller]", GYRO + "\n[controller]", 1)
    dst.write_text(text)


def _time(argv: list[str]) -> tuple[float, float]:
    """(wall-clock s, CPU s of the process and its workers)."""
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    t0 = time.perf_counter()
    subprocess.run(argv, check=True, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    wall = time.perf_counter() - t0
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    return wall, (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeats", type=int, default=1)
    args = ap.parse_args()
    exe = [sys.executable, "-m", "rollrig.sim.cli.main"]
    ctl = ROOT / "scenarios" / "controllers"
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        scs = []
        for name, gyro in (
            ("lossy-camera-turn", False),
            ("uav-slow-coarse-camera", True),
            ("uav-ridge-turbulence", True),
        ):
            dst = tmp / f"{name}.toml"
            _stretch(ROOT / "scenarios" / f"{name}.toml", dst, gyro)
            scs.append(str(dst))
        files = [str(ctl / f"{k}.toml") for k in ("cascade", "lqg", "smith")]
        cmd = [*exe, "compare", *scs, *sum((["-c", f] for f in files), []), "--margins", "none"]
        cmd += ["--format", "csv"]
        print(
            "rollrig compare: 4 controllers x 3 scenarios x 100 runs x 60 s (whole process, --margins none)"
        )
        print(
            f"  load average before: {os.getloadavg()[0]:.1f} on {os.cpu_count()} cores (wall time suffers)"
        )
        for workers in (1, 2):
            wall, cpu = min(_time([*cmd, "--workers", str(workers)]) for _ in range(args.repeats))
            print(f"  workers={workers}: {wall:6.1f} s wall, {cpu:6.1f} s CPU   (target < 15 s wall)")
        full = [arg for arg in cmd if arg not in ("--margins", "none")]  # the default: --margins all
        wall, cpu = min(_time([*full, "--workers", "2"]) for _ in range(args.repeats))
        print(
            f"  with every margin (the default --margins all: analytic loops and the experiment), "
            f"workers=2: {wall:6.1f} s wall, {cpu:6.1f} s CPU   (no target)"
        )
        one = [*exe, "compare", scs[0], "-c", files[0], "--margins", "none", "--format", "csv"]
        wall, cpu = min(_time(one) for _ in range(args.repeats))
        print(
            f"  for scale, 2 controllers x 1 scenario (PID + cascade): {wall:6.1f} s wall, {cpu:6.1f} s CPU"
        )


if __name__ == "__main__":
    main()
