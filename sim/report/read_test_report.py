"""Tables and figures of a read-test: per-condition errors, the ranking, fitted sensor models, plots."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np

from . import CAUTION
from .table import Table, fmt_number

__all__ = [
    "condition_table",
    "ranking_table",
    "fit_table",
    "sensor_section_text",
    "fidelity_table",
    "plot_error_vs_bank",
    "plot_error_vs_strength",
    "plot_montage",
]


def _f(x, d=3):
    return fmt_number(x, d) if x is not None and math.isfinite(x) else "—"


def condition_table(res) -> Table:
    """One row per (kind, strength): RMS, bias, scale error, max, outliers, valid share."""
    sp = res.spec
    t = Table(
        title=f"Reader {res.reader_name!r} at {sp.size_px} px: errors by degradation "
        f"({len(res.banks_rad)} banks × {sp.draws} draws per row)",
        columns=[
            "kind",
            "strength",
            "RMS (deg)",
            "bias (deg)",
            "scale error (%)",
            "max (deg)",
            f"outliers > {sp.outlier_deg:g}° (%)",
            "valid (%)",
        ],
    )
    t.records = []
    for s in res.stats:
        t.add(
            s.kind,
            _f(s.strength),
            _f(s.rms_deg),
            _f(s.bias_deg),
            _f(100 * s.scale_error),
            _f(s.max_deg),
            _f(100 * s.outlier_rate),
            _f(100 * s.valid_frac),
        )
        t.records.append(
            {
                "kind": s.kind,
                "strength": s.strength,
                "rms_deg": s.rms_deg,
                "bias_deg": s.bias_deg,
                "scale_error": s.scale_error,
                "max_deg": s.max_deg,
                "outlier_rate": s.outlier_rate,
                "valid_frac": s.valid_frac,
            }
        )
    t.notes.append("errors over valid readings only; scale error = slope of error on true bank")
    t.notes.append(CAUTION)
    return t


def ranking_table(res) -> Table:
    """Degradation kinds by cost at their strongest setting."""
    from rollrig.sensors.image_degrade import KINDS

    t = Table(
        title="What each degradation costs the reader (at its strongest setting)",
        columns=["rank", "kind", "strongest", "RMS added (deg)", "valid share lost (%)"],
    )
    t.records = []
    for i, (kind, cost, lost) in enumerate(res.ranking(), 1):
        strongest = max(
            res.spec.kinds[kind], key=lambda v: abs(v - (1.0 if kind in ("contrast", "zoom") else 0.0))
        )
        t.add(
            i,
            kind,
            _f(strongest),
            "all invalid" if not math.isfinite(cost) else _f(cost),
            _f(100 * lost),
        )
        t.records.append(
            {"rank": i, "kind": kind, "strength": strongest, "rms_added_deg": cost, "valid_lost": lost}
        )
    for kind in res.spec.kinds:
        t.notes.append(f"{kind} strength: {KINDS[kind][0]}")
    t.notes.append("ranked by RMS error added over the clean pictures, then by the valid share lost")
    return t


def fit_table(res) -> Table:
    t = Table(
        title="Statistical camera model fitted at each operating condition (sensor section keys)",
        columns=[
            "kind",
            "strength",
            "bias_deg",
            "scale",
            "noise_deg",
            "outlier_prob",
            "outlier_deg",
            "dropout_prob",
            "quantization_deg",
        ],
    )
    t.records = []
    for f in res.fits:
        t.add(
            f.kind,
            _f(f.strength),
            _f(math.degrees(f.bias_rad)),
            fmt_number(f.scale, 5),
            _f(math.degrees(f.noise_rad)),
            _f(f.outlier_prob),
            _f(math.degrees(f.outlier_rad)),
            _f(f.dropout_prob),
            _f(math.degrees(f.quantization_rad)),
        )
        t.records.append(
            {
                "kind": f.kind,
                "strength": f.strength,
                "bias_deg": math.degrees(f.bias_rad),
                "scale": f.scale,
                "noise_deg": math.degrees(f.noise_rad),
                "outlier_prob": f.outlier_prob,
                "outlier_deg": math.degrees(f.outlier_rad),
                "dropout_prob": f.dropout_prob,
                "quantization_deg": math.degrees(f.quantization_rad),
                "valid_readings": f.n_valid,
            }
        )
    t.notes.append(
        "the model's noise is white per frame; the reader's error also depends on the bank "
        "(see error_vs_bank.png), which the model does not carry"
    )
    return t


# ------------------------------------------------------------------ plots
def _rms(e: np.ndarray, axis) -> np.ndarray:
    with np.errstate(invalid="ignore"), __import__("warnings").catch_warnings():
        __import__("warnings").simplefilter("ignore", RuntimeWarning)
        return np.sqrt(np.nanmean(e * e, axis=axis))


def plot_error_vs_bank(res, path: Path) -> None:
    """RMS error against true bank, one line per kind at each strength (the clean case in black)."""
    from .plots import pyplot

    plt = pyplot()
    kinds = list(res.spec.kinds)
    fig, axes = plt.subplots(
        1, len(kinds), figsize=(3.6 * len(kinds), 3.4), sharey=False, layout="constrained"
    )
    axes = np.atleast_1d(axes)
    b = np.degrees(res.banks_rad)
    for ax, kind in zip(axes, kinds, strict=True):
        e = res.errors_deg(kind)
        for i, s in enumerate(res.spec.kinds[kind]):
            ax.plot(b, _rms(e[i], axis=1), lw=1.2, label=f"{s:g}")
        ax.set_title(kind)
        ax.set_xlabel("true bank (deg)")
        ax.set_yscale("log")
        ax.set_ylim(bottom=1e-3)  # below a thousandth of a degree is the pixel grid's dither
        ax.grid(alpha=0.3)
        ax.legend(title="strength", fontsize=7, title_fontsize=7)
    axes[0].set_ylabel("RMS reading error (deg)")
    fig.suptitle(f"Reader {res.reader_name!r}: error against bank ({res.spec.size_px} px)")
    fig.savefig(path, dpi=110)
    plt.close(fig)


def plot_error_vs_strength(res, path: Path) -> None:
    """RMS error (and valid share) against strength, one panel per kind."""
    from .plots import pyplot

    plt = pyplot()
    kinds = list(res.spec.kinds)
    fig, axes = plt.subplots(1, len(kinds), figsize=(3.6 * len(kinds), 3.4), layout="constrained")
    axes = np.atleast_1d(axes)
    for ax, kind in zip(axes, kinds, strict=True):
        st = [s for s in res.stats if s.kind == kind]
        x = [s.strength for s in st]
        ax.plot(x, [s.rms_deg for s in st], "o-", label="RMS")
        ax.plot(x, [s.max_deg for s in st], "s--", lw=0.8, label="max")
        ax.set_yscale("log")
        ax.set_title(kind)
        ax.set_xlabel("strength")
        ax.grid(alpha=0.3)
        tw = ax.twinx()
        tw.plot(x, [100 * s.valid_frac for s in st], "^:", color="tab:green", label="valid %")
        tw.set_ylim(-5, 105)
        if ax is axes[-1]:
            tw.set_ylabel("valid (%)", color="tab:green")
        ax.legend(fontsize=7, loc="upper left")
    axes[0].set_ylabel("reading error (deg)")
    fig.suptitle(f"Reader {res.reader_name!r}: error against strength ({res.spec.size_px} px)")
    fig.savefig(path, dpi=110)
    plt.close(fig)


def plot_montage(res, path: Path) -> None:
    """Example images (kinds × strengths) at one bank, each titled with its reading."""
    from .plots import pyplot

    plt = pyplot()
    kinds = list(res.spec.kinds)
    ns = max(len(v) for v in res.spec.kinds.values())
    fig, axes = plt.subplots(len(kinds), ns, figsize=(1.9 * ns, 2.1 * len(kinds)), layout="constrained")
    axes = np.atleast_2d(axes)
    truth = math.degrees(res.example_bank_rad)
    for r, kind in enumerate(kinds):
        ex = {i: (img, read, ok) for i, img, read, ok in res.examples[kind]}
        for c in range(ns):
            ax = axes[r, c]
            ax.set_xticks([])
            ax.set_yticks([])
            if c not in ex:
                ax.axis("off")
                continue
            img, read, ok = ex[c]
            ax.imshow(np.clip(img, 0, 1), cmap="gray", vmin=0, vmax=1, interpolation="nearest")
            label = f"{math.degrees(read):+.1f}°" if ok else "invalid"
            ax.set_title(
                f"{kind} {res.spec.kinds[kind][c]:g}\nread {label}",
                fontsize=8,
                color="k" if ok and abs(math.degrees(read) - truth) < res.spec.outlier_deg else "tab:red",
            )
    fig.suptitle(
        f"Reader {res.reader_name!r}, true bank {truth:+.1f}° (red: invalid or off by > "
        f"{res.spec.outlier_deg:g}°)"
    )
    fig.savefig(path, dpi=110)
    plt.close(fig)


def sensor_section_text(fit) -> str:
    """A ``[sensor]`` table holding the fitted error model alone (when there is no scenario to write into)."""
    import tomlkit

    body = {
        "noise_deg": math.degrees(fit.noise_rad),
        "bias_deg": math.degrees(fit.bias_rad),
        "scale": fit.scale,
        "quantization_deg": math.degrees(fit.quantization_rad),
        "outlier_prob": min(fit.outlier_prob, 0.5),
        "outlier_deg": math.degrees(fit.outlier_rad),
        "dropout_prob": fit.dropout_prob,
    }
    head = f"# fitted by rollrig read-test at {fit.kind} = {fit.strength:g}; paste into a scenario\n"
    return head + tomlkit.dumps({"sensor": body}).rstrip("\n") + "\n"


def fidelity_table(fid, kind: str, strength: float) -> Table:
    """Image-level loop against the fitted statistical model: metric means and 95 % intervals."""
    from rollrig.sim.metrics import METRIC_INFO

    t = Table(
        title=f"Surrogate fidelity at {kind} = {strength:g}: image-level loop vs fitted model, "
        f"{fid.runs} runs",
        columns=["metric", "image loop [95 % CI]", "fitted model [95 % CI]", "agree"],
    )
    t.records = []
    for r in fid.rows:
        info = METRIC_INFO[r.metric]
        k = info.scale
        unit = f" ({info.unit})" if info.unit else ""
        t.add(
            info.label + unit,
            f"{_f(r.image_mean * k)} [{_f(r.image_ci[0] * k)}, {_f(r.image_ci[1] * k)}]",
            f"{_f(r.model_mean * k)} [{_f(r.model_ci[0] * k)}, {_f(r.model_ci[1] * k)}]",
            "yes" if r.agree else "NO",
            style=None if r.agree else "bold red",
        )
        t.records.append(
            {
                "metric": r.metric,
                "image_mean_si": r.image_mean,
                "image_ci95_si": list(r.image_ci),
                "model_mean_si": r.model_mean,
                "model_ci95_si": list(r.model_ci),
                "agree": r.agree,
            }
        )
    t.notes.append(
        "agree = the two 95 % Student-t intervals of the mean overlap; same seed, so turbulence, timing and "
        "losses are shared. The fitted model's noise is white and bank-independent: where the reader's error "
        "depends on the bank or is correlated from frame to frame, the model can miss it."
    )
    t.notes.append(f"image-level loop {fid.image_seconds:.1f} s, fitted model {fid.model_seconds:.1f} s")
    return t
