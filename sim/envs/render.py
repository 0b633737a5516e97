"""An attitude picture for ``render_mode="rgb_array"`` (matplotlib, imported lazily)."""

from __future__ import annotations

import math

import numpy as np

__all__ = ["attitude_picture"]

_SIZE_IN, _DPI = 3.0, 80  # 240 × 240 pixels


def attitude_picture(
    bank_rad: float, reading_rad: float, valid: bool, cmd_rad: float, t_s: float
) -> np.ndarray:
    """RGB ``(240, 240, 3)`` uint8: horizon and wings at the true bank, the camera reading beside it.

    The sky/ground split is drawn as the pilot sees it (the horizon tilts
    opposite to the bank); the fixed wings symbol is black, the camera's
    reading is a dashed orange horizon (grey when its newest frame was lost)
    and the command a green tick on the bank scale.
    """
    import matplotlib

    matplotlib.use("Agg", force=False)
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(_SIZE_IN, _SIZE_IN), dpi=_DPI)
    canvas = FigureCanvasAgg(fig)
    ax = fig.add_axes((0, 0, 1, 1))
    ax.set_xlim(-1, 1)
    ax.set_ylim(-1, 1)
    ax.set_axis_off()
    c, s = math.cos(-bank_rad), math.sin(-bank_rad)
    # ground: half-plane below the tilted horizon, as a big polygon
    far = 3.0
    pts = np.array([[-far, 0], [far, 0], [far, -far], [-far, -far]])
    rot = np.array([[c, -s], [s, c]])
    ax.set_facecolor("#7fb2e5")
    ax.add_patch(matplotlib.patches.Rectangle((-1, -1), 2, 2, color="#7fb2e5"))
    ax.add_patch(matplotlib.patches.Polygon(pts @ rot.T, color="#a0703c"))
    cr, sr = math.cos(-reading_rad), math.sin(-reading_rad)
    ax.plot([-0.9 * cr, 0.9 * cr], [-0.9 * sr, 0.9 * sr], ls="--", lw=2, color="orange" if valid else "grey")
    ax.plot([-0.6, -0.15, -0.05], [0, 0, -0.08], color="black", lw=4)
    ax.plot([0.6, 0.15, 0.05], [0, 0, -0.08], color="black", lw=4)
    a = math.pi / 2 - cmd_rad
    ax.plot(
        [0.85 * math.cos(a), 0.97 * math.cos(a)],
        [0.85 * math.sin(a), 0.97 * math.sin(a)],
        color="green",
        lw=3,
    )
    ax.text(-0.95, 0.88, f"t {t_s:5.2f} s  bank {math.degrees(bank_rad):+5.1f}°", fontsize=7)
    ax.text(-0.95, 0.78, f"camera {math.degrees(reading_rad):+5.1f}°", fontsize=7, color="darkorange")
    canvas.draw()
    return np.asarray(canvas.buffer_rgba())[..., :3].copy()
