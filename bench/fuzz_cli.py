"""Long CLI fuzz (issue 9), run by hand, not in CI: prints its counts.

    python bench/fuzz_cli.py [CASES] [WORKERS]     # default 10000 cases, 2 workers

Each case is a random scenario from ``tests/fuzz_scenarios.py`` (seeded by its
case number, so a failure can be replayed) put through ``rollrig check`` and
``rollrig run --no-files`` in-process. Counted: exit 0, exit 2 with one line,
anything else (a traceback, another exit status, more than one line for 2),
``check`` ok but ``run`` failed, and hangs (no answer within ``HANG_S``).
"""

from __future__ import annotations

import contextlib
import io
import random
import signal
import sys
import tempfile
import time
import traceback
from collections import Counter
from multiprocessing import Pool
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))

from fuzz_scenarios import random_case  # noqa: E402

HANG_S = 120
#: total base steps of one case (runs × steps); small keeps 10,000 cases to minutes
MAX_STEPS = 4000


class _Hang(BaseException):
    pass


def _alarm(signum, frame):
    raise _Hang()


def _cli(args: list[str]) -> tuple[int, str, str]:
    from rollrig.sim.cli.main import main

    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        try:
            code = main(args)
        except SystemExit as exc:
            code = exc.code if isinstance(exc.code, int) else 1
    return code, out.getvalue(), err.getvalue()


def _bad(code: int, err: str) -> bool:
    if code == 0:
        return "Traceback" in err
    return code != 2 or err.count("\n") != 1 or not err.startswith("rollrig: error: ")


def one_case(i: int) -> tuple[int, str, str]:
    signal.signal(signal.SIGALRM, _alarm)
    text, extra = random_case(random.Random(i), max_steps=MAX_STEPS)
    with tempfile.TemporaryDirectory() as d:
        path = Path(d) / "case.toml"
        path.write_text(text, encoding="utf-8")
        signal.alarm(HANG_S)
        try:
            c = _cli(["check", str(path)])
            r = _cli(["run", str(path), "--no-files", "--format", "csv", *extra])
        except _Hang:
            return i, "hang", ""
        except BaseException:  # an escaped exception is a traceback for the user
            return i, "traceback", traceback.format_exc(limit=3)[-600:]
        finally:
            signal.alarm(0)
    if _bad(*c[::2]) or _bad(r[0], r[2]):
        return i, "traceback", (c[2] + r[2])[-600:]
    if c[0] == 0 and not extra and r[0] != 0:
        return i, "check ok, run failed", r[2][-600:]
    return i, f"exit {r[0]}", ""


def main() -> None:
    cases = int(sys.argv[1]) if len(sys.argv) > 1 else 10_000
    workers = int(sys.argv[2]) if len(sys.argv) > 2 else 2
    t0 = time.perf_counter()
    counts: Counter[str] = Counter()
    examples: dict[str, tuple[int, str]] = {}
    with Pool(workers) as pool:
        for n, (i, kind, detail) in enumerate(pool.imap_unordered(one_case, range(cases), chunksize=8), 1):
            counts[kind] += 1
            if kind not in examples and detail:
                examples[kind] = (i, detail)
            if n % 1000 == 0:
                print(f"  {n} cases, {time.perf_counter() - t0:.0f} s: {dict(counts)}", flush=True)
    print(f"CLI fuzz: {cases} cases in {time.perf_counter() - t0:.0f} s")
    for kind in ("exit 0", "exit 2", "traceback", "hang", "check ok, run failed"):
        print(f"  {kind:22s} {counts.get(kind, 0)}")
    for kind, (i, detail) in examples.items():
        print(f"first {kind}: case {i}\n{detail}")


if __name__ == "__main__":
    main()
