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
from rollrig.controllers.pid import PIDController

from .core import LoopSetup
from .errors import ScenarioError

if TYPE_CHECKING:
    from .controller_section import ControllerSpec
    from .scenario import Scenario

__all__ = ["build_setup", "make_controller", "build"]


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


def make_controller(spec: ControllerSpec, *, allow_code: bool = False) -> Controller:
    """Instantiate the controller a spec names.

    Raises
    ------
    ScenarioError
        For a custom class when ``allow_code`` is false, or when it cannot be
        imported or built.
    """
    if spec.kind == "pid":
        return PIDController(spec.pid)
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
    return build_setup(sc), make_controller(sc.controller, allow_code=allow_code)
