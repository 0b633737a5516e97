"""The image-level camera stage: render, degrade and read every frame inside the simulation.

With :attr:`CameraConfig.image <sensors.camera.CameraConfig>` set to an
:class:`ImageStageSpec`, the camera reader no longer adds statistical errors
to the true bank of a frame: it draws the instrument at that bank, degrades
the picture (named kinds of :mod:`sensors.image_degrade`, then the ADC) and
hands it to an image reader; the reading and its validity go on through the
rest of the camera model (rounding, range, lost frames), and the timing plan
(frame times, latency, jitter, losses) is unchanged.

Random draws come from one stream per run, ``rng_for("camera.image")``,
taken in the order the run's frames are read. That order depends only on the
run's own timing plan, so run *i* reads the same pictures alone as in a
batch, and replays exactly. Each frame is read once; its reading is kept.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np

from . import image_degrade as D
from .instrument import Instrument

__all__ = ["ImageStageSpec", "ImageStage", "ORDER"]

#: the order degradations act in: camera pose and optics, then light, then the sensor
ORDER = (
    "rotation",
    "shift",
    "tilt",
    "zoom",
    "blur",
    "brightness",
    "contrast",
    "glare",
    "shadow",
    "noise",
    "dead_pixels",
)


@dataclass(frozen=True, eq=False)
class ImageStageSpec:
    """What the camera sees and who reads it (an immutable value).

    Parameters
    ----------
    reader : callable
        Image batch -> :class:`~sensors.readers.Reading` (stateless).
    size_px : px
        Image size.
    colour : bool
        RGB pictures instead of grayscale.
    degradations : tuple of (kind, strength)
        Named kinds (see ``image_degrade.KINDS``) with their strength, a
        float or a ``(batch,)`` array (one per run); applied in :data:`ORDER`.
    bits : bits
        Camera ADC resolution.
    """

    reader: Callable
    size_px: int = 64
    colour: bool = False
    degradations: tuple[tuple[str, object], ...] = ()
    bits: int = 8

    def __post_init__(self) -> None:
        for kind, _ in self.degradations:
            if kind not in D.KINDS:
                raise ValueError(f"degradation {kind!r}; allowed: {', '.join(D.KINDS)}")

    def start(self, n_frames: int, batch: int, rng_for: Callable[[str], Sequence[np.random.Generator]]):
        """The running stage for one batch (owns the random streams and the frame cache)."""
        return ImageStage(self, n_frames, batch, rng_for)


class ImageStage:
    """The stateful half: per-run streams and every frame's reading once read."""

    def __init__(self, spec: ImageStageSpec, n_frames: int, batch: int, rng_for) -> None:
        self.spec = spec
        self.instrument = Instrument(spec.size_px, colour=spec.colour)
        self.gens = list(rng_for("camera.image"))
        order = {k: i for i, k in enumerate(ORDER)}
        self.steps = sorted(
            ((k, np.broadcast_to(np.asarray(s, dtype=float), (batch,))) for k, s in spec.degradations),
            key=lambda ks: order[ks[0]],
        )
        self.value = np.zeros((n_frames + 1, batch))
        self.valid = np.zeros((n_frames + 1, batch), dtype=bool)
        self.done = np.zeros((n_frames + 1, batch), dtype=bool)
        self.images_read = 0

    def restart(self, rows: np.ndarray, rng_for) -> None:
        """(Re)start runs ``rows``: their own streams from ``rng_for``, no frame read yet."""
        rows = np.asarray(rows, dtype=np.int64)
        for r, g in zip(rows, rng_for("camera.image"), strict=True):
            self.gens[r] = g
        self.done[:, rows] = False

    def read(self, bank: np.ndarray, frames: np.ndarray, rows: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Readings (rad) and validity of the frames ``(frames, rows)`` whose true bank is ``bank``."""
        bank, frames, rows = np.broadcast_arrays(np.asarray(bank, float), frames, rows)
        shape = bank.shape
        b, f, r = bank.ravel(), frames.ravel(), rows.ravel()
        todo = np.flatnonzero(~self.done[f, r])
        if todo.size:
            todo = todo[np.lexsort((f[todo], r[todo]))]  # each run's frames in time order
            # a frame asked for twice in one call is drawn once
            key = f[todo] * self.value.shape[1] + r[todo]
            _, first = np.unique(key, return_index=True)
            todo = todo[np.sort(first)]
            rr = r[todo]
            rngs = [self.gens[i] for i in rr]
            img = self.instrument.render(b[todo])
            for kind, strength in self.steps:
                img = D.degrade(kind, img, strength[rr], rngs)
            img = D.quantize_bits(img, self.spec.bits)
            res = self.spec.reader(img)
            self.value[f[todo], rr] = res.bank_rad
            self.valid[f[todo], rr] = res.valid
            self.done[f[todo], rr] = True
            self.images_read += todo.size
        return self.value[f, r].reshape(shape), self.valid[f, r].reshape(shape)
