"""One rule for per-run parameters: a scalar, or one value per run.

Every numeric parameter of the loop may differ from run to run within one
batch (a sweep, a robust-tuning population, a Monte Carlo set with dispersed
hardware): give it as a scalar (all runs) or as a ``(batch,)`` array (run
``i`` of the batch uses element ``i``). The bank command may be given per run
as ``(batch, n_steps + 1)`` and the initial state as ``(batch, n_x)``.
:func:`per_run` is the one check, with the one error message.

What may be per run, and what is shared
=======================================

This list is the single place that says it (:data:`PER_RUN` holds the field
names the code uses).

Per run (a scalar or ``(batch,)``):

* ``LoopSetup``: ``bank_cmd`` (``(batch, n+1)``), ``x0`` (``(batch, n_x)``);
* ``ActuatorSpec``: ``time_constant_s`` [#tau]_, ``limit_rad``, ``rate_limit_rad_s``;
* ``CameraConfig``: ``latency_s``, ``noise_rad``, ``bias_rad``, ``scale``,
  ``quantization_rad``, ``range_rad`` [#range]_, ``dropout_prob``, ``jitter_s``,
  ``exposure_s``, ``latency_jitter_s``, ``wander_rad``, ``wander_time_s``,
  ``outlier_prob``, ``outlier_rad``; ``BurstConfig``: ``loss_rate``,
  ``mean_burst_frames``;
* ``GyroConfig``: ``noise_rad_s``, ``bias_rad_s``, ``bias_drift_rad_s``,
  ``bias_drift_time_s``;
* ``PIDConfig``: ``kp``, ``ki_per_s``, ``kd_s``, ``derivative_filter_hz``,
  ``output_limit_rad``, ``integrator_limit_rad``, ``stale_after_s``,
  ``hold_s``, ``fade_s``;
* ``SteadyRollMoment``: ``accel_rad_s2``, ``step_accel_rad_s2``, ``step_time_s``;
* ``OneMinusCosineGust``: ``amplitude``, ``onset_s``;
* ``DrydenParams``: ``sigma_v_mps``, ``sigma_w_mps`` (the intensities).

Shared by the whole batch (structural):

* ``LoopSetup``: ``dt`` (base step), ``n_steps``, ``ctrl_every`` (controller
  rate), ``plant`` (its matrices), ``divergence_rad``;
* ``CameraConfig``: ``frame_rate_hz`` (the frame count is part of the
  timing plan's shape), ``beyond_range``, ``classifier``;
* ``GyroConfig``: ``rate_hz`` (the sample schedule);
* ``PIDConfig``: ``derivative_source``;
* ``OneMinusCosineGust``: ``length_m``, ``airspeed_mps``, ``channel``,
  ``hold_after``; ``DrydenParams``: scale lengths, airspeed, span (they
  set the filters' dynamics).

.. [#tau] Runs with different servo time constants need different
   discrete-time matrices: the core groups runs by value and pays one matrix
   product per distinct value and base step.
.. [#range] Per run only without a classifier (the classifier's classes
   cover the range, and the classes are shared).

Run ``i`` of a mixed batch equals run ``i`` simulated alone with its own
scalars, bit for bit: every per-run parameter is turned into a contiguous
``(batch,)`` float array before it is used, so a run alone goes through the
same arithmetic as a run in a batch.
"""

from __future__ import annotations

import dataclasses

import numpy as np
from rollrig.controllers.model import per_run  # the one check (controllers are leaves)
from rollrig.controllers.pid import PER_RUN_FIELDS as _PID_PER_RUN

__all__ = ["PER_RUN", "per_run", "per_run_rows", "resolve", "take", "put", "batch_size_of", "any_positive"]

#: Per-run fields of each parameter class (by class name), see the module table.
PER_RUN: dict[str, tuple[str, ...]] = {
    "ActuatorSpec": ("time_constant_s", "limit_rad", "rate_limit_rad_s"),
    "CameraConfig": (
        "latency_s",
        "noise_rad",
        "bias_rad",
        "scale",
        "quantization_rad",
        "range_rad",
        "dropout_prob",
        "jitter_s",
        "exposure_s",
        "latency_jitter_s",
        "wander_rad",
        "wander_time_s",
        "outlier_prob",
        "outlier_rad",
    ),
    "BurstConfig": ("loss_rate", "mean_burst_frames"),
    "GyroConfig": ("noise_rad_s", "bias_rad_s", "bias_drift_rad_s", "bias_drift_time_s"),
    "PIDConfig": _PID_PER_RUN,
    "SteadyRollMoment": ("accel_rad_s2", "step_accel_rad_s2", "step_time_s"),
    "OneMinusCosineGust": ("amplitude", "onset_s"),
    "DrydenParams": ("sigma_v_mps", "sigma_w_mps"),
}

#: Nested parameter objects, resolved with their parent.
_NESTED = {"CameraConfig": ("bursts",), "DrydenTurbulence": ("params",)}


def per_run_rows(value, batch: int, width: int, name: str) -> np.ndarray:
    """A per-run row (bank command, initial state): ``(width,)`` or ``(batch, width)``.

    Returns ``(batch, width)``.
    """
    a = np.asarray(value, dtype=float)
    if a.shape == (width,):
        return np.ascontiguousarray(np.broadcast_to(a, (batch, width)))
    if a.shape != (batch, width):
        raise ValueError(
            f"{name}: allowed: shape ({width},) or one row per run, shape ({batch}, {width}); "
            f"got shape {a.shape}"
        )
    return np.ascontiguousarray(a)


def any_positive(x) -> bool:
    """True when any element of a scalar or per-run parameter is > 0."""
    return bool(np.any(np.asarray(x) > 0))


def _fields(obj) -> tuple[tuple[str, ...], tuple[str, ...]]:
    cls = type(obj).__name__
    return PER_RUN.get(cls, ()), _NESTED.get(cls, ())


def resolve(obj, batch: int, where: str = ""):
    """A copy of a parameter object with every per-run field as a ``(batch,)`` array.

    Objects without per-run fields (and ``None``) come back unchanged; a
    field set to ``None`` (e.g. no step time) stays ``None``.
    """
    if obj is None:
        return None
    names, nested = _fields(obj)
    if not names and not nested:
        return obj
    prefix = f"{where}{type(obj).__name__}."
    changes = {}
    for name in names:
        v = getattr(obj, name)
        if v is not None:
            changes[name] = per_run(v, batch, prefix + name)
    for name in nested:
        sub = getattr(obj, name)
        if sub is not None:
            changes[name] = resolve(sub, batch, prefix)
    return _replace(obj, changes)


def take(obj, rows: np.ndarray):
    """A resolved parameter object restricted to the batch rows ``rows``."""
    if obj is None:
        return None
    names, nested = _fields(obj)
    if not names and not nested:
        return obj
    changes = {}
    for name in names:
        v = getattr(obj, name)
        if v is not None:
            changes[name] = np.ascontiguousarray(np.asarray(v)[rows])
    for name in nested:
        sub = getattr(obj, name)
        if sub is not None:
            changes[name] = take(sub, rows)
    return _replace(obj, changes)


def put(old, new, rows: np.ndarray, batch: int, where: str = ""):
    """``old`` with the per-run values of batch rows ``rows`` taken from ``new``.

    Both are parameter objects of the same class for a batch of ``batch``
    runs (scalars or ``(batch,)`` arrays, resolved or not). The result has
    every per-run field as a fresh ``(batch,)`` array: row ``rows[i]`` holds
    ``new``'s value there, every other row keeps ``old``'s. Fields that are
    shared by the batch (structural) must be equal in both.

    Raises
    ------
    ValueError
        When the two differ in a shared field, or one sets a field the other leaves ``None``.
    """
    if old is None and new is None:
        return None
    if old is None or new is None or type(old) is not type(new):
        raise ValueError(f"{where}: the new parameters must have the structure of the old ones")
    names, nested = _fields(old)
    prefix = f"{where}{type(old).__name__}."
    changes = {}
    for f in dataclasses.fields(old):
        a, b = getattr(old, f.name), getattr(new, f.name)
        if f.name in names:
            if (a is None) != (b is None):
                raise ValueError(f"{prefix}{f.name}: set in one setup and None in the other")
            if a is not None:
                merged = per_run(a, batch, prefix + f.name)
                merged[rows] = per_run(b, batch, prefix + f.name)[rows]
                changes[f.name] = merged
        elif f.name in nested:
            changes[f.name] = put(a, b, rows, batch, prefix)
        elif not _same(a, b):
            raise ValueError(f"{prefix}{f.name}: shared by the batch; allowed: the same value in both setups")
    return _replace(old, changes)


def _same(a, b) -> bool:
    if a is b:
        return True
    if isinstance(a, np.ndarray) or isinstance(b, np.ndarray):
        return np.shape(a) == np.shape(b) and bool(np.all(np.asarray(a) == np.asarray(b)))
    try:
        return bool(a == b)
    except ValueError:  # objects holding arrays
        return False


def _replace(obj, changes: dict):
    """``dataclasses.replace`` without re-running validation written for scalars."""
    new = object.__new__(type(obj))
    for f in dataclasses.fields(obj):
        object.__setattr__(new, f.name, changes.get(f.name, getattr(obj, f.name)))
    return new


def batch_size_of(*objs) -> int | None:
    """The batch size implied by per-run arrays in parameter objects, or None if all scalar.

    Raises ``ValueError`` when two per-run arrays disagree.
    """
    found: dict[int, str] = {}

    def visit(obj, where: str) -> None:
        if obj is None:
            return
        names, nested = _fields(obj)
        for name in names:
            v = getattr(obj, name)
            if v is not None and np.ndim(v) == 1:
                found.setdefault(len(v), f"{where}{type(obj).__name__}.{name}")
        for name in nested:
            visit(getattr(obj, name), where)

    for o in objs:
        if isinstance(o, (list, tuple)):
            for item in o:
                visit(item, "")
        else:
            visit(o, "")
    if len(found) > 1:
        sizes = ", ".join(f"{w} has {n}" for n, w in found.items())
        raise ValueError(f"per-run parameters disagree on the number of runs: {sizes}")
    return next(iter(found), None)
