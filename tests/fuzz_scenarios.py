"""Random scenario files for the CLI fuzz tests (CI and ``bench/fuzz_cli.py``).

:func:`random_case` draws a scenario whose values are in range, favouring the
ends of each range (``lo``, ``hi``, just inside them) and the timing corners
that used to break runs (a command change one base step before the end, two
changes a few milliseconds apart, frame and controller rates at the base
step); with probability ``p_bad`` one value is then made wrong (out of range,
wrong type, unknown key). Runs stay short (at most 20,000 steps in total) so
thousands of cases run in minutes. Everything is drawn from the given
:class:`random.Random`, so a seed gives the same cases.
"""

from __future__ import annotations

import random

__all__ = ["random_case", "edge"]


def edge(r: random.Random, lo: float, hi: float, *, lo_open: bool = False, hi_open: bool = False) -> float:
    """A value in ``[lo, hi]``, often at or just inside an end."""
    span = hi - lo
    tiny = max(span * 1e-6, 1e-9)
    pick = r.random()
    if pick < 0.15:
        return lo + tiny if lo_open else lo
    if pick < 0.30:
        return hi - tiny if hi_open else hi
    if pick < 0.40:
        return lo + tiny
    if pick < 0.50:
        return hi - tiny
    return lo + span * r.random()


def _fmt(v) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, float):
        return repr(v)
    if isinstance(v, str):
        return '"' + v + '"'
    if isinstance(v, list):
        return "[" + ", ".join(_fmt(x) for x in v) + "]"
    return str(v)


def random_case(r: random.Random, p_bad: float = 0.3, max_steps: int = 20_000) -> tuple[str, list[str]]:
    """A scenario (TOML text) and extra ``rollrig run`` options."""
    dt = r.choice([0.0001, 0.001, 0.002, 0.005, 0.01, 0.02, 0.05, 0.1])

    runs = r.choice([1, 1, 2, 3])
    dur_hi = min(3600.0, max_steps * dt / runs)
    duration = r.choice([2 * dt, 3 * dt, min(dur_hi, 1.0), min(dur_hi, edge(r, 2 * dt, dur_hi))])
    duration = max(duration, 2 * dt)
    n_steps = int(round(duration / dt))
    end = n_steps * dt
    doc: dict[str, dict] = {
        "scenario": {"title": r.choice(["fuzz", "x" * 200, "ünïcode ✈ title"])},
        "run": {"duration_s": duration, "base_step_s": dt, "seed": r.choice([0, 1, 2**63 - 1]), "runs": runs},
    }
    model = r.choice(["roll-only", "light-single", "small-uav"])
    air: dict = {"model": model}
    if model != "light-single":
        air["airspeed_mps"] = edge(r, 12.0, 40.0)
    doc["aircraft"] = air
    doc["initial"] = {"bank_deg": edge(r, -90.0, 90.0), "roll_rate_deg_s": edge(r, -360.0, 360.0)}
    doc["actuator"] = {
        "time_constant_s": edge(r, 0.0, 5.0),
        "limit_deg": edge(r, 0.0, 60.0, lo_open=True),
        "rate_limit_deg_s": edge(r, 0.0, 10_000.0, lo_open=True),
    }
    rate_max = 1.0 / dt
    frame = edge(r, 0.1, rate_max)
    period = 1.0 / frame
    sensor = {
        "frame_rate_hz": frame,
        "latency_s": edge(r, 0.0, 5.0),
        "noise_deg": edge(r, 0.0, 30.0),
        "jitter_s": edge(r, 0.0, 0.5 * period),
        "exposure_s": edge(r, 0.0, period),
        "bias_deg": edge(r, -45.0, 45.0),
        "scale": edge(r, 0.5, 2.0),
        "quantization_deg": edge(r, 0.0, 30.0),
        "outlier_prob": edge(r, 0.0, 0.5),
        "dropout_prob": edge(r, 0.0, 1.0, hi_open=True),
        "wander_deg": edge(r, 0.0, 30.0),
        "wander_time_s": edge(r, 0.01, 3600.0),
    }
    doc["sensor"] = {k: v for k, v in sensor.items() if r.random() < 0.7 or k == "frame_rate_hz"}
    ctrl_rate = rate_max / r.choice([1, 2, 3, 5, 10, 50, max(1, int(rate_max / 0.1))])  # base rate / n
    doc["controller"] = {
        "kind": "pid",
        "rate_hz": ctrl_rate,
        "kp": edge(r, 0.0, 100.0),
        "ki_per_s": edge(r, 0.0, 100.0),
        "kd_s": edge(r, 0.0, 100.0),
        "derivative_filter_hz": edge(r, 0.01, 0.5 * ctrl_rate),
    }
    prof = r.choice(["hold", "step", "step-late", "sequence", "sequence-tight"])
    if prof == "hold":
        doc["command"] = {"profile": "hold", "bank_deg": edge(r, -90.0, 90.0)}
    elif prof.startswith("step"):
        at = (
            end - r.choice([0.5 * dt, dt, 1.5 * dt, 2 * dt, 3 * dt])
            if prof == "step-late"
            else r.random() * end
        )
        doc["command"] = {
            "profile": "step",
            "to_deg": edge(r, -90.0, 90.0),
            "at_s": max(0.0, min(at, duration * 0.999999)),
        }
    else:
        n = r.randint(1, 5)
        if prof == "sequence-tight":
            t0 = r.random() * end
            times = sorted({round(t0 + i * r.choice([0.5, 1.0, 1.5, 2.0, 2.5]) * dt, 9) for i in range(n)})
        else:
            times = sorted({round(r.random() * duration, 6) for _ in range(n)})
        times = [t for t in times if 0 <= t <= duration] or [0.0]
        doc["command"] = {
            "profile": "sequence",
            "times_s": [float(t) for t in times],
            "banks_deg": [edge(r, -90.0, 90.0) for _ in times],
        }
    if r.random() < 0.3:
        doc["criteria"] = {
            "bank_limit_deg": edge(r, 0.0, 180.0, lo_open=True),
            "max_settling_s": edge(r, 0.0, 3600.0, lo_open=True),
        }
    extra: list[str] = []
    if r.random() < p_bad:
        _spoil(r, doc, extra)
    text = "\n".join(
        f"[{name}]\n" + "".join(f"{k} = {_fmt(v)}\n" for k, v in table.items()) for name, table in doc.items()
    )
    return text, extra


def _spoil(r: random.Random, doc: dict, extra: list[str]) -> None:
    """Make one thing wrong: a value out of range or of the wrong type, an unknown key, a bad option."""
    what = r.random()
    if what < 0.25:
        extra += r.choice(
            [
                ["--runs", "0"],
                ["--runs", str(10**7)],
                ["--seed", "-1"],
                ["--seed", str(10**40)],
                ["--replay", str(10**31)],
                ["--replay", "-3"],
            ]
        )
        return
    section = r.choice([s for s in doc if s != "scenario"])
    key = r.choice(list(doc[section]))
    if what < 0.5:
        doc[section]["unknown_" + key] = 1
    elif what < 0.75:
        doc[section][key] = r.choice(["text", True, [1, 2], -1e300, 1e300, 10**30, -(10**30)])
    else:
        v = doc[section][key]
        if isinstance(v, (int, float)) and not isinstance(v, bool):
            doc[section][key] = r.choice([-abs(v) - 1e6, abs(v) * 1e9 + 1e9])
        else:
            doc[section][key] = 0
