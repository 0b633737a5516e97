"""Shared test helpers: repository paths, scenario documents, a small TOML writer and
the all-camera-stages sensor set-up.

The TOML writer exists because the test venv has no TOML *writer* (``tomllib``
only reads); it covers what scenario files use (tables, arrays of tables,
inline arrays and tables, strings, numbers including ``nan``/``inf``, booleans,
dates and times) and is itself checked by a round trip in ``test_bad_input``.
"""

from __future__ import annotations

import copy
import datetime as _dt
import math
import re
import tomllib
from pathlib import Path
from typing import Any

from rollrig.sensors.camera import BurstConfig, CameraConfig, ClassifierConfig
from rollrig.sensors.gyro import GyroConfig

REPO = Path(__file__).resolve().parents[1]
SCENARIO_DIR = REPO / "scenarios"
BUNDLED = sorted(SCENARIO_DIR.glob("*.toml"))

__all__ = [
    "REPO",
    "SCENARIO_DIR",
    "BUNDLED",
    "MINIMAL_SCENARIO",
    "to_toml",
    "minimal_doc",
    "rich_docs",
    "matrices_aircraft",
    "derivatives_aircraft",
    "ALL_STAGES_CAMERA",
    "DRIFTING_GYRO",
    "short_training_scenario",
]


def short_training_scenario(tmp_path: Path, runs: int) -> Path:
    """``learned-bank-step.toml`` cut to 2 s and ``runs`` runs, written under ``tmp_path``:
    for the training mechanics, not for learning. Fails if the bundled file's keys moved."""
    text = (SCENARIO_DIR / "learned-bank-step.toml").read_text()
    for old in ("duration_s = 8.0", "runs = 50"):
        assert old in text, f"learned-bank-step.toml no longer has {old!r}"
    path = tmp_path / "short.toml"
    text = text.replace("duration_s = 8.0", "duration_s = 2.0").replace("runs = 50", f"runs = {runs}")
    path.write_text(text)
    return path


#: A camera with every reader stage switched on (jitter, exposure, random latency,
#: wander, bias, scale, outliers, saturation, a weighted classifier, bursty losses);
#: each stage draws per run. Invented values; also used by ``bench/camera_stages.py``.
ALL_STAGES_CAMERA = CameraConfig(
    frame_rate_hz=30,
    latency_s=0.05,
    noise_rad=math.radians(0.3),
    quantization_rad=math.radians(0.5),
    dropout_prob=0.02,
    jitter_s=0.003,
    exposure_s=0.02,
    latency_jitter_s=0.01,
    wander_rad=math.radians(0.3),
    wander_time_s=2.0,
    bias_rad=math.radians(0.5),
    scale=1.01,
    outlier_prob=0.01,
    outlier_rad=math.radians(15.0),
    beyond_range="saturate",
    range_rad=math.radians(60.0),
    classifier=ClassifierConfig(math.radians(1.0), 4.0, "weighted"),
    bursts=BurstConfig(0.05, 3.0),
)

#: A noisy rate gyro whose bias drifts (a Gauss-Markov walk); invented values.
DRIFTING_GYRO = GyroConfig(
    rate_hz=100.0,
    noise_rad_s=math.radians(0.05),
    bias_rad_s=math.radians(0.1),
    bias_drift_rad_s=math.radians(0.02),
    bias_drift_time_s=100.0,
)

#: A small valid scenario: roll-only model, 2 s, fast to run.
MINIMAL_SCENARIO = """\
[scenario]
title = "minimal"

[aircraft]
model = "roll-only"
airspeed_mps = 25.0

[sensor]
frame_rate_hz = 25.0
latency_s = 0.04
noise_deg = 0.3

[controller]
kind = "pid"
rate_hz = 50.0
kp = 0.4
ki_per_s = 0.05
kd_s = 0.05

[command]
profile = "step"
to_deg = 10.0
at_s = 0.5

[run]
duration_s = 2.0
base_step_s = 0.01
seed = 5
runs = 2

[criteria]
settling_band_pct = 5.0
bank_limit_deg = 40.0
"""


# --------------------------------------------------------------------- TOML writer
_BARE = re.compile(r"^[A-Za-z0-9_-]+$")


def _key(k: str) -> str:
    return k if _BARE.match(k) else _string(k)


def _string(s: str) -> str:
    """A TOML basic string: escape quote, backslash and control characters only."""

    def esc(c: str) -> str:
        if c in '"\\':
            return "\\" + c
        if ord(c) < 0x20 or ord(c) == 0x7F:
            return f"\\u{ord(c):04x}"
        return c

    return '"' + "".join(map(esc, s)) + '"'


def _value(v: Any) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        if math.isnan(v):
            return "nan"
        if math.isinf(v):
            return "inf" if v > 0 else "-inf"
        return repr(v)
    if isinstance(v, str):
        return _string(v)
    if isinstance(v, (_dt.datetime, _dt.date, _dt.time)):
        return v.isoformat()
    if isinstance(v, list):
        return "[" + ", ".join(_value(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{" + ", ".join(f"{_key(k)} = {_value(x)}" for k, x in v.items()) + "}"
    raise TypeError(f"cannot write {type(v).__name__} as TOML")


def _is_table_array(v: Any) -> bool:
    return isinstance(v, list) and bool(v) and all(isinstance(x, dict) for x in v)


def _emit(table: dict, prefix: list[str], out: list[str]) -> None:
    for k, v in table.items():
        if not isinstance(v, dict) and not _is_table_array(v):
            out.append(f"{_key(k)} = {_value(v)}")
    for k, v in table.items():
        path = [*prefix, _key(k)]
        if isinstance(v, dict):
            out.append(f"\n[{'.'.join(path)}]")
            _emit(v, path, out)
        elif _is_table_array(v):
            for item in v:
                out.append(f"\n[[{'.'.join(path)}]]")
                _emit(item, path, out)


def to_toml(doc: dict) -> str:
    """Write a parsed-TOML-like document back as TOML text."""
    out: list[str] = []
    _emit(doc, [], out)
    return "\n".join(out) + "\n"


# --------------------------------------------------------------------- documents
def minimal_doc() -> dict:
    """A fresh parsed copy of :data:`MINIMAL_SCENARIO`."""
    return tomllib.loads(MINIMAL_SCENARIO)


def matrices_aircraft() -> dict:
    """A valid ``[aircraft]`` table of the user-matrix kind (4 lateral states)."""
    return {
        "model": "matrices",
        "states": ["beta", "p", "r", "phi"],
        "a": [
            [-0.25, 0.0, -1.0, 0.18],
            [-16.0, -8.4, 2.2, 0.0],
            [4.5, -0.35, -0.76, 0.0],
            [0.0, 1.0, 0.0, 0.0],
        ],
        "b": [[0.0, 0.03], [28.0, 2.5], [-0.2, -4.6], [0.0, 0.0]],
        "b_disturbance": [
            [-0.02, 0.0, 0.0, 0.0],
            [-0.4, -8.4, 2.2, 1.0],
            [0.1, -0.35, -0.76, 0.0],
            [0.0, 0.0, 0.0, 0.0],
        ],
        "airspeed_mps": 50.0,
        "span_m": 10.0,
    }


def derivatives_aircraft() -> dict:
    """A valid ``[aircraft]`` table of the user-derivative kind."""
    return {
        "model": "derivatives",
        "airspeed_mps": 53.6,
        "span_m": 11.0,
        "y_beta_mps2": -45.7,
        "l_beta_per_s2": -15.98,
        "l_p_per_s": -8.4,
        "l_r_per_s": 2.19,
        "n_beta_per_s2": 4.55,
        "n_p_per_s": -0.35,
        "n_r_per_s": -0.76,
        "l_da_per_s2": 28.64,
        "n_da_per_s2": -0.22,
    }


def rich_docs() -> list[dict]:
    """Valid documents that between them use every section and model kind."""
    docs = [tomllib.loads(p.read_text()) for p in BUNDLED]
    base = minimal_doc()

    matrices = copy.deepcopy(base)
    matrices["aircraft"] = matrices_aircraft()
    matrices["sensor"]["gyro"] = {"rate_hz": 100.0, "noise_deg_s": 0.1, "bias_deg_s": 0.2}
    matrices["controller"]["derivative"] = "gyro"
    matrices["disturbance"] = {
        "roll_moment_deg_s2": 1.0,
        "roll_moment_step_deg_s2": 2.0,
        "roll_moment_step_time_s": 1.0,
        "turbulence": {"intensity": "light", "altitude_ft": 500.0},
        "gust": [{"onset_s": 0.5, "length_m": 30.0, "channel": "side", "amplitude_mps": 3.0}],
    }
    docs.append(matrices)

    derivs = copy.deepcopy(base)
    derivs["aircraft"] = derivatives_aircraft()
    derivs["initial"] = {"bank_deg": 5.0, "roll_rate_deg_s": 1.0, "sideslip_deg": 0.5}
    derivs["actuator"] = {"time_constant_s": 0.05, "limit_deg": 20.0, "rate_limit_deg_s": 80.0}
    derivs["command"] = {"profile": "sequence", "times_s": [0.0, 1.0], "banks_deg": [0.0, 10.0]}
    derivs["criteria"] = {
        "settling_band_deg": 1.0,
        "max_rms_error_deg": 5.0,
        "max_steady_error_deg": 2.0,
        "max_overshoot_pct": 30.0,
    }
    derivs["disturbance"] = {
        "turbulence": {"sigma_v_mps": 1.0, "sigma_w_mps": 1.0, "length_v_m": 500.0, "length_w_m": 500.0},
        "gust": [
            {"onset_s": 0.2, "length_m": 20.0, "channel": "roll", "amplitude_deg_s": 5.0, "hold_after": True}
        ],
    }
    docs.append(derivs)

    custom = copy.deepcopy(base)
    custom["controller"] = {
        "kind": "custom",
        "class": "mypkg.ctl:Mine",
        "rate_hz": 20.0,
        "params": {"gain": 1.0},
    }
    docs.append(custom)

    rolly = copy.deepcopy(base)
    rolly["aircraft"] = {
        "model": "roll-only",
        "roll_damping_per_s": 4.0,
        "aileron_power_per_s2": 30.0,
        "airspeed_mps": 30.0,
        "span_m": 3.0,
    }
    rolly["command"] = {"profile": "hold", "bank_deg": -5.0}
    rolly["disturbance"] = {"turbulence": {"wind_20ft_kt": 15.0, "altitude_m": 100.0}}
    docs.append(rolly)
    return docs


# --------------------------------------------------------------------- CLI runner
