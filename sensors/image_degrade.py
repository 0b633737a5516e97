"""What a real camera does to the picture of the instrument: pure, composable degradations.

Every function takes a batch of images (``(batch, h, w)`` grayscale or
``(batch, h, w, 3)`` colour, float32 values in ``[0, 1]``) and returns a new
batch; it never changes its input. Parameters are in scenario units (pixel
values as fractions of full scale, angles in degrees, distances in pixels or
face units as named) and each is a scalar or a ``(batch,)`` array, one value
per image (per run). Random functions take ``rng``: one
``np.random.Generator`` per image (a sequence of length ``batch``; image *i*
then draws the same alone as in a batch), or one generator for the whole
batch (faster, for throughput studies).

Groups:

* sensor: :func:`pixel_noise`, :func:`quantize_bits`, :func:`bad_pixels`;
* lighting: :func:`brightness_contrast`, :func:`glare_spot`, :func:`shadow_edge`;
* camera pose and optics: :func:`warp` (shift, rotation, zoom, optional
  perspective tilt, all in one resampling), :func:`defocus_blur`.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

__all__ = [
    "pixel_noise",
    "quantize_bits",
    "bad_pixels",
    "brightness_contrast",
    "glare_spot",
    "shadow_edge",
    "warp",
    "defocus_blur",
    "per_image",
    "KINDS",
    "degrade",
    "Rng",
]

Rng = np.random.Generator | Sequence[np.random.Generator]


def per_image(value, batch: int, name: str, ndim: int = 1) -> np.ndarray:
    """A parameter as a float64 ``(batch,)`` array, reshaped for broadcasting over ``ndim - 1`` axes."""
    a = np.asarray(value, dtype=np.float64)
    if a.ndim == 0:
        a = np.full(batch, float(a))
    elif a.shape != (batch,):
        raise ValueError(f"{name} has shape {a.shape}; allowed: a scalar or shape ({batch},)")
    return a.reshape((batch,) + (1,) * (ndim - 1))


def _draw(rng: Rng, batch: int, shape: tuple[int, ...], kind: str) -> np.ndarray:
    """``(batch, *shape)`` draws: ``normal`` or ``uniform`` on [0, 1)."""
    if isinstance(rng, np.random.Generator):
        f = rng.standard_normal if kind == "normal" else rng.random
        return f((batch, *shape), dtype=np.float32)
    if len(rng) != batch:
        raise ValueError(f"rng has {len(rng)} generators; allowed: one per image ({batch})")
    out = np.empty((batch, *shape), dtype=np.float32)
    for row, g in zip(out, rng, strict=True):
        (g.standard_normal if kind == "normal" else g.random)(out=row, dtype=np.float32)
    return out


def _spatial(images: np.ndarray) -> tuple[int, int, int, bool]:
    if images.ndim not in (3, 4) or (images.ndim == 4 and images.shape[-1] != 3):
        raise ValueError(f"images have shape {images.shape}; allowed: (batch, h, w) or (batch, h, w, 3)")
    b, h, w = images.shape[:3]
    return b, h, w, images.ndim == 4


def _col(a: np.ndarray, colour: bool) -> np.ndarray:
    """A ``(batch, h, w)`` field broadcast against colour images."""
    return a[..., None] if colour else a


# ------------------------------------------------------------------ sensor
def pixel_noise(images: np.ndarray, sigma, rng: Rng) -> np.ndarray:
    """Add white Gaussian noise of std ``sigma`` (fraction of full scale) to every pixel value."""
    b = images.shape[0]
    s = per_image(sigma, b, "sigma", images.ndim).astype(np.float32)
    return images + s * _draw(rng, b, images.shape[1:], "normal")


def quantize_bits(images: np.ndarray, bits: int = 8) -> np.ndarray:
    """Clip to ``[0, 1]`` and round to ``2**bits`` levels (an ADC).

    The rounding error has std ``q/√12`` with ``q = 1/(2**bits − 1)``.
    """
    levels = float(2 ** int(bits) - 1)
    out = np.clip(images, 0.0, 1.0) * np.float32(levels)
    np.rint(out, out=out)
    out *= np.float32(1.0 / levels)
    return out


def bad_pixels(images: np.ndarray, dead_frac, hot_frac, rng: Rng) -> np.ndarray:
    """Stuck pixels: a fraction ``dead_frac`` read 0, a fraction ``hot_frac`` read 1 (independently)."""
    b, h, w, colour = _spatial(images)
    dead = per_image(dead_frac, b, "dead_frac", 3)
    hot = per_image(hot_frac, b, "hot_frac", 3)
    u = _draw(rng, b, (h, w), "uniform")
    out = np.where(_col(u < dead, colour), np.float32(0.0), images)
    return np.where(_col(u > 1.0 - hot, colour), np.float32(1.0), out)


# ------------------------------------------------------------------ lighting
def brightness_contrast(images: np.ndarray, brightness=0.0, contrast=1.0, pivot: float = 0.5) -> np.ndarray:
    """``pivot + contrast · (value − pivot) + brightness`` (fractions of full scale); no clipping."""
    b = images.shape[0]
    g = per_image(contrast, b, "contrast", images.ndim).astype(np.float32)
    o = per_image(brightness, b, "brightness", images.ndim).astype(np.float32)
    return (images - np.float32(pivot)) * g + (np.float32(pivot) + o)


def _xy(h: int, w: int) -> tuple[np.ndarray, np.ndarray]:
    """Pixel-centre coordinates in face units (half the width = 1; y up), ``(h, w)``."""
    u = w / 2.0
    x = (np.arange(w) + 0.5 - u) / u
    y = -(np.arange(h) + 0.5 - h / 2.0) / u
    return np.broadcast_to(x[None, :], (h, w)), np.broadcast_to(y[:, None], (h, w))


def glare_spot(images: np.ndarray, strength, x, y, radius) -> np.ndarray:
    """Add a Gaussian light spot, then saturate at 1 (a reflection on the glass).

    ``strength`` is the added value at the spot's centre (fraction of full
    scale); ``x``, ``y`` its centre and ``radius`` its standard deviation, in
    face units (image half-width = 1, y up).
    """
    b, h, w, colour = _spatial(images)
    px, py = _xy(h, w)
    cx, cy = per_image(x, b, "x", 3), per_image(y, b, "y", 3)
    rad = per_image(radius, b, "radius", 3)
    s = per_image(strength, b, "strength", 3)
    # the Gaussian separates: exp(−(dx² + dy²)/2r²) = exp(−dx²/2r²)·exp(−dy²/2r²)
    gx = np.exp(-((px[None, :1, :] - cx) ** 2) / (2.0 * rad**2)) * s
    gy = np.exp(-((py[None, :, :1] - cy) ** 2) / (2.0 * rad**2))
    spot = gy.astype(np.float32) * gx.astype(np.float32)
    return np.minimum(images + _col(spot, colour), np.float32(1.0))


def shadow_edge(images: np.ndarray, depth, angle_deg, offset, softness: float = 0.05) -> np.ndarray:
    """Darken one side of a straight shadow edge by the fraction ``depth``.

    The edge's normal points at ``angle_deg`` (counter-clockwise from the
    image's +x axis); pixels with ``x cos a + y sin a > offset`` (face
    units) are in shadow, multiplied by ``1 − depth``; the edge is a
    logistic ramp of width ``softness`` face units.
    """
    b, h, w, colour = _spatial(images)
    px, py = _xy(h, w)
    a = np.radians(per_image(angle_deg, b, "angle_deg", 3))
    off = per_image(offset, b, "offset", 3)
    dep = per_image(depth, b, "depth", 3)
    dist = px * np.cos(a) + py * np.sin(a) - off
    inside = 0.5 * (1.0 + np.tanh(dist / (2.0 * softness)))
    return images * _col((1.0 - dep * inside).astype(np.float32), colour)


# ------------------------------------------------------------------ pose and optics
def warp(
    images: np.ndarray,
    *,
    shift_x_px=0.0,
    shift_y_px=0.0,
    rotation_deg=0.0,
    zoom=1.0,
    tilt_deg=0.0,
    tilt_axis_deg=0.0,
    fill: float = 0.03,
) -> np.ndarray:
    """Resample the image as a camera at another pose and focal length would see it (bilinear).

    The instrument appears turned counter-clockwise by ``rotation_deg`` (so a
    bank reading taken from the image alone grows by that angle), magnified
    by ``zoom`` about the image centre, then moved by ``shift_x_px`` (right)
    and ``shift_y_px`` (down). ``tilt_deg`` tilts the camera about an axis in
    the image plane at ``tilt_axis_deg`` from +x, giving a perspective
    (keystone) distortion for a pinhole camera whose focal length is the
    image width. Pixels that come from outside the picture get ``fill``.
    """
    b, h, w, colour = _spatial(images)
    u = w / 2.0
    px, py = (a.astype(np.float32) for a in _xy(h, w))

    def par(v, name):
        return per_image(v, b, name, 3).astype(np.float32)

    rot = np.radians(par(rotation_deg, "rotation_deg"))
    z = par(zoom, "zoom")
    sx = par(shift_x_px, "shift_x_px") / np.float32(u)
    sy = -par(shift_y_px, "shift_y_px") / np.float32(u)
    tilt = np.radians(per_image(tilt_deg, b, "tilt_deg", 3))
    # output pixel -> where it came from: undo the shift, the tilt, the zoom and the rotation
    qx, qy = px - sx, py - sy
    if np.any(tilt != 0):
        ax = np.radians(per_image(tilt_axis_deg, b, "tilt_axis_deg", 3))
        f = 2.0  # focal length in face units (the image width)
        ca, sa = np.cos(ax), np.sin(ax)
        along, across = qx * ca + qy * sa, -qx * sa + qy * ca
        # the face plane turned by the tilt about the in-plane axis, seen by a pinhole camera:
        # (along, across) -> (along, across·cos t, f + across·sin t) -> projection; inverted here
        ct, st = np.cos(tilt), np.sin(tilt)
        across_src = across * f / (f * ct - across * st)
        along_src = along * (f + across_src * st) / f
        qx, qy = along_src * ca - across_src * sa, along_src * sa + across_src * ca
    cr, sr = np.cos(rot) / z, np.sin(rot) / z
    # to pixel indices (column, row) of the source
    col = (cr * qx + sr * qy) * np.float32(u) + np.float32(u - 0.5)
    row = (sr * qx - cr * qy) * np.float32(u) + np.float32(h / 2.0 - 0.5)
    return _bilinear(images, row, col, fill)


def _bilinear(images: np.ndarray, row: np.ndarray, col: np.ndarray, fill: float) -> np.ndarray:
    """Bilinear samples at fractional ``(row, col)`` ``(batch, h, w)``; outside the picture: ``fill``."""
    b, h, w, colour = _spatial(images)
    c = images.shape[3] if colour else 1
    # a one-pixel border of ``fill`` around every image: clipped taps outside land on it
    pad = np.full((b, h + 2, w + 2, c), np.float32(fill), dtype=np.float32)
    pad[:, 1:-1, 1:-1] = images.reshape(b, h, w, c)
    rr = np.clip(row.astype(np.float32) + np.float32(1.0), 0.0, h + 0.999)
    cc = np.clip(col.astype(np.float32) + np.float32(1.0), 0.0, w + 0.999)
    r0 = rr.astype(np.int64)
    c0 = cc.astype(np.int64)
    fr = rr - r0
    fc = cc - c0
    wp = w + 2
    idx = r0 * wp + c0 + (np.arange(b) * ((h + 2) * wp))[:, None, None]
    chans = []
    for k in range(c):  # 3-D arrays per channel: numpy is slow with a length-1 last axis
        flat = np.ascontiguousarray(pad[..., k]).ravel()
        top = flat[idx] * (1 - fc) + flat[idx + 1] * fc
        bottom = flat[idx + wp] * (1 - fc) + flat[idx + wp + 1] * fc
        chans.append(top * (1 - fr) + bottom * fr)
    return np.stack(chans, axis=-1) if colour else chans[0]


def defocus_blur(images: np.ndarray, sigma_px) -> np.ndarray:
    """Gaussian blur of standard deviation ``sigma_px`` (pixels; 0 = sharp), edges extended.

    A separable, normalised, sampled Gaussian kernel (SciPy's
    ``gaussian_filter1d``); each image may have its own width.
    """
    b, h, w, colour = _spatial(images)
    from scipy.ndimage import gaussian_filter1d

    s = per_image(sigma_px, b, "sigma_px", 1)
    out = np.array(images, dtype=np.float32, copy=True)
    for value in np.unique(s):
        if value <= 0:
            continue
        rows = np.flatnonzero(s == value)
        part = out[rows]
        for axis in (1, 2):  # sampled Gaussian, normalised, 4 σ each side, edges extended
            part = gaussian_filter1d(part, float(value), axis=axis, mode="nearest", truncate=4.0)
        out[rows] = part
    return out


# ------------------------------------------------------------------ named kinds
#: degradation kinds by name: (what the strength means, default strengths)
KINDS: dict[str, tuple[str, tuple[float, ...]]] = {
    "noise": ("pixel noise std, fraction of full scale", (0.0, 0.02, 0.05, 0.1, 0.2)),
    "dead_pixels": ("fraction of stuck pixels (half dead, half hot)", (0.0, 0.01, 0.02, 0.05, 0.1)),
    "brightness": ("added brightness, fraction of full scale", (0.0, 0.1, 0.2, 0.3, 0.4)),
    "contrast": ("contrast gain (1 = unchanged)", (1.0, 0.7, 0.5, 0.3, 0.15)),
    "glare": (
        "glare spot peak, fraction of full scale (random place on the face)",
        (0.0, 0.25, 0.5, 0.75, 1.0),
    ),
    "shadow": ("shadow depth, fraction darkened (random edge across the face)", (0.0, 0.2, 0.4, 0.6, 0.8)),
    "rotation": ("camera rotation against the instrument, deg", (0.0, 2.0, 5.0, 10.0, 20.0)),
    "shift": ("camera shift, px (random direction)", (0.0, 1.0, 2.0, 4.0, 8.0)),
    "tilt": ("perspective tilt, deg (random axis)", (0.0, 10.0, 20.0, 30.0, 40.0)),
    "zoom": ("zoom factor (1 = nominal)", (1.0, 1.05, 1.1, 1.2, 1.3)),
    "blur": ("defocus blur std, px", (0.0, 0.5, 1.0, 2.0, 3.0)),
}


def degrade(kind: str, images: np.ndarray, strength, rng: Rng) -> np.ndarray:
    """Apply one named degradation kind at ``strength`` (scalar or ``(batch,)``, units in :data:`KINDS`).

    Random placement (glare position, shadow edge, shift direction, tilt
    axis) is drawn from ``rng`` per image.
    """
    b = images.shape[0]
    s = per_image(strength, b, "strength", 1)
    if kind == "noise":
        return pixel_noise(images, s, rng)
    if kind == "dead_pixels":
        return bad_pixels(images, 0.5 * s, 0.5 * s, rng)
    if kind == "brightness":
        return brightness_contrast(images, brightness=s)
    if kind == "contrast":
        return brightness_contrast(images, contrast=s)
    u = _draw(rng, b, (2,), "uniform").astype(np.float64)
    if kind == "glare":
        ang, rad = 2 * np.pi * u[:, 0], 0.6 * np.sqrt(u[:, 1])  # uniform over a disc of 0.6 units
        return glare_spot(images, s, rad * np.cos(ang), rad * np.sin(ang), 0.15)
    if kind == "shadow":
        return shadow_edge(images, s, 360.0 * u[:, 0], 0.5 * (2.0 * u[:, 1] - 1.0))
    if kind == "rotation":
        return warp(images, rotation_deg=s)
    if kind == "shift":
        ang = 2 * np.pi * u[:, 0]
        return warp(images, shift_x_px=s * np.cos(ang), shift_y_px=s * np.sin(ang))
    if kind == "tilt":
        return warp(images, tilt_deg=s, tilt_axis_deg=360.0 * u[:, 0])
    if kind == "zoom":
        return warp(images, zoom=s)
    if kind == "blur":
        return defocus_blur(images, s)
    raise ValueError(f"kind = {kind!r}; allowed: {', '.join(KINDS)}")
