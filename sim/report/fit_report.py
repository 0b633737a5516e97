"""Table and figure of a camera-model fit (``rollrig fit-sensor``)."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np

from .table import Table, fmt_number

__all__ = ["fit_tables", "plot_fit"]

_ROWS = (  # key, label, shown in degrees
    ("frame_rate_hz", "frame rate", False),
    ("jitter_s", "timing jitter", False),
    ("latency_s", "latency (effective)", False),
    ("bias_rad", "bias", True),
    ("scale", "scale", False),
    ("quantization_rad", "quantisation step", True),
    ("noise_rad", "white noise std", True),
    ("wander_rad", "wandering error std", True),
    ("wander_time_s", "wander correlation time", False),
    ("outlier_prob", "outlier rate", False),
    ("outlier_rad", "outlier size", True),
    ("loss_rate", "loss rate", False),
    ("mean_burst_frames", "mean burst length", False),
)


def fit_tables(fit, source: str) -> list[Table]:
    """The estimates as a table: display units in rows, SI-named keys in records."""
    t = Table(title=f"Sensor fit: {source}", columns=["quantity", "estimate", "± 1 SE", "unit", "how"])
    recs = []
    for key, label, in_deg in _ROWS:
        e = fit.estimates[key]
        v, se, unit = e.value, e.se, e.unit
        if in_deg:
            v, se, unit = math.degrees(v), math.degrees(se), "deg"
        t.add(label, fmt_number(v, 4), fmt_number(se, 2), unit, e.note)
        recs.append(
            {
                "quantity": key.replace("_rad", "_deg") if in_deg else key,
                "estimate": v,
                "se": se,
                "unit": unit,
                "how": e.note,
            }
        )
    t.records = recs
    t.notes = [
        f"{fit.n_rows} rows, {fit.n_frames} frames; SE = one standard error (asymptotic formulas)",
        "losses "
        + (
            "come in bursts: sensor.bursts table written"
            if fit.bursty
            else "look independent: dropout_prob written"
        ),
    ]
    return [t]


def plot_fit(fit, path: Path, title: str) -> None:
    """Reading and fitted model over time, and the residual; the legend sits outside the data."""
    from .plots import pyplot

    plt = pyplot()
    fig, (a, b) = plt.subplots(2, 1, figsize=(11, 6), sharex=True, layout="constrained")
    deg = 180.0 / math.pi
    ok = ~fit.outlier & np.isfinite(fit.predicted)
    a.plot(fit.t, fit.reading * deg, ".", ms=2, label="reading")
    a.plot(fit.t, fit.predicted * deg, "-", lw=0.8, label="fitted model of the reference (shifted, scaled)")
    a.plot(fit.t[fit.outlier], fit.reading[fit.outlier] * deg, "rx", ms=4, label="outliers")
    a.set_ylabel("bank (deg)")
    a.legend(loc="lower left", bbox_to_anchor=(0.0, 1.02), ncol=3, fontsize=8, frameon=False)
    fig.suptitle(title)
    b.plot(fit.t[ok], (fit.reading - fit.predicted)[ok] * deg, ".", ms=2)
    b.set_ylabel("residual (deg)")
    b.set_xlabel("time (s)")
    a.grid(alpha=0.3)
    b.grid(alpha=0.3)
    fig.savefig(path, dpi=110)
    plt.close(fig)
