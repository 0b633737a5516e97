"""Scenario files: load, validate, convert to SI, and build the loop.

A scenario is a TOML file with the sections ``[scenario]`` (title, story),
``[aircraft]``, ``[initial]``, ``[actuator]``, ``[sensor]``, ``[controller]``,
``[command]``, ``[disturbance]``, ``[run]`` and ``[criteria]``. Units are in
the key names; this module is the one place they are converted. Any mistake
raises :class:`~sim.errors.ScenarioError` with one line naming the file, the
key and the allowed range.
"""

from __future__ import annotations

import hashlib
import math
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np
from rollrig.sensors.camera import CameraConfig
from rollrig.sensors.gyro import GyroConfig

from .actuator import ActuatorSpec
from .aircraft_section import parse_aircraft
from .controller_section import ControllerSpec, parse_controller
from .disturbance_section import parse_disturbance
from .errors import ScenarioError
from .plant import LinearPlant
from .section import REQUIRED, Section, read_toml_file
from .sensor_section import parse_sensor

__all__ = [
    "Scenario",
    "RunSpec",
    "CommandSpec",
    "CriteriaSpec",
    "load_scenario",
    "parse_scenario",
    "build_setup",
]

SECTIONS = (
    "scenario",
    "aircraft",
    "initial",
    "actuator",
    "sensor",
    "controller",
    "command",
    "disturbance",
    "run",
    "criteria",
)
_D = math.radians
#: longest scenario title and story (characters): they go into every table, plot and manifest
MAX_TITLE, MAX_STORY = 200, 10_000


@dataclass(frozen=True)
class RunSpec:
    """Duration (s), base step (s), seed and number of Monte Carlo runs."""

    duration_s: float = 30.0
    base_step_s: float = 0.01
    seed: int = 1
    runs: int = 1

    @property
    def n_steps(self) -> int:
        return int(round(self.duration_s / self.base_step_s))


@dataclass(frozen=True)
class CommandSpec:
    """Piecewise-constant bank command: ``banks_rad[i]`` from ``times_s[i]`` on.

    ``times_s[0]`` is 0. The initial bank is in :class:`Scenario`'s ``x0``.
    For a coordinated turn (``profile = "turn"``), ``turn_rate_rad_s`` is the
    turn rate asked for (rad/s) and the bank follows from it (:func:`turn_bank_rad`).
    """

    times_s: tuple[float, ...]
    banks_rad: tuple[float, ...]
    turn_rate_rad_s: float | None = None

    def on_grid(self, t: np.ndarray) -> np.ndarray:
        idx = np.searchsorted(np.asarray(self.times_s), t + 1e-9, side="right") - 1
        return np.asarray(self.banks_rad)[np.clip(idx, 0, None)]


@dataclass(frozen=True)
class CriteriaSpec:
    """Pass/fail limits and metric bands (SI)."""

    settle_band_frac: float | None = 0.05
    settle_band_rad: float | None = None
    hold_band_rad: float = _D(2.0)
    bank_limit_rad: float = _D(35.0)
    max_settling_s: float | None = None
    max_overshoot_pct: float | None = None
    max_rms_error_rad: float | None = None
    max_steady_error_rad: float | None = None


@dataclass(frozen=True)
class Scenario:
    """A validated scenario, in SI units."""

    path: str
    sha256: str
    title: str
    story: str
    plant: LinearPlant
    x0: np.ndarray
    actuator: ActuatorSpec
    camera: CameraConfig
    gyro: GyroConfig | None
    controller: ControllerSpec
    command: CommandSpec
    disturbances: tuple
    run: RunSpec
    criteria: CriteriaSpec

    def with_run(self, **changes) -> Scenario:
        """A copy with some :class:`RunSpec` fields changed (e.g. ``runs``, ``seed``)."""
        return replace(self, run=replace(self.run, **changes))


def load_scenario(path: str | Path) -> Scenario:
    """Read and validate a scenario file."""
    p = Path(path)
    raw, _, doc = read_toml_file(p)
    return parse_scenario(doc, file=str(p), sha256=hashlib.sha256(raw).hexdigest())


def parse_scenario(doc: dict, *, file: str = "<scenario>", sha256: str = "") -> Scenario:
    """Validate an already-parsed TOML document."""
    top = Section(doc, file=file, path="top level")
    for key in doc:
        if key not in SECTIONS:
            top.known(SECTIONS)
            top.finish()  # raises with a suggestion

    def sec(name: str, req: bool = False) -> Section | None:
        # checked by top.sub, then named "[name]" (not "[top level.name]") in messages
        return None if top.sub(name, required=req) is None else Section(doc[name], file=file, path=name)

    about = sec("scenario")
    title, story = Path(file).stem[:MAX_TITLE], ""
    if about is not None:
        title = about.string("title", title, max_len=MAX_TITLE)
        story = about.string("story", "", max_len=MAX_STORY)
        about.finish()

    run = _parse_run(sec("run"))
    plant = parse_aircraft(sec("aircraft", True))
    x0 = _parse_initial(sec("initial"), plant)
    actuator = _parse_actuator(sec("actuator"))
    camera, gyro = parse_sensor(sec("sensor"), base_step_s=run.base_step_s)
    controller = parse_controller(
        sec("controller", True), base_step_s=run.base_step_s, aileron_limit_rad=actuator.limit_rad
    )
    if controller.pid is not None and controller.pid.derivative_source == "gyro" and gyro is None:
        raise ScenarioError(
            f'{file}: [controller] derivative = "gyro" needs a [sensor.gyro] table; '
            'allowed: "measurement" without a gyro'
        )
    command = _parse_command(sec("command"), run, x0[plant.phi_index], airspeed_mps=plant.airspeed_mps)
    disturbances = tuple(
        parse_disturbance(
            sec("disturbance"),
            airspeed_mps=plant.airspeed_mps,
            span_m=plant.span_m,
            has_gust_inputs=bool(np.any(plant.b_disturbance[:, :3])),
        ).sources
    )
    criteria = _parse_criteria(sec("criteria"))
    return Scenario(
        path=file,
        sha256=sha256,
        title=title,
        story=story,
        plant=plant,
        x0=x0,
        actuator=actuator,
        camera=camera,
        gyro=gyro,
        controller=controller,
        command=command,
        disturbances=disturbances,
        run=run,
        criteria=criteria,
    )


# ------------------------------------------------------------------ sections
def _parse_run(s: Section | None) -> RunSpec:
    if s is None:
        return RunSpec()
    run = RunSpec(
        duration_s=s.number("duration_s", 30.0, lo=0.0, hi=3600.0, lo_open=True),
        base_step_s=s.number("base_step_s", 0.01, lo=1e-4, hi=0.1),
        seed=s.integer("seed", 1, lo=0, hi=2**63 - 1),
        runs=s.integer("runs", 1, lo=1, hi=100_000),
    )
    if run.n_steps < 2:
        raise s.error(
            "duration_s",
            f"= {run.duration_s:g} is shorter than two base steps; "
            f"allowed: duration_s ≥ {2 * run.base_step_s:g} (2 × base_step_s)",
        )
    s.finish()
    return run


def _parse_initial(s: Section | None, plant: LinearPlant) -> np.ndarray:
    x0 = np.zeros(plant.n_states)
    if s is None:
        return x0
    x0[plant.phi_index] = _D(s.number("bank_deg", 0.0, lo=-90.0, hi=90.0))
    x0[plant.p_index] = _D(s.number("roll_rate_deg_s", 0.0, lo=-360.0, hi=360.0))
    if "beta" in plant.state_names:
        x0[plant.state_names.index("beta")] = _D(s.number("sideslip_deg", 0.0, lo=-30.0, hi=30.0))
    s.finish()
    return x0


def _parse_actuator(s: Section | None) -> ActuatorSpec:
    if s is None:
        return ActuatorSpec()
    spec = ActuatorSpec(
        time_constant_s=s.number("time_constant_s", 0.08, lo=0.0, hi=5.0),
        limit_rad=_D(s.number("limit_deg", 20.0, lo=0.0, hi=60.0, lo_open=True)),
        rate_limit_rad_s=_D(s.number("rate_limit_deg_s", 60.0, lo=0.0, hi=10_000.0, lo_open=True)),
    )
    s.finish()
    return spec


#: Standard-rate turn: 3°/s (360° in two minutes), the instrument-flying convention.
STANDARD_RATE_DEG_S = 3.0


def turn_bank_rad(turn_rate_rad_s: float, airspeed_mps: float, g: float = 9.80665) -> float:
    """Bank of a coordinated level turn: ``tan φ = V·ω/g`` (rad; ``g`` standard gravity, m/s²)."""
    return math.atan(airspeed_mps * turn_rate_rad_s / g)


def _parse_command(s: Section | None, run: RunSpec, bank0: float, *, airspeed_mps: float) -> CommandSpec:
    if s is None:
        return CommandSpec((0.0,), (0.0,))
    profile = s.string("profile", "hold", choices=("hold", "step", "sequence", "turn"))
    lim = dict(lo=-90.0, hi=90.0)
    if profile == "turn":
        at = s.number("at_s", 1.0, lo=0.0, hi=run.duration_s, hi_open=True)
        start = _D(s.number("from_deg", math.degrees(bank0), **lim))
        standard = s.boolean("standard_rate", False)
        if standard and s.has("turn_rate_deg_s"):
            raise s.error(
                "turn_rate_deg_s", "cannot be given with standard_rate = true; allowed: one of them"
            )
        default = STANDARD_RATE_DEG_S if standard else REQUIRED
        rate_deg = s.number("turn_rate_deg_s", default, lo=-30.0, hi=30.0)
        if standard and s.string("direction", "right", choices=("right", "left")) == "left":
            rate_deg = -rate_deg
        bank = turn_bank_rad(_D(rate_deg), airspeed_mps)
        if abs(bank) > _D(60.0):
            raise s.error(
                "turn_rate_deg_s",
                f"= {rate_deg:g} needs {math.degrees(bank):.1f}° of bank at {airspeed_mps:g} m/s; "
                "allowed: a rate needing at most 60°",
            )
        spec = CommandSpec((0.0, at), (start, bank), turn_rate_rad_s=_D(rate_deg))
        _check_segments(s, spec, run, profile, bank0)
        s.finish()
        return spec
    if profile == "hold":
        spec = CommandSpec((0.0,), (_D(s.number("bank_deg", 0.0, **lim)),))
    elif profile == "step":
        at = s.number("at_s", 1.0, lo=0.0, hi=run.duration_s, hi_open=True)
        start = _D(s.number("from_deg", math.degrees(bank0), **lim))
        spec = CommandSpec((0.0, at), (start, _D(s.number("to_deg", **lim))))
    else:
        times = s.array("times_s", shape=(None,), lo=0.0, hi=run.duration_s)
        banks = s.array("banks_deg", shape=(None,), **lim)
        if times.size != banks.size or times.size == 0:
            raise s.error(
                "banks_deg", f"has {banks.size} values; allowed: one per entry of times_s ({times.size})"
            )
        if np.any(np.diff(times) <= 0):
            raise s.error("times_s", "must be strictly increasing; allowed: each time after the one before")
        if times[0] > 0:
            times = np.concatenate([[0.0], times])
            banks = np.concatenate([[math.degrees(bank0)], banks])
        spec = CommandSpec(tuple(times.tolist()), tuple(np.radians(banks).tolist()))
    _check_segments(s, spec, run, profile, bank0)
    s.finish()
    return spec


def _check_segments(s: Section, spec: CommandSpec, run: RunSpec, profile: str, bank0: float) -> None:
    """Each command change inside the run is held for at least two base steps.

    The step metrics judge a change over the samples until the next change
    (or the end of the run); fewer than two samples cannot be judged, so
    ``check`` refuses here what ``run`` could not evaluate. A command at
    ``t = 0`` that differs from the initial bank is a change too.
    """
    end = run.n_steps * run.base_step_s  # the last sample's time
    need = 2 * run.base_step_s
    times = spec.times_s
    for i, t0 in enumerate(times):
        if t0 >= end or (t0 <= 0 and abs(spec.banks_rad[0] - bank0) <= 1e-12):
            continue  # (the same rule as the metric settings' steps: runner.metric_spec)
        t1 = min(times[i + 1], end) if i + 1 < len(times) else end
        if t1 - t0 < need - 1e-9 * max(1.0, end):
            key = "at_s" if profile == "step" else "times_s"
            nxt = "the end of the run" if t1 >= end else f"the next change at {t1:g} s"
            raise s.error(
                key,
                f"the change at {t0:g} s is held only {t1 - t0:.6g} s before {nxt}; allowed: each "
                f"change held ≥ 2 × base_step_s = {need:g} s (and at most {end - need:g} s into the run)",
            )


def _parse_criteria(s: Section | None) -> CriteriaSpec:
    if s is None:
        return CriteriaSpec()
    pct = s.number("settling_band_pct", None, lo=0.0, hi=50.0, lo_open=True)
    deg = s.number("settling_band_deg", None, lo=0.0, hi=30.0, lo_open=True)
    if pct is not None and deg is not None:
        raise s.error(
            "settling_band_deg", "cannot be given together with settling_band_pct; allowed: one of them"
        )
    opt = lambda key, hi: s.number(key, None, lo=0.0, hi=hi, lo_open=True)  # noqa: E731
    rad = lambda v: None if v is None else _D(v)  # noqa: E731
    spec = CriteriaSpec(
        settle_band_frac=None if deg is not None else (pct if pct is not None else 5.0) / 100.0,
        settle_band_rad=rad(deg),
        hold_band_rad=_D(s.number("hold_band_deg", 2.0, lo=0.0, hi=45.0, lo_open=True)),
        bank_limit_rad=_D(s.number("bank_limit_deg", 35.0, lo=0.0, hi=180.0, lo_open=True)),
        max_settling_s=opt("max_settling_s", 3600.0),
        max_overshoot_pct=s.number("max_overshoot_pct", None, lo=0.0, hi=1000.0),
        max_rms_error_rad=rad(opt("max_rms_error_deg", 90.0)),
        max_steady_error_rad=rad(opt("max_steady_error_deg", 90.0)),
    )
    s.finish()
    return spec


# Built here before sim.build existed; kept importable from here.
from .build import build_setup  # noqa: E402
