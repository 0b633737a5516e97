"""Write a scenario back to TOML, and the canonical hash of what is simulated.

The loader (:mod:`rollrig.sim.scenario`) turns a file into an immutable
:class:`~rollrig.sim.scenario.Scenario` in SI units. This module goes the other
way: any scenario — loaded, or built and changed in memory (tuned gains, a
sweep point) — becomes a TOML document in the file's units that the loader
reads back to an equal scenario.

* :func:`scenario_to_doc` — the canonical document (plain dict, file units,
  every key explicit);
* :func:`scenario_to_toml` — TOML text written by ``tomlkit``. Given the text
  of the file the scenario came from, sections that did not change are kept
  as the user wrote them (comments, readable forms such as
  ``intensity = "moderate"``), and changed keys keep their trailing comment;
* :func:`write_scenario` — the same, written atomically;
* :func:`canonical_hash` — SHA-256 of the canonical document without the
  ``[scenario]`` title and story, floats to 12 significant digits. Two
  scenarios with the same hash simulate the same thing; it goes into every
  output folder's manifest.

The bundled controller kinds are written by the table ``_CONTROLLER_WRITERS``;
other kinds register how they are written with :func:`register_controller_writer`.
"""

from __future__ import annotations

import hashlib
import json
import math
import os
import tempfile
from collections.abc import Callable
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import tomlkit

from . import presets

if TYPE_CHECKING:
    from .controller_section import ControllerSpec
    from .plant import LinearPlant
    from .scenario import Scenario

__all__ = [
    "scenario_to_doc",
    "scenario_to_toml",
    "write_scenario",
    "canonical_hash",
    "canonical_json",
    "register_controller_writer",
    "UnwritableScenario",
]

_deg = math.degrees
#: significant digits kept when comparing or hashing floats (degree/radian
#: conversions differ in the last bit or two; 12 digits are far below any
#: physical tolerance and far above that noise)
HASH_DIGITS = 12


class UnwritableScenario(ValueError):
    """The scenario holds something a scenario file cannot express (per-run arrays, …)."""


# ---------------------------------------------------------------- values
def _num(value: Any, where: str, arrays: bool) -> Any:
    """A number for the document; per-run arrays only when ``arrays`` (hashing)."""
    if isinstance(value, np.ndarray) and value.ndim > 0:
        if not arrays:
            raise UnwritableScenario(
                f"{where} holds a per-run array of {value.size} values; a scenario file holds one value"
            )
        return [float(v) for v in value.ravel()]
    if isinstance(value, (bool, np.bool_)):
        return bool(value)
    if isinstance(value, (int, np.integer)):
        return int(value)
    return float(value)


def _deg_of(value: Any, where: str, arrays: bool) -> Any:
    v = _num(value, where, arrays)
    return [_deg(x) for x in v] if isinstance(v, list) else _deg(v)


def _matrix(a: np.ndarray) -> list[list[float]]:
    return [[float(x) for x in row] for row in np.asarray(a, float)]


# ---------------------------------------------------------------- sections
def _same_plant(p: LinearPlant, q: LinearPlant) -> bool:
    return (
        p.state_names == q.state_names
        and p.a.shape == q.a.shape
        and np.array_equal(p.a, q.a)
        and np.array_equal(p.b_control, q.b_control)
        and np.array_equal(p.b_disturbance, q.b_disturbance)
        and p.airspeed_mps == q.airspeed_mps
        and p.span_m == q.span_m
    )


def _aircraft(plant: LinearPlant) -> dict[str, Any]:
    """A preset by name when the plant is one exactly; otherwise its matrices."""
    v = float(plant.airspeed_mps)
    if _same_plant(plant, presets.light_single()):
        return {"model": "light-single"}
    if plant.state_names == ("beta", "p", "r", "phi") and 12.0 <= v <= 40.0:
        if _same_plant(plant, presets.small_uav(v)):
            return {"model": "small-uav", "airspeed_mps": v}
    if plant.state_names == ("p", "phi"):
        a1, a2 = -float(plant.a[0, 0]), float(plant.b_control[0, 0])
        if _same_plant(plant, presets.roll_only(a1, a2, airspeed_mps=v, span_m=plant.span_m)):
            out = {
                "model": "roll-only",
                "roll_damping_per_s": a1,
                "aileron_power_per_s2": a2,
                "airspeed_mps": v,
            }
            if plant.span_m is not None:
                out["span_m"] = float(plant.span_m)
            return out
    out: dict[str, Any] = {
        "model": "matrices",
        "states": list(plant.state_names),
        "a": _matrix(plant.a),
        "b": _matrix(plant.b_control),
        "b_disturbance": _matrix(plant.b_disturbance),
        "airspeed_mps": v,
    }
    if plant.span_m is not None:
        out["span_m"] = float(plant.span_m)
    if float(np.max(np.linalg.eigvals(plant.a).real)) > 0.0:
        out["allow_unstable"] = True
    return out


def _initial(sc: Scenario, arrays: bool) -> dict[str, Any]:
    names = sc.plant.state_names
    x0 = np.asarray(sc.x0, float)
    if x0.ndim != 1:
        if not arrays:
            raise UnwritableScenario("[initial] holds per-run initial states; a scenario file holds one")
        return {"x0": x0.tolist()}
    keys = {"phi": "bank_deg", "p": "roll_rate_deg_s", "beta": "sideslip_deg"}
    out = {}
    for i, name in enumerate(names):
        if name in keys:
            out[keys[name]] = _deg(float(x0[i]))
        elif x0[i] != 0.0:
            raise UnwritableScenario(f"[initial] state {name!r} = {x0[i]:g} has no scenario-file key")
    return out


def _sensor(sc: Scenario, arrays: bool) -> dict[str, Any]:
    c = sc.camera
    w = "[sensor]"
    out: dict[str, Any] = {
        "frame_rate_hz": _num(c.frame_rate_hz, w, arrays),
        "jitter_s": _num(c.jitter_s, w, arrays),
        "exposure_s": _num(c.exposure_s, w, arrays),
        "latency_s": _num(c.latency_s, w + " latency_s", arrays),
        "latency_jitter_s": _num(c.latency_jitter_s, w, arrays),
        "noise_deg": _deg_of(c.noise_rad, w + " noise", arrays),
        "wander_deg": _deg_of(c.wander_rad, w + " wander", arrays),
        "wander_time_s": _num(c.wander_time_s, w, arrays),
        "bias_deg": _deg_of(c.bias_rad, w + " bias", arrays),
        "scale": _num(c.scale, w + " scale", arrays),
        "quantization_deg": _deg_of(c.quantization_rad, w, arrays),
        "outlier_prob": _num(c.outlier_prob, w, arrays),
        "outlier_deg": _deg_of(c.outlier_rad, w, arrays),
        "range_deg": _deg_of(c.range_rad, w, arrays),
        "beyond_range": c.beyond_range,
        "dropout_prob": _num(c.dropout_prob, w + " dropout_prob", arrays),
    }
    if c.classifier is not None:
        k = c.classifier
        out["classifier"] = {
            "class_width_deg": _deg_of(k.class_width_rad, "[sensor.classifier]", arrays),
            "sharpness": _num(k.sharpness, "[sensor.classifier]", arrays),
            "decode": k.decode,
        }
    if c.bursts is not None:
        b = c.bursts
        out["bursts"] = {
            "loss_rate": _num(b.loss_rate, "[sensor.bursts] loss_rate", arrays),
            "mean_burst_frames": _num(b.mean_burst_frames, "[sensor.bursts]", arrays),
        }
    if sc.gyro is not None:
        g = sc.gyro
        w = "[sensor.gyro]"
        out["gyro"] = {
            "rate_hz": _num(g.rate_hz, w, arrays),
            "noise_deg_s": _deg_of(g.noise_rad_s, w, arrays),
            "bias_deg_s": _deg_of(g.bias_rad_s, w, arrays),
            "bias_drift_deg_s": _deg_of(g.bias_drift_rad_s, w, arrays),
            "bias_drift_time_s": _num(g.bias_drift_time_s, w, arrays),
        }
    return out


def _pid(spec: ControllerSpec, arrays: bool) -> dict[str, Any]:
    p, w = spec.pid, "[controller]"
    return {
        "kind": "pid",
        "rate_hz": float(spec.rate_hz),
        "kp": _num(p.kp, w + " kp", arrays),
        "ki_per_s": _num(p.ki_per_s, w + " ki_per_s", arrays),
        "kd_s": _num(p.kd_s, w + " kd_s", arrays),
        "derivative": p.derivative_source,
        "derivative_filter_hz": _num(p.derivative_filter_hz, w, arrays),
        "output_limit_deg": _deg_of(p.output_limit_rad, w, arrays),
        "integrator_limit_deg": _deg_of(p.integrator_limit_rad, w, arrays),
        "stale_after_s": _num(p.stale_after_s, w, arrays),
        "hold_s": _num(p.hold_s, w, arrays),
        "fade_s": _num(p.fade_s, w, arrays),
    }


#: ``params`` of the bundled model-based kinds: file key -> (params key, file value per SI value)
_OUTPUT_KEYS = {
    "output_limit_deg": ("output_limit_rad", True),
    "integrator_limit_deg": ("integrator_limit_rad", True),
    "stale_after_s": ("stale_after_s", False),
    "hold_s": ("hold_s", False),
    "fade_s": ("fade_s", False),
}
_PARAM_KEYS = {
    "cascade": {
        "k_bank_per_s": ("k_bank_per_s", False),
        "ki_bank_per_s2": ("ki_bank_per_s2", False),
        "k_rate_s": ("k_rate_s", False),
        "ki_rate": ("ki_rate", False),
        "max_rate_deg_s": ("max_rate_rad_s", True),
        "max_accel_deg_s2": ("max_accel_rad_s2", True),
        **_OUTPUT_KEYS,
    },
    "lqg": {
        "max_bank_error_deg": ("max_bank_error_rad", True),
        "max_rate_deg_s": ("max_rate_rad_s", True),
        "max_aileron_deg": ("max_aileron_rad", True),
        "max_integral_deg_s": ("max_integral_rad_s", True),
        "accel_noise_psd_rad2_s3": ("accel_psd", False),
        "camera_noise_deg": ("camera_noise_rad", True),
        "gyro_noise_deg_s": ("gyro_noise_rad_s", True),
        "use_gyro": ("use_gyro", False),
        **_OUTPUT_KEYS,
    },
    "smith": {"delay_from_age": ("from_age", False), "delay_s": ("delay_s", False)},
}


def _model_based(spec: ControllerSpec, arrays: bool) -> dict[str, Any]:
    """Cascade, LQG and Smith predictor: their ``params`` back to file keys (None = not given)."""
    out = _pid(spec, arrays) if spec.kind == "smith" else {"kind": spec.kind, "rate_hz": float(spec.rate_hz)}
    out["kind"] = spec.kind
    where = f"[controller] ({spec.kind})"
    for key, (name, degrees) in _PARAM_KEYS[spec.kind].items():
        value = spec.params.get(name)
        if value is not None:
            out[key] = _deg_of(value, where, arrays) if degrees else _num(value, where, arrays)
    return out


def _custom(spec: ControllerSpec, arrays: bool) -> dict[str, Any]:
    out: dict[str, Any] = {"kind": "custom", "rate_hz": float(spec.rate_hz), "class": spec.class_path}
    if spec.params:
        out["params"] = dict(spec.params)
    return out


def _policy(spec: ControllerSpec, arrays: bool) -> dict[str, Any]:
    """``[controller]`` table of a policy controller (the file by absolute path)."""
    return {"kind": "policy", "rate_hz": float(spec.rate_hz), "file": spec.policy[3]}


#: controller kind -> function(spec, arrays) -> [controller] table
_CONTROLLER_WRITERS: dict[str, Callable[[ControllerSpec, bool], dict[str, Any]]] = {
    "pid": _pid,
    "custom": _custom,
    "cascade": _model_based,
    "lqg": _model_based,
    "smith": _model_based,
    "policy": _policy,
}


def register_controller_writer(kind: str, writer: Callable[[ControllerSpec, bool], dict[str, Any]]) -> None:
    """Say how a controller kind's spec is written as a ``[controller]`` table.

    ``writer(spec, arrays)`` returns the table in file units; with ``arrays``
    false it must raise :class:`UnwritableScenario` for per-run arrays.
    """
    _CONTROLLER_WRITERS[kind] = writer


def _controller(spec: ControllerSpec, arrays: bool) -> dict[str, Any]:
    try:
        writer = _CONTROLLER_WRITERS[spec.kind]
    except KeyError:
        raise UnwritableScenario(f"[controller] kind {spec.kind!r} has no scenario writer") from None
    out = writer(spec, arrays)
    if getattr(spec, "label", ""):
        out["label"] = spec.label
    return out


def _command(sc: Scenario) -> dict[str, Any]:
    times, banks = sc.command.times_s, sc.command.banks_rad
    if len(times) == 1:
        return {"profile": "hold", "bank_deg": _deg(banks[0])}
    return {
        "profile": "sequence",
        "times_s": [float(t) for t in times],
        "banks_deg": [_deg(b) for b in banks],
    }


def _disturbance(sc: Scenario, arrays: bool) -> dict[str, Any]:
    out: dict[str, Any] = {}
    gusts = []
    for src in sc.disturbances:
        kind = type(src).__name__
        if kind == "SteadyRollMoment":
            out["roll_moment_deg_s2"] = _deg_of(src.accel_rad_s2, "[disturbance]", arrays)
            if src.step_time_s is not None:
                out["roll_moment_step_deg_s2"] = _deg_of(src.step_accel_rad_s2, "[disturbance]", arrays)
                out["roll_moment_step_time_s"] = float(src.step_time_s)
        elif kind == "DrydenTurbulence":
            p = src.params
            w = "[disturbance.turbulence]"
            out["turbulence"] = {
                "sigma_v_mps": _num(p.sigma_v_mps, w, arrays),
                "sigma_w_mps": _num(p.sigma_w_mps, w, arrays),
                "length_v_m": _num(p.length_v_m, w, arrays),
                "length_w_m": _num(p.length_w_m, w, arrays),
            }
        elif kind == "OneMinusCosineGust":
            g = {"onset_s": float(src.onset_s), "length_m": float(src.length_m)}
            if src.channel == "v_gust":
                g |= {"channel": "side", "amplitude_mps": _num(src.amplitude, "[[disturbance.gust]]", arrays)}
            else:
                g |= {
                    "channel": "roll",
                    "amplitude_deg_s": _deg_of(src.amplitude, "[[disturbance.gust]]", arrays),
                }
            g["hold_after"] = bool(src.hold_after)
            gusts.append(g)
        else:
            raise UnwritableScenario(f"[disturbance] source {kind} has no scenario-file form")
    if gusts:
        out["gust"] = gusts
    return out


def _criteria(sc: Scenario) -> dict[str, Any]:
    c = sc.criteria
    out: dict[str, Any] = {}
    if c.settle_band_rad is not None:
        out["settling_band_deg"] = _deg(c.settle_band_rad)
    elif c.settle_band_frac is not None:
        out["settling_band_pct"] = 100.0 * c.settle_band_frac
    out["hold_band_deg"] = _deg(c.hold_band_rad)
    out["bank_limit_deg"] = _deg(c.bank_limit_rad)
    for key, value, conv in (
        ("max_settling_s", c.max_settling_s, float),
        ("max_overshoot_pct", c.max_overshoot_pct, float),
        ("max_rms_error_deg", c.max_rms_error_rad, _deg),
        ("max_steady_error_deg", c.max_steady_error_rad, _deg),
    ):
        if value is not None:
            out[key] = conv(value)
    return out


def scenario_to_doc(sc: Scenario, *, arrays: bool = False) -> dict[str, Any]:
    """The canonical document of a scenario: file units, every key explicit.

    Parameters
    ----------
    sc : Scenario
    arrays : bool
        Allow per-run arrays (as lists) — for hashing; a file cannot hold them.

    Raises
    ------
    UnwritableScenario
        For per-run arrays (unless ``arrays``), or parts with no file form.
    """
    doc: dict[str, Any] = {"scenario": {"title": sc.title}}
    if sc.story:
        doc["scenario"]["story"] = sc.story
    doc["aircraft"] = _aircraft(sc.plant)
    initial = _initial(sc, arrays)
    if initial:
        doc["initial"] = initial
    a = sc.actuator
    doc["actuator"] = {
        "time_constant_s": _num(a.time_constant_s, "[actuator]", arrays),
        "limit_deg": _deg_of(a.limit_rad, "[actuator]", arrays),
        "rate_limit_deg_s": _deg_of(a.rate_limit_rad_s, "[actuator]", arrays),
    }
    doc["sensor"] = _sensor(sc, arrays)
    doc["controller"] = _controller(sc.controller, arrays)
    doc["command"] = _command(sc)
    dist = _disturbance(sc, arrays)
    if dist:
        doc["disturbance"] = dist
    r = sc.run
    doc["run"] = {
        "duration_s": float(r.duration_s),
        "base_step_s": float(r.base_step_s),
        "seed": int(r.seed),
        "runs": int(r.runs),
    }
    doc["criteria"] = _criteria(sc)
    return doc


# ---------------------------------------------------------------- hashing
def _normalised(value: Any) -> Any:
    if isinstance(value, dict):
        return {k: _normalised(v) for k, v in value.items()}
    if isinstance(value, list):
        return [_normalised(v) for v in value]
    if isinstance(value, float):
        return float(f"{value:.{HASH_DIGITS}g}") + 0.0  # + 0.0 folds -0.0 into 0.0
    return value


def canonical_json(sc: Scenario) -> str:
    """What is simulated, as sorted JSON (no title or story; floats to 12 digits)."""
    doc = scenario_to_doc(sc, arrays=True)
    doc.pop("scenario", None)
    return json.dumps(_normalised(doc), sort_keys=True, separators=(",", ":"))


def canonical_hash(sc: Scenario) -> str:
    """SHA-256 (hex) of :func:`canonical_json`: equal hashes simulate the same thing."""
    return hashlib.sha256(canonical_json(sc).encode()).hexdigest()


# ---------------------------------------------------------------- TOML
def _keys_within(template: Any, new: Any) -> bool:
    """Every key of the template's table also exists in the new table (recursively)."""
    if not isinstance(template, dict) or not isinstance(new, dict):
        return True
    return all(k in new and _keys_within(template[k], new[k]) for k in template)


def _merge_table(table: Any, new: dict[str, Any], old_canon: dict[str, Any]) -> None:
    """Update a tomlkit table in place to hold ``new``, keeping comments of unchanged keys."""
    for key in [k for k in table if k not in new]:
        del table[key]
    for key, value in new.items():
        if key in table and _normalised(old_canon.get(key)) == _normalised(value):
            continue  # unchanged: keep the user's text and comment
        if key in table and isinstance(value, dict) and isinstance(table[key], dict):
            _merge_table(table[key], value, old_canon.get(key) or {})
            continue
        comment = None
        if key in table:
            trivia = getattr(table[key], "trivia", None)
            comment = trivia.comment if trivia is not None else None
        table[key] = value
        if comment:
            table[key].comment(comment.lstrip("# ").rstrip())


def scenario_to_toml(sc: Scenario, *, template: str | None = None) -> str:
    """TOML text that loads back to ``sc``.

    Parameters
    ----------
    sc : Scenario
    template : str, optional
        Text of the file the scenario came from. Sections whose meaning did
        not change are kept as written; changed sections are rewritten key by
        key where the user's keys are a subset of the canonical ones (their
        trailing comments kept), otherwise as a whole.
    """
    from .scenario import parse_scenario

    new = scenario_to_doc(sc)
    plain = tomlkit.dumps(new)
    if template is None:
        return plain
    try:
        tdoc = tomlkit.parse(template)
        old_canon = scenario_to_doc(parse_scenario(tdoc.unwrap(), file="<template>"))
    except Exception:  # a template that no longer loads: write the canonical form
        return plain
    for name in [k for k in tdoc if k not in new]:
        del tdoc[name]
    for name, table in new.items():
        if name not in tdoc:
            tdoc[name] = table
        elif _normalised(old_canon.get(name)) == _normalised(table):
            continue
        elif _keys_within(tdoc[name].unwrap(), table):
            _merge_table(tdoc[name], table, old_canon.get(name) or {})
        else:
            tdoc[name] = table
    text = tomlkit.dumps(tdoc)
    # the merged text must mean exactly the scenario; otherwise write the plain form
    try:
        same = canonical_hash(
            parse_scenario(tomlkit.parse(text).unwrap(), file="<merged>")
        ) == canonical_hash(sc)
    except Exception:
        same = False
    return text if same else plain


def write_scenario(sc: Scenario, path: str | os.PathLike[str], *, template: str | None = None) -> Path:
    """Write :func:`scenario_to_toml` to ``path`` atomically (temp file, then rename)."""
    target = Path(path)
    text = scenario_to_toml(sc, template=template)
    fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.", dir=target.parent)
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as fh:
            fh.write(text)
        os.chmod(tmp, 0o666 & ~_umask())
        os.replace(tmp, target)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise
    return target


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask
