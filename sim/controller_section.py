"""The ``[controller]`` section: a bundled controller, a controller file, or the user's own class.

Bundled kinds: ``pid``, ``cascade`` (outer bank loop, inner roll-rate loop
on the gyro; needs a gyro), ``lqg`` (Kalman filter with late readings at
their capture time, LQR) and ``smith`` (Smith predictor around the PID).
The model-based kinds get the aircraft and servo model from the scenario
when they are built (:mod:`rollrig.sim.build`); none of them runs user code.

A controller can also live in its own small TOML file holding one
``[controller]`` table with the same keys, referenced from a scenario
(``[controller] file = "lqg.toml"``, relative to the scenario) or given on
the command line (``rollrig compare``). ``label`` names a controller in
comparison tables.

A user class (``kind = "custom"``, ``class = "package.module:Name"``) runs
the user's code, so loading it needs the command line's explicit permission
(``--allow-code``); a scenario file alone never makes rollrig import code.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from rollrig.controllers.pid import PIDConfig

from .errors import ScenarioError
from .section import Section, read_toml_file

__all__ = [
    "ControllerSpec",
    "parse_controller",
    "load_controller_file",
    "make_controller",
    "KINDS",
    "NEEDS_GYRO",
]

KINDS = ("pid", "cascade", "lqg", "smith", "policy", "custom")
#: kinds that cannot work without a rate gyro
NEEDS_GYRO = ("cascade",)
_D = math.radians


@dataclass(frozen=True)
class ControllerSpec:
    """Which controller to build, and at what rate.

    Parameters
    ----------
    kind : {"pid", "cascade", "lqg", "smith", "custom"}
    rate_hz : Hz
        Controller rate (a whole number of base steps per tick).
    pid : PIDConfig or None
        Gains for ``kind = "pid"`` and ``"smith"``.
    class_path : str or None
        ``module:Class`` for ``kind = "custom"``.
    params : dict
        Keyword arguments for the custom class, or the bundled kind's
        settings in SI (``None`` where the scenario supplies the default).
    label : str
        Name shown in comparison tables.
    file : str
        File the section came from.
    """

    kind: str
    rate_hz: float
    pid: PIDConfig | None = None
    class_path: str | None = None
    params: dict[str, Any] = field(default_factory=dict)
    file: str = "<scenario>"
    label: str = ""
    policy: Any = None  # (PolicyNet, ObservationLayout, meta, path) for kind = "policy"

    @property
    def name(self) -> str:
        """Label, or the kind when no label was given."""
        return self.label or self.kind


def load_controller_file(
    path: str | Path, *, base_step_s: float, aileron_limit_rad: float, nested: bool = False
) -> ControllerSpec:
    """Read a controller file (one ``[controller]`` table) for a scenario's base step."""
    p = Path(path)
    _, _, doc = read_toml_file(p, "controller file")
    top = Section(doc, file=str(p), path="top level")
    sec = top.sub("controller", required=True)
    top.finish()
    sec = Section(doc["controller"], file=str(p), path="controller")
    if nested and sec.has("file"):
        raise sec.error("file", "a controller file cannot refer to another; allowed: the settings themselves")
    return parse_controller(sec, base_step_s=base_step_s, aileron_limit_rad=aileron_limit_rad)


def parse_controller(sec: Section, *, base_step_s: float, aileron_limit_rad: float) -> ControllerSpec:
    # a controller file by reference (for kind = "policy", "file" names its weights instead)
    if sec.has("file") and sec._get("kind", None) != "policy":
        ref = sec.string("file")
        sec.finish()  # a reference stands alone
        target = Path(sec.file).parent / ref
        return load_controller_file(
            target, base_step_s=base_step_s, aileron_limit_rad=aileron_limit_rad, nested=True
        )
    kind = sec.string("kind", "pid", choices=KINDS)
    label = sec.string("label", "")
    rate = sec.number("rate_hz", 50.0, lo=0.1, hi=1.0 / base_step_s)
    ratio = 1.0 / (rate * base_step_s)
    if abs(ratio - round(ratio)) > 1e-6:
        raise sec.error(
            "rate_hz",
            f"= {rate:g} is not a whole fraction of the base rate {1 / base_step_s:g} Hz; "
            f"allowed: {1 / base_step_s:g}/n Hz for whole n",
        )
    lim_deg = math.degrees(aileron_limit_rad)
    common = dict(kind=kind, rate_hz=rate, file=sec.file, label=label)
    if kind in ("pid", "smith"):
        pid = _parse_pid(sec, rate, lim_deg)
        params = {}
        if kind == "smith":
            params["from_age"] = sec.boolean("delay_from_age", False)
            params["delay_s"] = sec.number("delay_s", None, lo=0.0, hi=10.0)
            if params["from_age"] and params["delay_s"] is not None:
                raise sec.error("delay_s", "cannot be given with delay_from_age = true; allowed: one of them")
        sec.finish()
        return ControllerSpec(pid=pid, params=params, **common)
    if kind == "cascade":
        params = dict(
            k_bank_per_s=sec.number("k_bank_per_s", 2.0, lo=0.0, hi=100.0),
            ki_bank_per_s2=sec.number("ki_bank_per_s2", 0.2, lo=0.0, hi=100.0),
            k_rate_s=sec.number("k_rate_s", 0.15, lo=0.0, hi=100.0),
            ki_rate=sec.number("ki_rate", 0.0, lo=0.0, hi=100.0),
            max_rate_rad_s=_D(sec.number("max_rate_deg_s", 10.0, lo=0.0, hi=720.0, lo_open=True)),
            max_accel_rad_s2=_D(sec.number("max_accel_deg_s2", 5.0, lo=0.0, hi=10_000.0, lo_open=True)),
            **_output_keys(sec, lim_deg),
        )
        sec.finish()
        return ControllerSpec(params=params, **common)
    if kind == "lqg":
        opt_deg = lambda key, hi: (  # noqa: E731
            None if (v := sec.number(key, None, lo=0.0, hi=hi, lo_open=True)) is None else _D(v)
        )
        params = dict(
            max_bank_error_rad=_D(sec.number("max_bank_error_deg", 5.0, lo=0.0, hi=90.0, lo_open=True)),
            max_rate_rad_s=_D(sec.number("max_rate_deg_s", 30.0, lo=0.0, hi=720.0, lo_open=True)),
            max_aileron_rad=_D(
                sec.number("max_aileron_deg", min(10.0, lim_deg), lo=0.0, hi=90.0, lo_open=True)
            ),
            max_integral_rad_s=_D(sec.number("max_integral_deg_s", 10.0, lo=0.0, hi=1000.0, lo_open=True)),
            accel_psd=sec.number("accel_noise_psd_rad2_s3", 0.5, lo=0.0, hi=1e4, lo_open=True),
            camera_noise_rad=opt_deg("camera_noise_deg", 30.0),
            gyro_noise_rad_s=opt_deg("gyro_noise_deg_s", 100.0),
            use_gyro=sec.boolean("use_gyro", True),
            **_output_keys(sec, lim_deg, stale_default=0.5),
        )
        sec.finish()
        return ControllerSpec(params=params, **common)
    if kind == "policy":  # a trained policy file: arrays and JSON only, no code is loaded
        return ControllerSpec(policy=_load_policy(sec, rate), **common)
    path = sec.string("class")
    if path.count(":") != 1 or not all(path.split(":")):
        raise sec.error("class", f'= {path!r}; allowed: "package.module:ClassName"')
    params = sec.mapping("params")
    sec.finish()
    return ControllerSpec(class_path=path, params=params, **common)


def _output_keys(sec: Section, lim_deg: float, stale_default: float = 0.25) -> dict[str, float]:
    return dict(
        output_limit_rad=_D(sec.number("output_limit_deg", lim_deg, lo=0.0, hi=90.0, lo_open=True)),
        integrator_limit_rad=_D(sec.number("integrator_limit_deg", min(10.0, lim_deg), lo=0.0, hi=90.0)),
        stale_after_s=sec.number("stale_after_s", stale_default, lo=0.0, hi=60.0, lo_open=True),
        hold_s=sec.number("hold_s", 0.5, lo=0.0, hi=60.0),
        fade_s=sec.number("fade_s", 1.0, lo=0.0, hi=60.0),
    )


def _parse_pid(sec: Section, rate: float, lim_deg: float) -> PIDConfig:
    deriv = sec.string("derivative", "measurement", choices=("measurement", "gyro"))
    return PIDConfig(
        kp=sec.number("kp", lo=0.0, hi=100.0),
        ki_per_s=sec.number("ki_per_s", 0.0, lo=0.0, hi=100.0),
        kd_s=sec.number("kd_s", 0.0, lo=0.0, hi=100.0),
        derivative_source=deriv,
        derivative_filter_hz=sec.number("derivative_filter_hz", 5.0, lo=0.01, hi=0.5 * rate),
        output_limit_rad=_D(sec.number("output_limit_deg", lim_deg, lo=0.0, hi=90.0, lo_open=True)),
        integrator_limit_rad=_D(sec.number("integrator_limit_deg", min(10.0, lim_deg), lo=0.0, hi=90.0)),
        stale_after_s=sec.number("stale_after_s", 0.25, lo=0.0, hi=60.0, lo_open=True),
        hold_s=sec.number("hold_s", 0.5, lo=0.0, hi=60.0),
        fade_s=sec.number("fade_s", 1.0, lo=0.0, hi=60.0),
    )


def _load_policy(sec: Section, rate_hz: float):
    """Load ``[controller] file`` (relative to the scenario's folder) and check its rate."""
    from pathlib import Path

    from rollrig.controllers.policy import PolicyFileError, load_policy

    name = sec.string("file")
    sec.finish()
    path = Path(name)
    if not path.is_absolute() and sec.file not in ("<scenario>", "<scenario dict>"):
        path = Path(sec.file).parent / path
    try:
        net, layout, meta = load_policy(path)
    except PolicyFileError as exc:
        raise ScenarioError(f"{sec.file}: [controller] file: {exc}") from None
    trained = meta.get("controller_rate_hz")
    if trained is not None and abs(float(trained) - rate_hz) > 1e-9:
        raise sec.error(
            "rate_hz", f"= {rate_hz:g} but the policy was trained at {trained:g} Hz; allowed: {trained:g}"
        )
    return net, layout, meta, str(path.resolve())


# Built here before sim.build existed; kept importable from here.
from .build import make_controller  # noqa: E402
