"""Table and figure of a camera-model fit (``rollrig fit-sensor``)."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np

from .table import Table, fmt_number

__all__ = ["fit_tables", "plot_fit", "sensor_toml"]

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


def sensor_toml(fit, source: str = "") -> str:
    """A ready-to-paste ``[sensor]`` section (scenario units) from a fit.

    Each value is clipped to the range the ``[sensor]`` parser accepts, so the
    section always loads (a test parses it).
    """
    e = fit.estimates
    deg = math.degrees
    rate = e["frame_rate_hz"].value
    lines = [f"# fitted by rollrig fit-sensor{' from ' + source if source else ''}", "[sensor]"]

    def put(key: str, value: float, digits: int = 4) -> None:
        value = 0.0 if abs(value) < 1e-9 else value
        lines.append(f"{key} = {float(f'{value:.{digits}g}')!r}")

    put("frame_rate_hz", rate)
    put("jitter_s", min(e["jitter_s"].value, 0.5 / rate), 3)
    put("latency_s", min(e["latency_s"].value, 5.0), 4)
    put("noise_deg", min(deg(e["noise_rad"].value), 30.0), 3)
    if e["wander_rad"].value > 0:
        put("wander_deg", min(deg(e["wander_rad"].value), 30.0), 3)
        put("wander_time_s", float(np.clip(e["wander_time_s"].value, 0.01, 3600.0)), 3)
    put("bias_deg", float(np.clip(deg(e["bias_rad"].value), -45, 45)), 3)
    put("scale", float(np.clip(e["scale"].value, 0.5, 2.0)), 4)
    if e["quantization_rad"].value > 0:
        put("quantization_deg", min(deg(e["quantization_rad"].value), 30.0), 3)
    if e["outlier_prob"].value > 0:
        put("outlier_prob", min(e["outlier_prob"].value, 0.5), 3)
        put("outlier_deg", min(deg(e["outlier_rad"].value), 180.0), 3)
    pi = e["loss_rate"].value
    if pi > 0 and fit.bursty:
        b = max(e["mean_burst_frames"].value, pi / (1 - pi), 1.0)
        lines += ["", "[sensor.bursts]"]
        put("loss_rate", min(pi, 0.9), 3)
        put("mean_burst_frames", b, 3)
    elif pi > 0:
        put("dropout_prob", min(pi, 0.99), 3)
    return "\n".join(lines) + "\n"
