"""A training session: iterations, periodic judgement, checkpoints, resume, Ctrl-C.

The checkpoint is one ``.npz`` file of arrays plus JSON bytes (no pickle),
replaced atomically after every few iterations, so an interruption at any
moment leaves the last complete checkpoint in place. Resuming from it gives
exactly the run that was not interrupted (the random generator's state is in
the checkpoint).
"""

from __future__ import annotations

import json
import os
import time
import zipfile
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
from rollrig.controllers.policy import PolicyNet

from ..errors import UserInputError
from ..scenario import Scenario
from .ars import ARS
from .evaluate import judge_policy, pass_rate

__all__ = ["TrainResult", "run_ars", "save_checkpoint", "load_checkpoint", "policy_meta"]


@dataclass
class TrainResult:
    """What a finished (or interrupted) session hands back."""

    net: PolicyNet
    history: list[dict] = field(default_factory=list)
    interrupted: bool = False
    cpu_s: float = 0.0
    checkpoint_step: int | None = None  # PPO/SAC: the step count the checkpoint on disk holds
    signum: int = 2  # the signal that interrupted it (SIGINT; SIGTERM/SIGHUP come as Stopped)


def save_checkpoint(path: Path, arrays: Mapping[str, np.ndarray], meta: Mapping) -> None:
    """Write a checkpoint atomically (temporary file, then rename)."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(f".{path.name}.tmp")
    data = dict(arrays, train_meta=np.frombuffer(json.dumps(meta).encode(), dtype=np.uint8))
    try:
        with open(tmp, "wb") as f:
            np.savez(f, **data)
        os.replace(tmp, path)
    except BaseException:  # interrupted while writing: the previous checkpoint stays, no debris
        tmp.unlink(missing_ok=True)
        raise


def load_checkpoint(path: Path) -> tuple[dict[str, np.ndarray], dict]:
    """Read a checkpoint (pickles refused); one-line error if unusable."""
    try:
        with np.load(path, allow_pickle=False) as z:
            arrays = {k: z[k] for k in z.files}
        meta = json.loads(arrays.pop("train_meta").tobytes())
    except FileNotFoundError:
        raise UserInputError(f"{path}: no such checkpoint") from None
    except (ValueError, KeyError, OSError, EOFError, zipfile.BadZipFile) as exc:
        raise UserInputError(f"{path}: is not a rollrig training checkpoint ({exc})") from None
    return arrays, meta


def policy_meta(sc: Scenario, layout, algorithm: str, seed: int, extra: Mapping | None = None) -> dict:
    """Metadata stored with a trained policy."""
    from rollrig.sim import __version__

    from ..scenario_writer import canonical_hash

    meta = {
        "observation": layout.to_json(),
        "action_scale_rad": float(sc.actuator.limit_rad),
        "controller_rate_hz": float(sc.controller.rate_hz),
        "rollrig_version": __version__,
        "scenario_sha256": canonical_hash(sc),
        "scenario_file_sha256": sc.sha256,
        "scenario_title": sc.title,
        "algorithm": algorithm,
        "seed": int(seed),
    }
    meta.update(extra or {})
    return meta


def run_ars(
    ars: ARS,
    sc: Scenario,
    *,
    iterations: int,
    checkpoint: Path | None,
    checkpoint_meta: Mapping,
    eval_every: int = 5,
    eval_runs: int | None = None,
    cpu_budget_s: float | None = None,
    on_progress: Callable[[dict], None] | None = None,
    history: list[dict] | None = None,
    checkpoint_every: int = 5,
) -> TrainResult:
    """Iterate ARS up to ``iterations`` (counted from 0, so a resumed session continues).

    Every ``eval_every`` iterations the policy is judged on the scenario's
    Monte Carlo runs (``eval_runs`` of them) and the pass rate recorded.
    ``KeyboardInterrupt`` stops the session after saving the checkpoint of
    the last complete iteration.
    """
    history = list(history or [])
    t0 = time.process_time()
    interrupted, signum = False, 2

    # the state after the last complete iteration (an interrupted one leaves
    # its random draws half used; resuming must repeat it whole)
    done = {"state": ars.state_arrays(), "history": list(history)}

    def save() -> None:
        if checkpoint is not None:
            save_checkpoint(checkpoint, done["state"], dict(checkpoint_meta, history=done["history"]))

    try:
        while ars.iteration < iterations:
            if cpu_budget_s is not None and time.process_time() - t0 >= cpu_budget_s:
                break
            row = ars.step()
            if ars.iteration % eval_every == 0 or ars.iteration == iterations:
                row["pass_rate"] = pass_rate(judge_policy(sc, ars.policy(), ars.env.layout, eval_runs))
            row["cpu_s"] = time.process_time() - t0
            history.append(row)
            done = {"state": ars.state_arrays(), "history": list(history)}
            if on_progress is not None:
                on_progress(row)
            if ars.iteration % checkpoint_every == 0:
                save()
    except KeyboardInterrupt as exc:
        interrupted, signum = True, getattr(exc, "signum", 2)
        ars.load_state(done["state"])
        history = done["history"]
    save()
    return TrainResult(
        net=ars.policy(),
        history=history,
        interrupted=interrupted,
        cpu_s=time.process_time() - t0,
        signum=signum,
    )
