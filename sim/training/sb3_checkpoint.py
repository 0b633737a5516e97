"""PPO/SAC checkpoints as arrays and JSON (no pickle), and resuming them bit for bit.

stable-baselines3's own ``save``/``load`` pickle Python objects; rollrig
loads nothing with pickle. A checkpoint here is the session file of
:func:`rollrig.sim.training.session.save_checkpoint` (one ``.npz`` of plain
arrays plus JSON bytes) holding, at a *boundary* of ``learn`` — the start of
a rollout, after the previous update, when nothing is half done:

* every state dict SB3 lists for the algorithm (``model.get_parameters()``:
  the policy's tensors; the optimisers' moments, step counts and settings)
  and SAC's entropy coefficient ``log_ent_coef``, tensors as arrays and the
  nesting as JSON (integer keys and tuples kept);
* the counters (``num_timesteps``, episodes, updates, the schedules'
  progress), the last observation and episode-start flags, the last 100
  episodes' returns;
* the random generators' states: torch's default generator, numpy's global
  one (SB3 shuffles minibatches and samples the replay buffer with it),
  Python's ``random`` and the action space's generator (SAC's warm-up);
* SAC's replay buffer (observations, actions, rewards, next observations,
  dones, time-outs up to ``pos``, and ``pos``/``full``);
* the current episode as a *tape*: the environment generator's state before
  the episode's reset and the actions since. The environment is a
  deterministic function of these (every random number of an episode traces
  back to that generator, see :mod:`rollrig.sim.envs.episode`), so replaying
  the tape into a fresh environment puts it — and SB3's ``Monitor`` —
  exactly where the interrupted one was; the replayed observation must equal
  the saved one, bit for bit, or the checkpoint is refused.

With all of this restored, ``learn(..., reset_num_timesteps=False)`` on a
fresh model continues exactly as the uninterrupted session would have (same
parameters to the last bit, on the same machine and library versions).
"""

from __future__ import annotations

import random
from collections import deque
from collections.abc import Mapping
from pathlib import Path

import gymnasium as gym
import numpy as np

from ..errors import UserInputError

__all__ = ["FORMAT", "EpisodeTape", "capture_state", "restore_state", "check_compatible"]

#: name and version of the checkpoint layout (refused when it differs)
FORMAT = "rollrig-sb3-checkpoint/1"

#: metadata that must be equal between a checkpoint and the session resuming it
MATCH_KEYS = (
    "algorithm",
    "format",
    "scenario_sha256",
    "seed",
    "hidden",
    "randomize",
    "observation",
    "rollrig_version",
)

_BUFFER_FIELDS = ("observations", "next_observations", "actions", "rewards", "dones", "timeouts")


class EpisodeTape(gym.Wrapper):
    """Records what replays the current episode: how it was reset, and the actions since.

    Put outermost (``make_vec_env(..., wrapper_class=EpisodeTape)``) so the
    replay also passes through SB3's ``Monitor``.
    """

    def __init__(self, env: gym.Env) -> None:
        super().__init__(env)
        self.reset_seed: int | None = None
        self.reset_rng: dict | None = None
        self.actions: list[np.ndarray] = []
        self.last_obs: np.ndarray | None = None

    def reset(self, *, seed=None, options=None):
        if options:
            raise ValueError("EpisodeTape records resets without options only")
        self.reset_seed = None if seed is None else int(seed)
        self.reset_rng = None if seed is not None else self.unwrapped.np_random.bit_generator.state
        self.actions = []
        obs, info = self.env.reset(seed=seed)
        self.last_obs = obs
        return obs, info

    def step(self, action):
        self.actions.append(np.array(action, copy=True))
        out = self.env.step(action)
        self.last_obs = out[0]
        return out

    def record(self) -> tuple[dict, np.ndarray]:
        """The tape as JSON and an ``(n_actions, *action_shape)`` array."""
        if self.actions:
            acts = np.stack(self.actions)
        else:
            acts = np.zeros((0, *self.action_space.shape), dtype=self.action_space.dtype)
        return {"seed": self.reset_seed, "rng": self.reset_rng}, acts

    def replay(self, record: Mapping, actions: np.ndarray) -> np.ndarray:
        """Reset as recorded and step through ``actions``; returns the last observation."""
        if record["seed"] is not None:
            self.reset(seed=int(record["seed"]))
        else:
            gen = np.random.Generator(getattr(np.random, record["rng"]["bit_generator"])())
            gen.bit_generator.state = record["rng"]
            self.unwrapped.np_random = gen
            self.reset()
        for a in actions:
            self.step(a)
        return self.last_obs


# --------------------------------------------------------------- nesting codec
def _encode(obj, name: str, arrays: dict):
    """JSON skeleton of nested dicts/lists/tuples; tensors and arrays go to ``arrays``."""
    import torch

    if isinstance(obj, torch.Tensor):
        arrays[name] = obj.detach().cpu().numpy().copy()
        return {"tensor": name}
    if isinstance(obj, np.ndarray):
        arrays[name] = obj.copy()
        return {"array": name}
    if isinstance(obj, Mapping):
        items = []
        for k, v in obj.items():
            if not isinstance(k, str | int):
                raise TypeError(f"{name}: key {k!r} is neither text nor an integer")
            items.append([k, _encode(v, f"{name}/{k}", arrays)])
        return {"dict": items}
    if isinstance(obj, tuple | list):
        kind = "tuple" if isinstance(obj, tuple) else "list"
        return {kind: [_encode(v, f"{name}/{i}", arrays) for i, v in enumerate(obj)]}
    if obj is None or isinstance(obj, bool | int | float | str):
        return {"value": obj}
    raise TypeError(f"{name}: cannot store a {type(obj).__name__}")


def _decode(node: Mapping, arrays: Mapping[str, np.ndarray]):
    import torch

    (kind, val), *_ = node.items()
    if kind == "tensor":
        return torch.tensor(arrays[val])
    if kind == "array":
        return np.array(arrays[val])
    if kind == "dict":
        return {k: _decode(v, arrays) for k, v in val}
    if kind == "tuple":
        return tuple(_decode(v, arrays) for v in val)
    if kind == "list":
        return [_decode(v, arrays) for v in val]
    if kind == "value":
        return val
    raise ValueError(f"unknown entry kind {kind!r}")


# ------------------------------------------------------------ capture, restore
def _tape(model) -> EpisodeTape:
    envs = getattr(model.get_env(), "envs", None)
    if not envs or len(envs) != 1 or not isinstance(envs[0], EpisodeTape):
        raise ValueError("checkpoints need one environment wrapped in EpisodeTape")
    return envs[0]


def _entropy_name(model) -> str | None:
    if getattr(model, "ent_coef_optimizer", None) is not None:
        return "log_ent_coef"
    return "ent_coef_tensor" if hasattr(model, "ent_coef_tensor") else None


def capture_state(model) -> tuple[dict[str, np.ndarray], dict]:
    """Arrays and JSON holding everything :func:`restore_state` needs (call at a boundary)."""
    import torch

    arrays: dict[str, np.ndarray] = {}
    state: dict = {"params": _encode(model.get_parameters(), "params", arrays)}
    ent = _entropy_name(model)
    if ent is not None:
        state["entropy"] = {"name": ent, "value": _encode(getattr(model, ent), "entropy", arrays)}
    state["counters"] = {
        "num_timesteps": int(model.num_timesteps),
        "episode_num": int(model._episode_num),
        "n_updates": int(getattr(model, "_n_updates", 0)),
        "progress_remaining": float(model._current_progress_remaining),
    }
    arrays["last_obs"] = np.array(model._last_obs, copy=True)
    if model._last_episode_starts is not None:
        arrays["last_episode_starts"] = np.array(model._last_episode_starts, copy=True)
    state["episodes"] = [
        {k: float(v) for k, v in ep.items() if k in ("r", "l", "t")} for ep in model.ep_info_buffer or ()
    ]
    # random generators
    arrays["rng/torch"] = torch.get_rng_state().numpy().copy()
    name, keys, pos, has_gauss, cached = np.random.get_state()
    arrays["rng/numpy_keys"] = keys.copy()
    version, internal, gauss = random.getstate()
    state["rng"] = {
        "numpy": [name, int(pos), int(has_gauss), float(cached)],
        "python": [version, list(internal), gauss],
        "action_space": model.action_space.np_random.bit_generator.state,
    }
    # the current episode
    record, acts = _tape(model).record()
    state["tape"] = record
    arrays["tape/actions"] = acts
    # the replay buffer (off-policy algorithms)
    rb = getattr(model, "replay_buffer", None)
    if rb is not None:
        n = rb.buffer_size if rb.full else rb.pos
        state["replay_buffer"] = {
            "pos": int(rb.pos),
            "full": bool(rb.full),
            "buffer_size": int(rb.buffer_size),
        }
        for f in _BUFFER_FIELDS:
            arrays[f"replay/{f}"] = np.array(getattr(rb, f)[:n], copy=True)
    return arrays, state


def _refuse(path: Path, what: str) -> UserInputError:
    return UserInputError(f"{path}: {what}; allowed: a checkpoint written by this training session")


_LABELS = {
    "format": "checkpoint format",
    "scenario_sha256": "scenario",
    "hidden": "hidden layers",
    "randomize": "randomisation",
    "observation": "observation layout",
}


def check_compatible(path: Path, saved: Mapping, expected: Mapping) -> None:
    """Refuse a checkpoint made with another algorithm, scenario, network, seed or rollrig version."""
    for key in MATCH_KEYS:
        got, want = saved.get(key), expected.get(key)
        if got == want:
            continue
        if key == "rollrig_version":
            raise UserInputError(
                f"{path}: checkpoint written by rollrig {got}, this is {want}; "
                "allowed: the same rollrig version"
            )
        values = f" ({got!r}, not {want!r})" if len(repr(got)) + len(repr(want)) < 60 else ""
        raise UserInputError(
            f"{path}: checkpoint was made with another {_LABELS.get(key, key)}{values}; "
            "allowed: the same scenario and training options"
        )


def _check_optimizer(path: Path, name: str, sd: Mapping, opt) -> None:
    """The saved moments must have their parameters' shapes (torch does not check)."""
    params = [p for g in opt.param_groups for p in g["params"]]
    ids = [i for g in sd.get("param_groups", []) for i in g.get("params", [])]
    if len(ids) != len(params):
        raise _refuse(path, f"optimizer {name} holds {len(ids)} parameters, this network {len(params)}")
    for i, p in zip(ids, params, strict=True):
        for key, t in sd.get("state", {}).get(i, {}).items():
            if t.ndim > 0 and tuple(t.shape) != tuple(p.shape):
                raise _refuse(
                    path, f"optimizer {name} {key} has shape {tuple(t.shape)}, not {tuple(p.shape)}"
                )


def restore_state(model, arrays: Mapping[str, np.ndarray], state: Mapping, path: Path) -> None:
    """Put a fresh model (same algorithm, network, environment) in the saved state.

    Raises :class:`UserInputError` naming ``path`` when an array is missing or
    has another shape, or the environment does not replay to the saved
    observation.
    """
    import torch

    path = Path(path)
    try:
        params = _decode(state["params"], arrays)
        fresh = model.get_parameters()
        if set(params) != set(fresh):
            raise _refuse(path, f"holds {sorted(params)}, this model needs {sorted(fresh)}")
        for name, sd in fresh.items():
            if isinstance(sd, Mapping) and "param_groups" in sd:  # an optimiser
                _check_optimizer(path, name, params[name], _attr(model, name))
                continue
            for key, t in sd.items():
                got = params[name].get(key)
                if got is None:
                    raise _refuse(path, f"array {name}.{key} is missing")
                if got.shape != t.shape or got.dtype != t.dtype:
                    raise _refuse(
                        path,
                        f"{name}.{key} is {got.dtype} {tuple(got.shape)}, this network's {tuple(t.shape)}",
                    )
        model.set_parameters(params, exact_match=True, device="cpu")
        ent = state.get("entropy")
        if (ent and ent["name"]) != _entropy_name(model):
            raise _refuse(path, "entropy coefficient setting differs")
        if ent is not None:
            value = _decode(ent["value"], arrays)
            with torch.no_grad():
                getattr(model, ent["name"]).copy_(value)
        c = state["counters"]
        model.num_timesteps = int(c["num_timesteps"])
        model._episode_num = int(c["episode_num"])
        if hasattr(model, "_n_updates"):
            model._n_updates = int(c["n_updates"])
        model._current_progress_remaining = float(c["progress_remaining"])
        last_obs = np.array(arrays["last_obs"])
        if last_obs.shape != (1, *model.observation_space.shape):
            raise _refuse(
                path,
                f"observation has shape {last_obs.shape[1:]}, this environment's is "
                f"{model.observation_space.shape}",
            )
        model._last_obs = last_obs
        if "last_episode_starts" in arrays:
            model._last_episode_starts = np.array(arrays["last_episode_starts"])
        window = model._stats_window_size
        model.ep_info_buffer = deque((dict(ep) for ep in state["episodes"]), maxlen=window)
        model.ep_success_buffer = deque(maxlen=window)
        _restore_buffer(model, arrays, state.get("replay_buffer"), path)
        # the environment: replay the current episode and check where it lands
        obs = _tape(model).replay(state["tape"], np.array(arrays["tape/actions"]))
        if not np.array_equal(obs, last_obs[0]):
            raise _refuse(path, "the environment does not replay to the saved observation")
        # random generators last (replaying and building consume none of them after this)
        torch.set_rng_state(torch.tensor(arrays["rng/torch"]))
        name, pos, has_gauss, cached = state["rng"]["numpy"]
        np.random.set_state((name, np.array(arrays["rng/numpy_keys"]), pos, has_gauss, cached))
        version, internal, gauss = state["rng"]["python"]
        random.setstate((version, tuple(internal), gauss))
        model.action_space.np_random.bit_generator.state = state["rng"]["action_space"]
    except UserInputError:
        raise
    except KeyError as exc:
        raise _refuse(path, f"entry {exc} is missing") from None
    except (ValueError, TypeError, RuntimeError) as exc:
        raise _refuse(path, f"does not fit this model ({str(exc).splitlines()[0]})") from None


def _attr(model, dotted: str):
    obj = model
    for part in dotted.split("."):
        obj = getattr(obj, part)
    return obj


def _restore_buffer(model, arrays: Mapping, saved: Mapping | None, path: Path) -> None:
    rb = getattr(model, "replay_buffer", None)
    if (rb is None) != (saved is None):
        raise _refuse(path, "replay buffer present in one of checkpoint and model only")
    if rb is None:
        return
    if int(saved["buffer_size"]) != rb.buffer_size:
        raise _refuse(
            path, f"replay buffer holds {saved['buffer_size']} transitions, this one {rb.buffer_size}"
        )
    n = rb.buffer_size if saved["full"] else int(saved["pos"])
    for f in _BUFFER_FIELDS:
        a = arrays[f"replay/{f}"]
        target = getattr(rb, f)
        if a.shape != (n, *target.shape[1:]) or a.dtype != target.dtype:
            raise _refuse(
                path, f"replay buffer {f} is {a.dtype} {a.shape}, expected {(n, *target.shape[1:])}"
            )
        target[:n] = a
    rb.pos, rb.full = int(saved["pos"]), bool(saved["full"])
