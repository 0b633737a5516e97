"""rollrig: a testbed for roll-hold autopilots fed by a camera reading the attitude instrument.

The installed package has three subpackages, kept as top-level folders in the
source tree and mapped here by ``pyproject.toml``:

* :mod:`rollrig.sim` — plant models, the stepping core, metrics, scenarios and
  everything that drives the core (analysis, reports, the CLI);
* :mod:`rollrig.sensors` — the camera-reader model and the rate gyro (a leaf);
* :mod:`rollrig.controllers` — the controller protocol and the bundled
  controllers (a leaf).

The names below are the public API users script against. They are imported
lazily, so ``import rollrig`` costs nothing until one is used::

    import rollrig
    sc = rollrig.load_scenario("scenarios/light-single-wings-level.toml")
    outcome = rollrig.run_scenario(sc, run_indices=range(4))
    print(outcome.pass_summaries()["all"])

Simulation only: not certified; no substitute for flight test under the local
aviation authority and licensed practice.
"""

from __future__ import annotations

import importlib
from typing import Any


def _version() -> str:
    """The installed distribution's version (importlib.metadata costs ~0.15 s: looked up on first use)."""
    try:
        from importlib.metadata import PackageNotFoundError, version

        return version("rollrig")
    except PackageNotFoundError:  # pragma: no cover - running from a source tree
        return "0.0.0+source"


#: public name -> "module:attribute" (relative to this package)
_PUBLIC = {
    "Scenario": "sim.scenario:Scenario",
    "load_scenario": "sim.scenario:load_scenario",
    "parse_scenario": "sim.scenario:parse_scenario",
    "build_setup": "sim.scenario:build_setup",
    "make_controller": "sim.controller_section:make_controller",
    "LoopSetup": "sim.core:LoopSetup",
    "Stepper": "sim.core:Stepper",
    "simulate": "sim.core:simulate",
    "run_scenario": "sim.runner:run_scenario",
    "judge": "sim.runner:judge",
    "margins_report": "sim.analysis.margins_report:margins_report",
    "ScenarioError": "sim.errors:ScenarioError",
    "UserInputError": "sim.errors:UserInputError",
}

__all__ = ["__version__", *_PUBLIC]


def __getattr__(name: str) -> Any:
    if name == "__version__":
        globals()["__version__"] = v = _version()
        return v
    try:
        target = _PUBLIC[name]
    except KeyError:
        raise AttributeError(f"module 'rollrig' has no attribute {name!r}") from None
    module, attr = target.split(":")
    value = getattr(importlib.import_module(f".{module}", __name__), attr)
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return sorted(__all__)
