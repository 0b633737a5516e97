"""Build what a scenario describes: the stepping core's setup and the controller.

One place turns a validated :class:`~rollrig.sim.scenario.Scenario` (immutable,
SI) into the objects a simulation runs: :func:`build_setup` gives the
:class:`~rollrig.sim.core.LoopSetup` (plant, servo, camera, gyro, command on
the base grid, initial state, disturbances) and :func:`make_controller` the
controller instance (which owns its own mutable state). Every workflow — the
CLI, margins, comparison, tuning, sweeps, the gym environment — builds here.
"""

from __future__ import annotations

import importlib
from typing import TYPE_CHECKING

import numpy as np
from rollrig.controllers.base import Controller
from rollrig.controllers.model import LoopModel
from rollrig.controllers.pid import PIDController

from .core import LoopSetup
from .errors import ScenarioError

if TYPE_CHECKING:
    from .controller_section import ControllerSpec
    from .scenario import Scenario

__all__ = ["build_setup", "make_controller", "build", "loop_model"]


def build_setup(sc: Scenario) -> LoopSetup:
    """The stepping core's setup for a scenario."""
    run = sc.run
    n = run.n_steps
    t = np.arange(n + 1) * run.base_step_s
    every = int(round(1.0 / (sc.controller.rate_hz * run.base_step_s)))
    return LoopSetup(
        plant=sc.plant,
        dt=run.base_step_s,
        n_steps=n,
        ctrl_every=every,
        actuator=sc.actuator,
        camera=sc.camera,
        gyro=sc.gyro,
        bank_cmd=sc.command.on_grid(t),
        x0=sc.x0,
        disturbances=sc.disturbances,
    )


def make_controller(
    spec: ControllerSpec, *, allow_code: bool = False, scenario: Scenario | None = None
) -> Controller:
    """Instantiate the controller a spec names.

    The bundled kinds other than ``pid`` take their model, sensor-noise and
    delay defaults from ``scenario`` (see :func:`_bundled`).

    Raises
    ------
    ScenarioError
        For a custom class when ``allow_code`` is false, or when it cannot be
        imported or built; for a kind that needs a gyro on a scenario without one.
    """
    if spec.kind == "pid":
        return PIDController(spec.pid)
    if spec.kind == "policy":  # arrays and JSON loaded at parse time; no code runs
        from rollrig.controllers.policy import PolicyController

        net, layout, meta, path = spec.policy
        where = f"{spec.file}: [controller] file = {path!r}"
        return PolicyController(net, layout, meta["action_scale_rad"], where=where, error=ScenarioError)
    if spec.kind in ("cascade", "lqg", "smith"):
        if scenario is None:
            raise ValueError(f"make_controller: kind {spec.kind!r} needs the scenario (its model)")
        return _bundled(spec, scenario)
    where = f"{spec.file}: [controller] class"
    if not allow_code:
        raise ScenarioError(
            f"{where} = {spec.class_path!r} would run your own code; "
            "allowed only with --allow-code on the command line"
        )
    mod_name, cls_name = spec.class_path.split(":")
    try:
        cls = getattr(importlib.import_module(mod_name), cls_name)
    except (ImportError, AttributeError) as exc:
        raise ScenarioError(f"{where} = {spec.class_path!r} cannot be imported: {exc}") from None
    try:
        ctrl = cls(**spec.params)
    except TypeError as exc:
        raise ScenarioError(f"{spec.file}: [controller.params] do not fit {cls_name}: {exc}") from None
    if not isinstance(ctrl, Controller):
        raise ScenarioError(f"{where} = {spec.class_path!r} lacks reset(batch) and step(obs) methods")
    return ctrl


def build(sc: Scenario, *, allow_code: bool = False) -> tuple[LoopSetup, Controller]:
    """Setup and a fresh controller for a scenario (``allow_code`` as in :func:`make_controller`)."""
    return build_setup(sc), make_controller(sc.controller, allow_code=allow_code, scenario=sc)


# ------------------------------------------------------------------ model-based kinds
def loop_model(sc: Scenario) -> LoopModel:
    """The scenario's aircraft + servo as a :class:`LoopModel` (input: aileron command)."""
    p = sc.plant
    n = p.n_states
    tau = sc.actuator.time_constant_s
    accel = np.asarray(p.b_disturbance, float)[:, 3]
    if tau <= 0:
        return LoopModel(
            a=np.array(p.a, float),
            b=np.array(p.b_control, float)[:, 0].copy(),
            phi_index=p.phi_index,
            p_index=p.p_index,
            accel_column=accel.copy(),
            state_names=tuple(p.state_names),
        )
    a = np.zeros((n + 1, n + 1))
    a[:n, :n] = p.a
    a[:n, n] = np.asarray(p.b_control, float)[:, 0]
    a[n, n] = -1.0 / tau
    b = np.zeros(n + 1)
    b[n] = 1.0 / tau
    return LoopModel(
        a=a,
        b=b,
        phi_index=p.phi_index,
        p_index=p.p_index,
        accel_column=np.append(accel, 0.0),
        state_names=(*p.state_names, "servo"),
    )


def _bundled(spec: ControllerSpec, sc: Scenario) -> Controller:
    """Cascade, LQG or Smith predictor, with the scenario's model and sensor defaults.

    Defaults taken from the scenario: the LQG's reading-noise figures (camera
    white noise, quantisation step²/12 and wandering error combined; gyro
    noise, bias and drift combined; floors 0.1° and 0.05°/s), its delay-line
    resolution (the base step) and length (largest latency + 5 × the mean
    random latency + 3 × the capture jitter + exposure + one tick + two base
    steps); the Smith predictor's delay estimate (the camera's mean effective
    delay, :func:`rollrig.sim.analysis.loop_from_scenario.camera_delay`).
    """
    from rollrig.controllers.cascade import CascadeConfig, CascadeController
    from rollrig.controllers.lqg import LQGConfig, LQGController
    from rollrig.controllers.smith import SmithConfig, SmithPredictor

    from .controller_section import NEEDS_GYRO

    q = dict(spec.params)
    if spec.kind in NEEDS_GYRO and sc.gyro is None:
        raise ScenarioError(
            f'{spec.file}: [controller] kind = "{spec.kind}" needs a rate gyro, but {sc.path} has no '
            "[sensor.gyro] table; allowed there: pid, lqg or smith"
        )
    if spec.kind == "cascade":
        return CascadeController(CascadeConfig(**q))
    model = loop_model(sc)
    tick = 1.0 / spec.rate_hz
    if spec.kind == "smith":
        from .analysis.loop_from_scenario import camera_delay

        delay = None if q["from_age"] else q["delay_s"]
        if delay is None and not q["from_age"]:
            delay = camera_delay(sc).total_s
        return SmithPredictor(SmithConfig(pid=spec.pid, model=model, delay_s=delay))
    cam, gyro = sc.camera, sc.gyro
    if q["camera_noise_rad"] is None:
        width = cam.classifier.class_width_rad if cam.classifier is not None else cam.quantization_rad
        var = cam.noise_rad**2 + width**2 / 12.0 + cam.wander_rad**2
        q["camera_noise_rad"] = max(float(np.sqrt(var)), np.radians(0.1))
    if q["gyro_noise_rad_s"] is None:
        var = 0.0 if gyro is None else gyro.noise_rad_s**2 + gyro.bias_rad_s**2 + gyro.bias_drift_rad_s**2
        q["gyro_noise_rad_s"] = max(float(np.sqrt(var)), np.radians(0.05))
    h = sc.run.base_step_s
    longest = (
        float(np.max(cam.latency_s))
        + 5.0 * cam.latency_jitter_s
        + 3.0 * cam.jitter_s
        + cam.exposure_s
        + tick
        + 2.0 * h
    )
    return LQGController(LQGConfig(model=model, delay_step_s=h, max_delay_s=longest, **q))
