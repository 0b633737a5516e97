"""A generic attitude instrument, drawn in batches with analytic anti-aliasing.

Our own design (no real instrument's artwork): a square image holds a round
case on a dark panel; on the case ring sits a fixed bank scale (dark ticks at
0°, ±10°, ±20°, ±30°, ±45°, ±60° and ±90° from the top, the 0° tick long and
wide); inside the ring a disc, sky above and ground below its horizon line,
turns with the bank; a fixed aircraft symbol (two wing bars and a centre dot)
sits on top.

Geometry is in *face units*: the image's half-width is 1, ``x`` to the right,
``y`` up, origin at the image centre. Bank is positive right wing down, and
then the horizon line appears turned counter-clockwise by the bank, as on a
real instrument seen from the pilot's seat. Pitch (optional) moves the horizon
down by :data:`PITCH_UNITS_PER_RAD` face units per radian of nose-up pitch.

Anti-aliasing is analytic: every shape is given by a signed distance ``d`` (in
pixels) to its edge, and its coverage of a pixel is ``clip(d + 1/2, 0, 1)``,
the exact box-filter area for a straight edge crossing the pixel square along
an axis, and a close approximation at other angles. Only the horizon depends
on the bank, so the image is ``base + gain · sky`` with ``base`` and ``gain``
precomputed once per size: one fused multiply-add per pixel and image.

Pixel values are in ``[0, 1]`` (float32); grayscale images are ``(batch, h,
w)``, colour images ``(batch, h, w, 3)`` (RGB). Grayscale values are the luma
(ITU-R BT.601 weights 0.299, 0.587, 0.114) of the RGB colours.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache

import numpy as np

__all__ = [
    "Instrument",
    "InstrumentGeometry",
    "GEOMETRY",
    "COLOURS",
    "PITCH_UNITS_PER_RAD",
    "MIN_SIZE_PX",
    "MAX_SIZE_PX",
    "face_coordinates",
    "luma",
]

MIN_SIZE_PX = 32
MAX_SIZE_PX = 512

#: face units the horizon moves per radian of pitch (nose up: horizon down)
PITCH_UNITS_PER_RAD = 0.6

#: RGB colours of the parts (0..1)
COLOURS = {
    "panel": (0.03, 0.03, 0.03),
    "case": (0.45, 0.45, 0.47),
    "tick": (0.02, 0.02, 0.02),
    "sky": (0.55, 0.78, 1.00),
    "ground": (0.45, 0.28, 0.12),
    "symbol": (1.00, 0.55, 0.00),  # orange: its gray (0.62) shows on sky and ground alike
}

_LUMA = np.array([0.299, 0.587, 0.114])


def luma(rgb) -> np.ndarray:
    """Grayscale value of RGB colours or images (last axis 3), ITU-R BT.601 weights."""
    a = np.asarray(rgb)
    return a @ (_LUMA.astype(np.float32) if a.dtype == np.float32 else _LUMA)


@dataclass(frozen=True)
class InstrumentGeometry:
    """Where the parts are, in face units (image half-width = 1).

    Parameters
    ----------
    case_radius : face units
        Outer edge of the case ring.
    disc_radius : face units
        Edge of the turning sky/ground disc (inner edge of the ring).
    tick_inner, tick_outer : face units
        Radial extent of the bank-scale ticks (the 0° tick reaches further).
    tick_width : face units
        Width of a tick (the 0° tick is twice as wide).
    tick_angles_deg : deg
        Tick positions, measured clockwise from the top of the case.
    wing_inner, wing_outer, wing_half_height, dot_radius : face units
        The fixed aircraft symbol.
    """

    case_radius: float = 0.92
    disc_radius: float = 0.74
    tick_inner: float = 0.775
    tick_outer: float = 0.875
    tick_width: float = 0.04
    tick_angles_deg: tuple[float, ...] = (-90, -60, -45, -30, -20, -10, 0, 10, 20, 30, 45, 60, 90)
    wing_inner: float = 0.16
    wing_outer: float = 0.45
    wing_half_height: float = 0.025
    dot_radius: float = 0.04


GEOMETRY = InstrumentGeometry()


def face_coordinates(size_px: int) -> tuple[np.ndarray, np.ndarray, float]:
    """Pixel-centre coordinates ``(x, y)`` in face units, ``(h, w)`` each, and pixels per unit."""
    u = size_px / 2.0
    c = (np.arange(size_px) + 0.5 - u) / u
    x = np.broadcast_to(c[None, :], (size_px, size_px))
    y = np.broadcast_to(-c[:, None], (size_px, size_px))
    return x, y, u


def _cover(d_px: np.ndarray) -> np.ndarray:
    """Box-filter coverage of a pixel by the side of an edge at signed distance ``d_px``."""
    return np.clip(d_px + 0.5, 0.0, 1.0)


def _static_layers(size_px: int, g: InstrumentGeometry) -> dict[str, np.ndarray]:
    """Coverage (0..1) of each bank-independent part, ``(h, w)`` float64."""
    x, y, u = face_coordinates(size_px)
    r = np.hypot(x, y)
    case = _cover((g.case_radius - r) * u)
    disc = _cover((g.disc_radius - r) * u)
    ticks = np.zeros_like(r)
    for a in g.tick_angles_deg:
        th = math.radians(a)
        along = x * math.sin(th) + y * math.cos(th)  # clockwise from the top
        across = x * math.cos(th) - y * math.sin(th)
        big = a == 0
        half_w = g.tick_width * (1.0 if big else 0.5)
        outer = g.tick_outer + (0.03 if big else 0.0)
        cov = _cover((half_w - np.abs(across)) * u) * _cover(
            np.minimum(along - g.tick_inner, outer - along) * u
        )
        ticks = np.maximum(ticks, cov)
    wing = _cover((g.wing_half_height - np.abs(y)) * u) * _cover(
        np.minimum(np.abs(x) - g.wing_inner, g.wing_outer - np.abs(x)) * u
    )
    symbol = np.maximum(wing, _cover((g.dot_radius - r) * u))
    return {"case": case, "disc": disc, "ticks": ticks, "symbol": symbol}


@lru_cache(maxsize=16)
def _base_gain(size_px: int, colour: bool, g: InstrumentGeometry) -> tuple[np.ndarray, np.ndarray]:
    """``base`` and ``gain`` images such that ``image = base + gain · sky_coverage``."""
    lay = _static_layers(size_px, g)
    col = {k: np.asarray(v, dtype=float) for k, v in COLOURS.items()}
    if not colour:
        col = {k: np.atleast_1d(luma(v)) for k, v in col.items()}

    def lerp(under, over, cov):
        return under * (1.0 - cov[..., None]) + over * cov[..., None]

    shape = (size_px, size_px, col["panel"].size)
    outside = np.broadcast_to(col["panel"], shape)
    outside = lerp(outside, col["case"], lay["case"])
    outside = lerp(outside, col["tick"], lay["ticks"])
    # disc pixels: ground + (sky - ground)·s, composited over the ring, then the symbol on top
    keep = 1.0 - lay["symbol"][..., None]
    d = lay["disc"][..., None]
    base = keep * ((1.0 - d) * outside + d * col["ground"]) + lay["symbol"][..., None] * col["symbol"]
    gain = keep * d * (col["sky"] - col["ground"])
    if not colour:
        base, gain = base[..., 0], gain[..., 0]
    base, gain = base.astype(np.float32), gain.astype(np.float32)
    base.setflags(write=False)
    gain.setflags(write=False)
    return base, gain


class Instrument:
    """Renders the attitude instrument at one size, for batches of bank (and pitch) angles.

    Parameters
    ----------
    size_px : px
        Width and height of the square image (32–512; the design is meant
        for 64–256).
    colour : bool
        RGB images ``(batch, h, w, 3)`` if true, else grayscale ``(batch, h, w)``.
    geometry : InstrumentGeometry
        Where the parts are (the default is the bundled design).
    """

    def __init__(self, size_px: int = 64, colour: bool = False, geometry: InstrumentGeometry = GEOMETRY):
        size_px = int(size_px)
        if not MIN_SIZE_PX <= size_px <= MAX_SIZE_PX:
            raise ValueError(f"size_px = {size_px}; allowed: {MIN_SIZE_PX} ≤ size_px ≤ {MAX_SIZE_PX}")
        self.size_px = size_px
        self.colour = bool(colour)
        self.geometry = geometry
        self._x, self._y, self._u = face_coordinates(size_px)
        self._yx1 = np.stack([self._y.ravel(), self._x.ravel(), np.ones(size_px * size_px)]).astype(
            np.float32
        )
        self.base, self.gain = _base_gain(size_px, self.colour, geometry)

    @property
    def pixels_per_unit(self) -> float:
        """Pixels per face unit (half the image size)."""
        return self._u

    def sky_coverage(self, bank_rad, pitch_rad=None) -> np.ndarray:
        """Coverage of each pixel by the sky half-plane, ``(batch, h, w)`` float32."""
        bank = np.atleast_1d(np.asarray(bank_rad, dtype=np.float64)).ravel()
        u = self._u
        # signed distance above the horizon in pixels, + 1/2 for the box filter (elementwise, so
        # every image is computed the same way whatever the batch)
        c = (np.cos(bank) * u).astype(np.float32)[:, None]
        s = (-np.sin(bank) * u).astype(np.float32)[:, None]
        off = np.full(bank.size, 0.5)
        if pitch_rad is not None:
            off = (
                off
                + np.broadcast_to(np.asarray(pitch_rad, dtype=np.float64), bank.shape)
                * PITCH_UNITS_PER_RAD
                * u
            )
        d = self._yx1[0][None, :] * c
        d += self._yx1[1][None, :] * s
        d += off.astype(np.float32)[:, None]
        np.clip(d, 0.0, 1.0, out=d)
        return d.reshape(bank.size, self.size_px, self.size_px)

    def render(self, bank_rad, pitch_rad=None) -> np.ndarray:
        """Images of the instrument at each bank (rad), optionally with pitch (rad).

        Returns ``(batch, h, w)`` float32 (grayscale) or ``(batch, h, w, 3)``
        (colour), values in ``[0, 1]``.
        """
        sky = self.sky_coverage(bank_rad, pitch_rad)
        if self.colour:
            return self.base[None] + self.gain[None] * sky[..., None]
        out = sky
        out *= self.gain[None]
        out += self.base[None]
        return out
