"""Image readers: pictures of the instrument in, bank angle with validity and confidence out.

Every reader is called on a batch, ``reader(images) -> Reading``, with images
``(batch, h, w)`` grayscale or ``(batch, h, w, 3)`` colour (float, ``[0, 1]``)
of the instrument drawn by :mod:`sensors.instrument`.

Built in:

* :class:`MomentReader` — the first moment of pixel values over a fixed
  annulus of the turning disc (between the aircraft symbol and the case
  ring), around the image centre. Sky is brighter than ground, so the
  moment points "up" across the horizon; its angle is the bank. A matrix
  product per batch: very fast. It reads the horizon *in the image*, so a
  camera turned by ρ reads ρ too much, and a shifted camera biases it.
* :class:`RobustReader` — finds the instrument (centre and size from the
  region brighter than the panel), samples the disc along rays, turns the
  ray profile into a clipped two-level signal (a glare spot or shadow
  cannot pull it further than a full sky/ground swing) and takes the angle
  of its first circular harmonic; then it finds the rotation of the fixed
  bank scale on the case ring by circular cross-correlation with the
  scale's template, and reads the bank *relative to the case*: a camera
  turned against the instrument does not bias it.
* :class:`OnnxReader` — a user's model file run by onnxruntime (optional
  dependency). Loading a model file runs no Python code.
* :class:`CallableReader` — a user's Python function (their code; callers
  must ask the user's permission first).

A reading is *invalid* when the picture holds too little contrast to read, or
the reader's own confidence is too low.
"""

from __future__ import annotations

import importlib
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .instrument import GEOMETRY, Instrument, InstrumentGeometry, face_coordinates, luma

__all__ = [
    "Reading",
    "MomentReader",
    "RobustReader",
    "OnnxReader",
    "CallableReader",
    "ReaderLoadError",
    "to_gray",
    "wrap_angle",
]


class ReaderLoadError(ValueError):
    """A user's reader (model file or function) that cannot be used; one-line message."""


@dataclass(frozen=True)
class Reading:
    """Readings of a batch of images.

    Parameters
    ----------
    bank_rad : rad, (batch,)
        Bank read from each image (right wing down positive); meaningless where not valid.
    valid : bool, (batch,)
        Whether the reader trusts the reading.
    confidence : 1, (batch,)
        The reader's confidence, 0..1 (1 where a reader gives none).
    """

    bank_rad: np.ndarray
    valid: np.ndarray
    confidence: np.ndarray


def to_gray(images: np.ndarray) -> np.ndarray:
    """Grayscale ``(batch, h, w)`` float32 from grayscale or RGB images."""
    a = np.asarray(images)
    if a.ndim == 4 and a.shape[-1] == 3:
        return luma(a.astype(np.float32, copy=False))
    if a.ndim != 3:
        raise ValueError(f"images have shape {a.shape}; allowed: (batch, h, w) or (batch, h, w, 3)")
    return a.astype(np.float32, copy=False)


def wrap_angle(a):
    """Angles wrapped to ``[-π, π)`` (rad)."""
    return (np.asarray(a) + np.pi) % (2.0 * np.pi) - np.pi


# ------------------------------------------------------------------ moment reader
class MomentReader:
    """First moment of the disc annulus around the image centre (fast; reads the horizon in the image).

    Parameters
    ----------
    size_px : px
        Image size it reads.
    inner, outer : face units
        Annulus of the disc used (default clear of the aircraft symbol and the ring).
    min_contrast : fraction of full scale
        Smallest standard deviation of pixel values over the annulus for a valid reading.
    min_confidence : 1
        Smallest confidence for a valid reading; confidence is the moment's
        length over that of an ideal sharp two-level horizon of the same
        contrast (1 for a clean picture, lower under noise or clutter).
    """

    name = "moment"

    def __init__(
        self,
        size_px: int,
        inner: float = 0.50,
        outer: float = 0.70,
        min_contrast: float = 0.03,
        min_confidence: float = 0.3,
    ) -> None:
        x, y, u = face_coordinates(int(size_px))
        r = np.hypot(x, y)
        # anti-aliased annulus weights (area coverage), so the pixel grid barely shows
        m = np.clip((r - inner) * u + 0.5, 0, 1) * np.clip((outer - r) * u + 0.5, 0, 1)
        self.size_px = int(size_px)
        self.n = float(m.sum())
        self._w = np.stack([m.ravel(), (m * x).ravel(), (m * y).ravel()], axis=1).astype(np.float32)
        self._m = m.ravel().astype(np.float32)
        # centroid distance of a half annulus: (4 / 3π)(b³ − a³)/(b² − a²)
        self._arm = 4.0 / (3.0 * math.pi) * (outer**3 - inner**3) / (outer**2 - inner**2)
        self.min_contrast = float(min_contrast)
        self.min_confidence = float(min_confidence)

    def __call__(self, images: np.ndarray) -> Reading:
        g = to_gray(images)
        b = g.shape[0]
        if g.shape[1:] != (self.size_px, self.size_px):
            raise ValueError(f"images are {g.shape[1:]}; this reader reads {self.size_px} px squares")
        flat = g.reshape(b, -1)
        # (b, 3): Σ v, Σ v x, Σ v y over the annulus. einsum, not a BLAS product: its sums run in
        # the same order whatever the batch, so a run reads bit for bit the same alone as in a batch
        s = np.einsum("bp,pk->bk", flat, self._w)
        s2 = np.einsum("bp,bp,p->b", flat, flat, self._m)
        mean = s[:, 0] / self.n
        std = np.sqrt(np.maximum(s2 / self.n - mean * mean, 0.0))
        mx, my = s[:, 1].astype(np.float64), s[:, 2].astype(np.float64)  # Σx = Σy = 0 on the grid
        bank = np.arctan2(-mx, my)  # the moment points along the horizon's up-normal (−sin φ, cos φ)
        with np.errstate(divide="ignore", invalid="ignore"):
            conf = np.hypot(mx, my) / (std * self.n * self._arm)
        conf = np.clip(np.nan_to_num(conf), 0.0, 1.0)
        valid = (std >= self.min_contrast) & (conf >= self.min_confidence)
        return Reading(bank, valid, conf)


# ------------------------------------------------------------------ robust reader
class RobustReader:
    """Finds the instrument, reads the disc with bounded influence, references the case ring.

    Parameters
    ----------
    size_px : px
        Image size it reads.
    geometry : InstrumentGeometry
        The instrument design (where the disc and the bank scale are).
    n_rays : 1
        Ray directions sampled on the disc.
    n_ring : 1
        Samples around the case ring (angular resolution of the scale match).
    min_contrast : fraction of full scale
        Smallest sky/ground difference along the rays for a valid reading.
    min_confidence : 1
        Smallest confidence (the lesser of the horizon's harmonic strength
        and the scale match's normalised correlation) for a valid reading.
    """

    name = "robust"
    _RADII = (0.50, 0.56, 0.62, 0.68)

    def __init__(
        self,
        size_px: int,
        geometry: InstrumentGeometry = GEOMETRY,
        n_rays: int = 256,
        n_ring: int = 720,
        min_contrast: float = 0.05,
        min_confidence: float = 0.5,
    ) -> None:
        self.size_px = int(size_px)
        self.geometry = geometry
        self.min_contrast = float(min_contrast)
        self.min_confidence = float(min_confidence)
        self._theta = 2.0 * np.pi * np.arange(n_rays) / n_rays
        self._ring_theta = 2.0 * np.pi * np.arange(n_ring) / n_ring
        self._ring_r = 0.5 * (geometry.tick_inner + geometry.tick_outer)
        x, y, u = face_coordinates(self.size_px)
        self._x, self._y, self._u = x.ravel(), y.ravel(), u
        # calibration on the clean design: where the "brighter than the panel" region's
        # centroid and size put the instrument, and the bank scale's template
        clean = Instrument(self.size_px, geometry=geometry).render(np.zeros(1))
        self._off = np.zeros(2)
        self._r_mask = 1.0
        cx, cy, rm = self._find(clean)
        self._off = np.array([cx[0], cy[0]])
        self._r_mask = rm[0]
        t = self._sample(clean, np.zeros(1), np.zeros(1), np.ones(1), self._ring_theta, (self._ring_r,))[0]
        self._tmpl = t - t.mean()
        self._tmpl_f = np.conj(np.fft.rfft(self._tmpl))
        self._tmpl_norm = float(np.linalg.norm(self._tmpl))

    def _find(self, g: np.ndarray):
        """Centre (face units) and scale of the instrument from the region brighter than the panel."""
        b = g.shape[0]
        flat = g.reshape(b, -1)
        border = np.concatenate([g[:, 0, :], g[:, -1, :], g[:, 1:-1, 0], g[:, 1:-1, -1]], axis=1)
        panel = np.median(border, axis=1)
        thr = panel + 0.5 * (flat.mean(axis=1) - panel)
        m = (flat > thr[:, None]).astype(np.float32)
        area = m.sum(axis=1) / self._u**2
        with np.errstate(divide="ignore", invalid="ignore"):  # einsum: same sums alone as in a batch
            cx = np.einsum("bp,p->b", m, self._x.astype(np.float32)) / self._u**2 / area
            cy = np.einsum("bp,p->b", m, self._y.astype(np.float32)) / self._u**2 / area
        scale = np.sqrt(np.maximum(area, 1e-12) / np.pi) / self._r_mask
        cx = np.nan_to_num(cx) - scale * self._off[0]
        cy = np.nan_to_num(cy) - scale * self._off[1]
        return cx, cy, scale

    def _sample(self, g, cx, cy, scale, theta, radii) -> np.ndarray:
        """Bilinear samples at angles ``theta`` (CCW from +x) and ``radii`` (face units), radii averaged."""
        b, h, w = g.shape
        u = self._u
        r = np.asarray(radii)[:, None] * scale[:, None, None]  # (b, nr, 1)
        px = cx[:, None, None] + r * np.cos(theta)[None, None, :]
        py = cy[:, None, None] + r * np.sin(theta)[None, None, :]
        col = np.clip(px * u + w / 2.0 - 0.5, 0.0, w - 1.000001)
        row = np.clip(-py * u + h / 2.0 - 0.5, 0.0, h - 1.000001)
        r0, c0 = np.floor(row).astype(np.int64), np.floor(col).astype(np.int64)
        fr, fc = row - r0, col - c0
        flat = g.reshape(b, -1)
        i00 = (r0 * w + c0).reshape(b, -1)

        def at(off):
            return np.take_along_axis(flat, i00 + off, axis=1).reshape(px.shape)

        v = (at(0) * (1 - fc) + at(1) * fc) * (1 - fr) + (at(w) * (1 - fc) + at(w + 1) * fc) * fr
        return v.mean(axis=1)

    def __call__(self, images: np.ndarray) -> Reading:
        g = to_gray(images)
        if g.shape[1:] != (self.size_px, self.size_px):
            raise ValueError(f"images are {g.shape[1:]}; this reader reads {self.size_px} px squares")
        cx, cy, scale = self._find(g)
        # the disc: ray profile -> clipped two-level signal -> angle of its first harmonic
        f = self._sample(g, cx, cy, scale, self._theta, self._RADII)
        q25, q75 = np.percentile(f, [25, 75], axis=1)
        half = 0.5 * (q75 - q25)
        with np.errstate(divide="ignore", invalid="ignore"):
            s = np.clip((f - 0.5 * (q25 + q75)[:, None]) / half[:, None], -1.0, 1.0)
        s = np.nan_to_num(s)
        c1 = np.einsum("bk,k->b", s, np.cos(self._theta)) / self._theta.size
        s1 = np.einsum("bk,k->b", s, np.sin(self._theta)) / self._theta.size
        sky_dir = np.arctan2(s1, c1)  # = π/2 + horizon angle in the image
        strength = np.hypot(c1, s1) / (2.0 / np.pi)  # 1 for a clean two-level disc
        # the case ring: rotation of the bank scale by circular cross-correlation with its template
        ring = self._sample(g, cx, cy, scale, self._ring_theta, (self._ring_r,))
        ring = ring - ring.mean(axis=1, keepdims=True)
        corr = np.fft.irfft(np.fft.rfft(ring, axis=1) * self._tmpl_f, n=ring.shape[1], axis=1)
        k = np.argmax(corr, axis=1)
        n = corr.shape[1]
        rows = np.arange(corr.shape[0])
        ym, y0, yp = corr[rows, (k - 1) % n], corr[rows, k], corr[rows, (k + 1) % n]
        den = ym - 2.0 * y0 + yp
        with np.errstate(divide="ignore", invalid="ignore"):
            frac = np.where(den < 0, 0.5 * (ym - yp) / den, 0.0)
        rot = (k + np.clip(frac, -0.5, 0.5)) * (2.0 * np.pi / n)
        with np.errstate(divide="ignore", invalid="ignore"):
            match = y0 / (np.linalg.norm(ring, axis=1) * self._tmpl_norm)
        match = np.nan_to_num(match)
        bank = wrap_angle(sky_dir - np.pi / 2.0 - rot)
        conf = np.clip(np.minimum(strength, match), 0.0, 1.0)
        valid = (2.0 * half >= self.min_contrast) & (conf >= self.min_confidence)
        return Reading(bank, valid, conf)


# ------------------------------------------------------------------ user readers
def _from_degrees(bank_deg: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """A user reader's banks (deg) wrapped to rad (non-finite ones read 0), and which were finite."""
    finite = np.isfinite(bank_deg)
    return wrap_angle(np.radians(np.where(finite, bank_deg, 0.0))), finite


class OnnxReader:
    """A user's ONNX model run by onnxruntime on the CPU.

    The model takes one float32 input of shape ``(batch, C, S, S)``
    (``C = 1`` grayscale or ``3`` RGB, values 0..1, ``S`` the image size;
    the batch dimension may be symbolic) and returns the bank in degrees
    as its first output, ``(batch,)`` or ``(batch, 1)``; an optional second
    output is a confidence 0..1 (a reading is valid when it is ≥ 0.5). A
    non-finite bank is an invalid reading. Loading parses the file as data
    (no Python code runs).

    Raises
    ------
    ReaderLoadError
        The file is missing, is not an ONNX model, or has the wrong input or output shape.
    """

    name = "onnx"

    def __init__(self, path: str | Path, size_px: int, chunk: int = 1024) -> None:
        p = Path(path)
        try:
            data = p.read_bytes()
        except OSError as exc:
            raise ReaderLoadError(f"{p}: cannot be read ({exc.strerror or exc})") from None
        try:
            import onnxruntime as ort
        except ImportError:
            raise ReaderLoadError(
                f"{path}: reading an ONNX model needs onnxruntime; "
                "install the extra: pip install 'rollrig[vision]'"
            ) from None
        try:
            opts = ort.SessionOptions()
            opts.log_severity_level = 3
            self._sess = ort.InferenceSession(data, sess_options=opts, providers=["CPUExecutionProvider"])
        except Exception as exc:  # onnxruntime raises its own exception types
            first = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
            raise ReaderLoadError(f"{p}: is not a usable ONNX model ({first[:160]})") from None
        inputs, outputs = self._sess.get_inputs(), self._sess.get_outputs()
        size_px = int(size_px)
        want = f"allowed: one float input (batch, 1 or 3, {size_px}, {size_px})"
        if len(inputs) != 1:
            raise ReaderLoadError(f"{p}: the model has {len(inputs)} inputs; {want}")
        shape = list(inputs[0].shape)
        ok = (
            len(shape) == 4
            and shape[1] in (1, 3)
            and shape[2] == size_px
            and shape[3] == size_px
            and inputs[0].type == "tensor(float)"
        )
        if not ok:
            got = "x".join(str(s) for s in shape)
            raise ReaderLoadError(f"{p}: the model's input is {inputs[0].type} of shape {got}; {want}")
        if not outputs:
            raise ReaderLoadError(
                f"{p}: the model has no outputs; allowed: bank (deg) and optional confidence"
            )
        self.path = p
        self.size_px = size_px
        self.channels = int(shape[1])
        self.chunk = int(chunk)
        self._in = inputs[0].name
        self._outs = [o.name for o in outputs[:2]]

    def __call__(self, images: np.ndarray) -> Reading:
        a = np.asarray(images, dtype=np.float32)
        if self.channels == 1:
            x = to_gray(a)[:, None]
        else:
            if a.ndim != 4:
                a = np.repeat(a[..., None], 3, axis=-1)
            x = np.ascontiguousarray(np.moveaxis(a, -1, 1))
        b = x.shape[0]
        bank = np.empty(b)
        conf = np.ones(b)
        for i in range(0, b, self.chunk):
            res = self._sess.run(self._outs, {self._in: x[i : i + self.chunk]})
            n = min(self.chunk, b - i)
            first = np.asarray(res[0], dtype=np.float64)
            if first.size != n:
                raise ReaderLoadError(
                    f"{self.path}: the model returned {first.shape} for {n} images; "
                    "allowed: (batch,) or (batch, 1)"
                )
            bank[i : i + n] = first.reshape(n)
            if len(res) > 1:
                c = np.asarray(res[1], dtype=np.float64)
                if c.size == n:
                    conf[i : i + n] = c.reshape(n)
        bank_rad, finite = _from_degrees(bank)
        return Reading(bank_rad, finite & (conf >= 0.5), np.clip(np.nan_to_num(conf), 0, 1))


class CallableReader:
    """A user's Python function ``module:function`` (runs their code).

    The function takes the image batch (float32, ``(batch, h, w)`` or
    ``(batch, h, w, 3)``) and returns the bank in degrees ``(batch,)``, or a
    pair ``(bank_deg, valid)``. Non-finite readings are invalid.
    """

    name = "python"

    def __init__(self, spec: str) -> None:
        mod_name, sep, fn_name = spec.partition(":")
        if not sep or not mod_name or not fn_name:
            raise ReaderLoadError(f"{spec}: allowed: a Python callable written module:function")
        try:
            mod = importlib.import_module(mod_name)
        except ImportError as exc:
            raise ReaderLoadError(f"{spec}: cannot import {mod_name!r} ({exc})") from None
        fn = getattr(mod, fn_name, None)
        if not callable(fn):
            raise ReaderLoadError(f"{spec}: {mod_name!r} has no function {fn_name!r}")
        self.spec = spec
        self._fn = fn

    def __call__(self, images: np.ndarray) -> Reading:
        b = images.shape[0]
        out = self._fn(images)
        valid = np.ones(b, dtype=bool)
        if isinstance(out, tuple) and len(out) == 2:
            out, valid = out
            valid = np.asarray(valid, dtype=bool).reshape(-1)
        bank = np.asarray(out, dtype=np.float64).reshape(-1)
        if bank.size != b or valid.size != b:
            raise ReaderLoadError(
                f"{self.spec}: returned {bank.size} readings for {b} images; allowed: one per image"
            )
        bank_rad, finite = _from_degrees(bank)
        ok = valid & finite
        return Reading(bank_rad, ok, ok.astype(float))
