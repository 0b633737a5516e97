"""Learned policies: the observation they see, their numpy forward pass, their file.

A policy is a small feed-forward network (or a linear map) from an
observation vector to a normalised aileron command ``a`` in ``[−1, 1]``; the
aileron command is ``a · action_scale_rad``. The same :class:`ObservationBuilder`
turns the autopilot's :class:`~controllers.base.Observation` into that vector
in the gym environment and in :class:`PolicyController`, so a policy sees the
same numbers in training and in ``rollrig run``.

Observation vector (float32), for a history of ``H`` ticks, newest first:

=========================  ===========================================  ==========
field                      meaning                                      scaling
=========================  ===========================================  ==========
``reading[i]``, i < H      latest valid camera bank reading, ``i``      ÷ 30° (rad)
                           ticks ago (0 before the first reading)
``valid[i]``, i < H        newest frame valid at that tick              0 or 1
``age[i]``, i < H          age of that reading                          ÷ 0.5 s,
                                                                        clipped to 2
``rate``  (gyro fitted)    latest gyro roll-rate reading                ÷ 60°/s,
                                                                        clipped to ±10
``command``                bank command                                 ÷ 30° (rad)
``error``                  command − newest reading                     ÷ 30° (rad)
``prev_action``            the policy's previous output                 1
=========================  ===========================================  ==========

The true bank angle is never part of it. At the first tick the history is
filled with the first reading.

Policy files are ``.npz`` archives of plain arrays plus one ``meta`` array
holding UTF-8 JSON bytes; they are read with ``allow_pickle=False`` and
checked field by field, so a malformed, mismatched or pickled file is refused
with a one-line :class:`PolicyFileError`. This module is a leaf: numpy only.
"""

from __future__ import annotations

import json
import math
import zipfile
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .base import Observation

__all__ = [
    "ObservationLayout",
    "ObservationBuilder",
    "PolicyNet",
    "PolicyFileError",
    "PolicyController",
    "save_policy",
    "load_policy",
    "FORMAT",
    "FORMAT_VERSION",
]

FORMAT = "rollrig-policy"
FORMAT_VERSION = 1

BANK_SCALE_RAD = math.radians(30.0)
RATE_SCALE_RAD_S = math.radians(60.0)
AGE_SCALE_S = 0.5
AGE_CLIP = 2.0  # scaled age beyond which a reading is simply "old" (1 s)
RATE_CLIP = 10.0  # scaled roll rate (600°/s) beyond which the gyro reading is clipped


class PolicyFileError(ValueError):
    """A policy file that cannot be used (one-line message naming the file)."""


@dataclass(frozen=True)
class ObservationLayout:
    """Which fields the observation vector holds.

    Parameters
    ----------
    history : int
        Number of ticks of camera readings (newest first), ≥ 1.
    gyro : bool
        Whether a rate-gyro reading is included.
    """

    history: int = 3
    gyro: bool = False

    @property
    def names(self) -> list[str]:
        """Field names in vector order."""
        h = range(self.history)
        out = [f"reading[{i}]" for i in h] + [f"valid[{i}]" for i in h] + [f"age[{i}]" for i in h]
        if self.gyro:
            out.append("rate")
        return out + ["command", "error", "prev_action"]

    @property
    def size(self) -> int:
        return 3 * self.history + int(self.gyro) + 3

    def to_json(self) -> dict:
        return {
            "history": self.history,
            "gyro": self.gyro,
            "names": self.names,
            "bank_scale_rad": BANK_SCALE_RAD,
            "rate_scale_rad_s": RATE_SCALE_RAD_S,
            "age_scale_s": AGE_SCALE_S,
            "age_clip": AGE_CLIP,
        }


class ObservationBuilder:
    """Turns the autopilot's observations into the policy's vectors, tick by tick."""

    def __init__(self, layout: ObservationLayout) -> None:
        self.layout = layout

    def reset(self, batch: int) -> None:
        self._out = np.zeros((batch, self.layout.size))  # the vector being kept up to date
        self._fresh: np.ndarray | None = np.ones(batch, dtype=bool)  # rows with no history yet

    def restart(self, rows) -> None:
        """Forget the history of batch rows ``rows`` (their next call starts it afresh)."""
        if self._fresh is None:
            self._fresh = np.zeros(self._out.shape[0], dtype=bool)
        self._fresh[rows] = True

    def __call__(self, obs: Observation, prev_action: np.ndarray) -> np.ndarray:
        """Observation vectors ``(batch, size)`` float32 for this tick (call once per tick)."""
        out, h = self._out, self.layout.history
        reading = np.asarray(obs.bank, dtype=float) / BANK_SCALE_RAD
        hist = out[:, : 3 * h].reshape(out.shape[0], 3, h)  # (batch, field, tick) view, newest first
        hist[:, :, 1:] = hist[:, :, :-1]  # shift the history by one tick (numpy copies overlaps safely)
        hist[:, 0, 0] = reading
        hist[:, 1, 0] = obs.valid
        np.minimum(np.asarray(obs.age, dtype=float) / AGE_SCALE_S, AGE_CLIP, out=hist[:, 2, 0])
        fresh = self._fresh
        if fresh is not None:  # no history yet: every slot holds the first reading
            if fresh.all():
                hist[:, :, 1:] = hist[:, :, :1]
            else:
                rows = fresh.nonzero()[0]
                hist[rows, :, 1:] = hist[rows, :, :1]
            self._fresh = None
        j = 3 * h
        if self.layout.gyro:
            if obs.rate is not None:  # clipped to ±RATE_CLIP (np.clip's arithmetic, without its overhead)
                col = out[:, j]
                np.maximum(np.asarray(obs.rate, dtype=float) / RATE_SCALE_RAD_S, -RATE_CLIP, out=col)
                np.minimum(col, RATE_CLIP, out=col)
            else:
                out[:, j] = 0.0
            j += 1
        cmd = np.asarray(obs.bank_cmd, dtype=float) / BANK_SCALE_RAD
        out[:, j] = cmd
        out[:, j + 1] = cmd - reading
        out[:, j + 2] = prev_action
        return out.astype(np.float32)


class PolicyNet:
    """Numpy forward pass: normalise, ``tanh`` hidden layers, linear output, then clip or tanh.

    Parameters
    ----------
    weights : list of (n_out, n_in) arrays
    biases : list of (n_out,) arrays
    obs_mean, obs_std : (n_obs,)
        State normalisation ``(x − mean) / std`` applied first.
    output : {"clip", "tanh"}
        How the last layer is squashed into ``[−1, 1]``.
    """

    def __init__(self, weights, biases, obs_mean, obs_std, output: str = "clip") -> None:
        self.weights = [np.asarray(w, dtype=np.float64) for w in weights]
        self.biases = [np.asarray(b, dtype=np.float64) for b in biases]
        self.obs_mean = np.asarray(obs_mean, dtype=np.float64)
        self.obs_std = np.asarray(obs_std, dtype=np.float64)
        self.output = output

    @property
    def n_obs(self) -> int:
        return self.weights[0].shape[1]

    def raw(self, x: np.ndarray) -> np.ndarray:
        """Last layer's output before squashing, ``(batch,)``."""
        h = (np.asarray(x, dtype=np.float64) - self.obs_mean) / self.obs_std
        last = len(self.weights) - 1
        for i, (w, b) in enumerate(zip(self.weights, self.biases, strict=True)):
            h = h @ w.T + b
            if i < last:
                h = np.tanh(h)
        return h[..., 0]

    def __call__(self, x: np.ndarray) -> np.ndarray:
        """Normalised action in ``[−1, 1]`` for observation vectors ``(batch, n_obs)``."""
        y = self.raw(x)
        return np.tanh(y) if self.output == "tanh" else np.clip(y, -1.0, 1.0)


class PolicyController:
    """A policy file as a :class:`~controllers.base.Controller`.

    Parameters
    ----------
    net : PolicyNet
    layout : ObservationLayout
    action_scale_rad : rad
        Aileron command for ``a = 1``.
    where : str
        Names the policy in error messages.
    error : exception class
        Raised (one line) when the loop lacks a gyro the policy needs.
    """

    def __init__(
        self,
        net: PolicyNet,
        layout: ObservationLayout,
        action_scale_rad: float,
        where: str = "policy",
        error: type[Exception] = PolicyFileError,
    ) -> None:
        self.net, self.layout, self.action_scale_rad = net, layout, float(action_scale_rad)
        self.builder = ObservationBuilder(layout)
        self.where, self.error = where, error

    def reset(self, batch: int) -> None:
        self.builder.reset(batch)
        self._prev = np.zeros(batch)

    def step(self, obs: Observation) -> np.ndarray:
        if self.layout.gyro and obs.rate is None:
            raise self.error(
                f"{self.where} was trained with a rate gyro; allowed: a scenario with [sensor.gyro]"
            )
        a = self.net(self.builder(obs, self._prev))
        self._prev = a
        return a * self.action_scale_rad


# ------------------------------------------------------------------ files
def save_policy(path: str | Path, net: PolicyNet, meta: Mapping) -> None:
    """Write a policy file (``.npz`` of arrays plus JSON ``meta``); no pickle."""
    meta = dict(meta, format=FORMAT, format_version=FORMAT_VERSION, output=net.output)
    meta["layers"] = len(net.weights)
    arrays = {"obs_mean": net.obs_mean, "obs_std": net.obs_std}
    for i, (w, b) in enumerate(zip(net.weights, net.biases, strict=True)):
        arrays[f"w{i}"], arrays[f"b{i}"] = w, b
    arrays["meta"] = np.frombuffer(json.dumps(meta, sort_keys=True).encode("utf-8"), dtype=np.uint8)
    with open(path, "wb") as f:
        np.savez(f, **arrays)


def load_policy(path: str | Path) -> tuple[PolicyNet, ObservationLayout, dict]:
    """Read and check a policy file.

    Returns ``(net, layout, meta)``; ``meta["action_scale_rad"]`` scales the
    action to radians.

    Raises
    ------
    PolicyFileError
        With one line naming the file and what is wrong.
    """
    p = Path(path)

    def bad(why: str) -> PolicyFileError:
        return PolicyFileError(f"{p}: {why}")

    try:
        with np.load(p, allow_pickle=False) as z:
            arrays = {k: z[k] for k in z.files}
    except FileNotFoundError:
        raise bad("no such policy file") from None
    except ValueError as exc:  # object arrays (pickles) or not an npz at all
        raise bad(f"is not a rollrig policy file (plain .npz arrays only, no pickle): {exc}") from None
    except (OSError, zipfile.BadZipFile, EOFError) as exc:
        raise bad(f"cannot be read as a policy file: {exc}") from None
    if "meta" not in arrays or arrays["meta"].dtype != np.uint8:
        raise bad("has no 'meta' array (JSON bytes); allowed: files written by rollrig train")
    try:
        meta = json.loads(arrays["meta"].tobytes().decode("utf-8"))
    except (UnicodeDecodeError, json.JSONDecodeError):
        raise bad("'meta' is not JSON text") from None
    if not isinstance(meta, dict) or meta.get("format") != FORMAT:
        raise bad(f"meta format is not {FORMAT!r}")
    if meta.get("format_version") != FORMAT_VERSION:
        raise bad(f"format_version = {meta.get('format_version')!r}; allowed: {FORMAT_VERSION}")
    try:
        obs = meta["observation"]
        layout = ObservationLayout(history=int(obs["history"]), gyro=bool(obs["gyro"]))
        n_layers = int(meta["layers"])
        scale = float(meta["action_scale_rad"])
        output = str(meta["output"])
    except (KeyError, TypeError, ValueError) as exc:
        raise bad(f"meta lacks or garbles {exc}") from None
    if not 1 <= layout.history <= 64 or not 1 <= n_layers <= 16:
        raise bad("meta observation.history or layers out of range; allowed: 1..64 and 1..16")
    if obs.get("names") != layout.names:
        raise bad("meta observation.names do not match this rollrig's observation layout")
    if output not in ("clip", "tanh") or not (math.isfinite(scale) and scale > 0):
        raise bad("meta output must be 'clip' or 'tanh' and action_scale_rad > 0")
    need = ["obs_mean", "obs_std", *(f"{c}{i}" for i in range(n_layers) for c in "wb")]
    missing = [k for k in need if k not in arrays]
    if missing:
        raise bad(f"missing array {missing[0]!r}; allowed: files written by rollrig train")
    n = layout.size
    ws = [arrays[f"w{i}"] for i in range(n_layers)]
    bs = [arrays[f"b{i}"] for i in range(n_layers)]
    width = n
    for i, (w, b) in enumerate(zip(ws, bs, strict=True)):
        if w.ndim != 2 or w.shape[1] != width or b.shape != (w.shape[0],):
            raise bad(
                f"array w{i} has shape {w.shape} (b{i} {b.shape}); allowed: (m, {width}) "
                f"with b{i} (m,) for an observation of {n} values"
            )
        width = w.shape[0]
    if width != 1:
        raise bad(f"last layer gives {width} outputs; allowed: 1 (the aileron)")
    if arrays["obs_mean"].shape != (n,) or arrays["obs_std"].shape != (n,):
        raise bad(f"obs_mean/obs_std must have shape ({n},) for this observation layout")
    every = [arrays["obs_mean"], arrays["obs_std"], *ws, *bs]
    if not all(np.issubdtype(a.dtype, np.floating) and np.all(np.isfinite(a)) for a in every):
        raise bad("arrays must be finite floating-point numbers")
    if np.any(arrays["obs_std"] <= 0):
        raise bad("obs_std must be > 0")
    return PolicyNet(ws, bs, arrays["obs_mean"], arrays["obs_std"], output), layout, meta
