"""Characterise an image reader: bank × degradation kind × strength × random draws.

Every image is the instrument drawn at a known bank, degraded by one named
kind at one strength (:data:`rollrig.sensors.image_degrade.KINDS`), put
through the camera's ADC (``bits``), and read. Per condition the report gives
the RMS error, bias, scale error, largest error, outlier rate and valid
share; the kinds are ranked by what they cost; and at each chosen operating
condition the statistical camera model (bias, scale, white noise, wild
readings, invalid frames as losses, and the rounding step if the reader
rounds) is fitted from the readings, to be written as a scenario's
``[sensor]`` section.

The ``[read_test]`` section (all keys optional)::

    [read_test]
    reader = "moment"        # "robust", "onnx:FILE.onnx", "python:module:function"
    size_px = 64
    colour = false
    bank_min_deg = -60.0
    bank_max_deg = 60.0
    bank_count = 121
    draws = 20               # random draws per (kind, strength, bank)
    seed = 1
    outlier_deg = 5.0        # |error| beyond this is an outlier
    bits = 8                 # camera ADC

    [read_test.kinds]        # kind = [strengths]; default: noise, glare, rotation, blur
    noise = [0.0, 0.02, 0.05, 0.1, 0.2]

    [[read_test.operating]]  # conditions to fit a [sensor] model at (default: each kind's middle)
    kind = "noise"
    strength = 0.05
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from rollrig.sensors import image_degrade as D
from rollrig.sensors.instrument import MAX_SIZE_PX, MIN_SIZE_PX, Instrument
from rollrig.sensors.readers import wrap_angle

from ..section import Section, read_toml_file
from ..seeding import run_generators

__all__ = [
    "ReadTestSpec",
    "ReadTestResult",
    "ConditionStats",
    "SensorFit",
    "parse_read_test",
    "run_read_test",
    "fit_sensor_model",
    "DEFAULT_KINDS",
    "ReadTestFile",
    "load_read_test",
    "make_reader",
    "fitted_scenario",
]

DEFAULT_KINDS = ("noise", "glare", "rotation", "blur")


@dataclass(frozen=True)
class ReadTestSpec:
    """What to sweep (scenario units: degrees, pixels; strengths as in ``KINDS``)."""

    reader: str = "moment"
    size_px: int = 64
    colour: bool = False
    banks_deg: tuple[float, ...] = tuple(np.linspace(-60.0, 60.0, 121).tolist())
    kinds: dict[str, tuple[float, ...]] = field(
        default_factory=lambda: {k: D.KINDS[k][1] for k in DEFAULT_KINDS}
    )
    draws: int = 20
    seed: int = 1
    outlier_deg: float = 5.0
    bits: int = 8
    operating: tuple[tuple[str, float], ...] = ()

    def operating_points(self) -> tuple[tuple[str, float], ...]:
        """The chosen operating conditions, or each kind at its middle strength."""
        if self.operating:
            return self.operating
        return tuple((k, s[len(s) // 2]) for k, s in self.kinds.items())


def parse_read_test(sec: Section | None) -> ReadTestSpec:
    """The ``[read_test]`` section (or the defaults when absent)."""
    if sec is None:
        return ReadTestSpec()
    reader = sec.string("reader", "moment")
    if not (reader in ("moment", "robust") or reader.startswith(("onnx:", "python:"))):
        raise sec.error(
            "reader",
            f"= {reader!r} is not allowed; allowed: 'moment', 'robust', 'onnx:FILE.onnx', "
            "'python:module:function'",
        )
    lo = sec.number("bank_min_deg", -60.0, lo=-180.0, hi=180.0)
    hi = sec.number("bank_max_deg", 60.0, lo=lo, hi=180.0)
    count = sec.integer("bank_count", 121, lo=1, hi=10_000)
    kinds: dict[str, tuple[float, ...]] = {}
    names = list(sec.mapping("kinds"))  # the kinds the user named, in their order
    ks = sec.sub("kinds")
    if ks is not None:
        for name in names:
            if name in D.KINDS:
                kinds[name] = tuple(ks.array(name, shape=(None,), lo=_LIMITS[name][0], hi=_LIMITS[name][1]))
        ks.known(D.KINDS)
        ks.finish()
        if not kinds:
            raise sec.error("kinds", f"names no kind; allowed: {', '.join(D.KINDS)}")
    else:
        kinds = {k: D.KINDS[k][1] for k in DEFAULT_KINDS}
    ops = []
    for t in sec.tables("operating"):
        kind = t.string("kind", choices=tuple(kinds))
        strength = t.number("strength", lo=_LIMITS[kind][0], hi=_LIMITS[kind][1])
        if not any(abs(strength - s) < 1e-12 for s in kinds[kind]):
            raise t.error("strength", f"= {strength:g} is not swept; allowed: one of {list(kinds[kind])}")
        ops.append((kind, strength))
        t.finish()
    spec = ReadTestSpec(
        reader=reader,
        size_px=sec.integer("size_px", 64, lo=MIN_SIZE_PX, hi=MAX_SIZE_PX),
        colour=sec.boolean("colour", False),
        banks_deg=tuple(np.linspace(lo, hi, count).tolist()),
        kinds=kinds,
        draws=sec.integer("draws", 20, lo=1, hi=10_000),
        seed=sec.integer("seed", 1, lo=0, hi=2**63 - 1),
        outlier_deg=sec.number("outlier_deg", 5.0, lo=0.0, hi=90.0, lo_open=True),
        bits=sec.integer("bits", 8, lo=1, hi=16),
        operating=tuple(ops),
    )
    sec.finish()
    return spec


#: allowed strength range of each kind
_LIMITS = {
    "noise": (0.0, 1.0),
    "dead_pixels": (0.0, 0.5),
    "brightness": (-1.0, 1.0),
    "contrast": (0.0, 10.0),
    "glare": (0.0, 2.0),
    "shadow": (0.0, 1.0),
    "rotation": (-90.0, 90.0),
    "shift": (-64.0, 64.0),
    "tilt": (-60.0, 60.0),
    "zoom": (0.5, 2.0),
    "blur": (0.0, 10.0),
}


@dataclass(frozen=True)
class ConditionStats:
    """Reading errors at one (kind, strength), over every bank and draw (degrees)."""

    kind: str
    strength: float
    rms_deg: float
    bias_deg: float
    scale_error: float
    max_deg: float
    outlier_rate: float
    valid_frac: float


@dataclass(frozen=True)
class SensorFit:
    """Statistical camera model fitted at one operating condition (SI, like ``CameraConfig``)."""

    kind: str
    strength: float
    bias_rad: float
    scale: float
    noise_rad: float
    outlier_prob: float
    outlier_rad: float
    dropout_prob: float
    quantization_rad: float
    n_valid: int


@dataclass
class ReadTestResult:
    """Everything a read-test measured."""

    spec: ReadTestSpec
    reader_name: str
    banks_rad: np.ndarray
    #: per kind: readings (n_strength, n_bank, n_draw) rad and validity
    readings: dict[str, np.ndarray]
    valid: dict[str, np.ndarray]
    stats: list[ConditionStats]
    fits: list[SensorFit]
    #: a few example images per kind: (n_strength, h, w[, 3]) at the example bank, first draw
    examples: dict[str, np.ndarray]
    example_bank_rad: float
    seconds: float = 0.0

    def errors_deg(self, kind: str) -> np.ndarray:
        """Wrapped reading errors (deg), NaN where invalid, ``(n_strength, n_bank, n_draw)``."""
        e = wrap_angle(self.readings[kind] - self.banks_rad[None, :, None])
        return np.where(self.valid[kind], np.degrees(e), np.nan)

    def ranking(self) -> list[tuple[str, float, float]]:
        """Kinds by cost at their strongest setting: (kind, RMS − clean RMS in deg, valid share lost)."""
        clean = [s for s in self.stats if _is_clean(s.kind, s.strength)]
        base_rms = min((s.rms_deg for s in clean), default=0.0)
        base_valid = max((s.valid_frac for s in clean), default=1.0)
        out = []
        for kind, strengths in self.spec.kinds.items():
            worst = max(strengths, key=lambda v: abs(v - _NEUTRAL[kind]))
            st = next(s for s in self.stats if s.kind == kind and s.strength == worst)
            rms = st.rms_deg if math.isfinite(st.rms_deg) else math.inf
            out.append((kind, rms - base_rms, base_valid - st.valid_frac))
        return sorted(out, key=lambda r: (-r[1], -r[2]))


#: the strength at which each kind does nothing
_NEUTRAL = {k: (1.0 if k in ("contrast", "zoom") else 0.0) for k in D.KINDS}


def _is_clean(kind: str, strength: float) -> bool:
    return abs(strength - _NEUTRAL[kind]) < 1e-12


def condition_stats(
    kind: str, strength: float, banks: np.ndarray, read: np.ndarray, ok: np.ndarray, outlier_deg: float
) -> ConditionStats:
    """Error statistics of readings ``(n_bank, n_draw)`` against ``banks`` (rad)."""
    truth = np.broadcast_to(banks[:, None], read.shape)
    e = np.degrees(wrap_angle(read - truth))[ok]
    t = np.degrees(truth[ok])
    n = e.size
    if n == 0:
        return ConditionStats(kind, strength, math.nan, math.nan, math.nan, math.nan, math.nan, 0.0)
    if n > 2 and np.ptp(t) > 0:
        slope = float(np.polyfit(t, e, 1)[0])
    else:
        slope = math.nan
    return ConditionStats(
        kind=kind,
        strength=float(strength),
        rms_deg=float(np.sqrt(np.mean(e * e))),
        bias_deg=float(np.mean(e)),
        scale_error=slope,
        max_deg=float(np.max(np.abs(e))),
        outlier_rate=float(np.mean(np.abs(e) > outlier_deg)),
        valid_frac=float(ok.mean()),
    )


def fit_sensor_model(
    kind: str, strength: float, banks: np.ndarray, read: np.ndarray, ok: np.ndarray, outlier_deg: float
) -> SensorFit:
    """Fit bias, scale, white noise, wild readings, losses and rounding step to readings ``(n_bank, n_draw)``.

    The camera model reads ``scale·bank + bias + noise`` (plus a wild error
    with probability ``outlier_prob``), rounds it, and loses a frame with
    probability ``dropout_prob``. Bias and scale come from a least-squares
    line of reading on truth, refitted without the readings whose residual
    exceeds ``outlier_deg`` (those are the wild readings, their mean size
    ``outlier_deg`` of the model); the noise is the inliers' residual std.
    The reader rounds when every reading sits on one grid of step ≥ 0.01°.
    """
    truth = np.broadcast_to(banks[:, None], read.shape)[ok]
    r = truth + wrap_angle(read[ok] - truth)
    n = r.size
    drop = float(1.0 - ok.mean())
    if n < 3:
        return SensorFit(kind, strength, 0.0, 1.0, 0.0, 0.0, 0.0, min(drop, 0.99), 0.0, n)
    lim = math.radians(outlier_deg)
    inl = np.ones(n, dtype=bool)
    for _ in range(3):
        if np.ptp(truth[inl]) > 0:
            scale, bias = np.polyfit(truth[inl], r[inl], 1)
        else:
            scale, bias = 1.0, float(np.mean(r[inl] - truth[inl]))
        res = r - (scale * truth + bias)
        new = np.abs(res) <= lim
        if new.sum() < 3 or np.array_equal(new, inl):
            break
        inl = new
    out = ~inl
    q = 0.0
    u = np.unique(np.round(np.degrees(r), 9))
    if 2 < u.size < n:
        step = float(np.min(np.diff(u)))
        if step >= 0.01 and np.all(np.abs(u / step - np.round(u / step)) < 1e-3):
            q = math.radians(step)
    noise = float(np.std(res[inl])) if inl.sum() > 1 else 0.0
    if q > 0:  # rounding adds q²/12 that the model adds itself
        noise = math.sqrt(max(noise**2 - q * q / 12.0, 0.0))
    return SensorFit(
        kind=kind,
        strength=float(strength),
        bias_rad=float(bias),
        scale=float(scale),
        noise_rad=noise,
        outlier_prob=float(out.mean()),
        outlier_rad=float(np.mean(np.abs(res[out]))) if out.any() else 0.0,
        dropout_prob=min(drop, 0.99),
        quantization_rad=q,
        n_valid=int(n),
    )


def run_read_test(
    spec: ReadTestSpec, reader, *, reader_name: str = "", chunk: int = 4096, progress=None
) -> ReadTestResult:
    """Render, degrade, quantise and read every image of the sweep.

    ``reader`` maps an image batch to a :class:`~rollrig.sensors.readers.Reading`.
    The images of condition ``(kind, strength i, bank j)`` draw, in order of
    their draw number, from one stream ``run_generators(seed, [i·n_bank + j],
    "read_test.<kind>")``: the same images whatever the chunking.
    ``progress(done, total)`` is called after each chunk when given.
    """
    import time

    t0 = time.perf_counter()
    ins = Instrument(spec.size_px, colour=spec.colour)
    banks = np.radians(np.asarray(spec.banks_deg, dtype=float))
    nb, nd = banks.size, spec.draws
    ex_j = int(np.argmin(np.abs(banks - math.radians(20.0))))
    readings, valid, examples, stats, fits = {}, {}, {}, [], []
    total = sum(len(s) for s in spec.kinds.values()) * nb * nd
    chunk = max(1, chunk // nd) * nd  # whole conditions per chunk
    done = 0
    for kind, strengths in spec.kinds.items():
        ns = len(strengths)
        n = ns * nb * nd
        idx = np.arange(n)
        s_of = np.asarray(strengths, dtype=float)[idx // (nb * nd)]
        b_of = banks[(idx // nd) % nb]
        read = np.empty(n)
        ok = np.empty(n, dtype=bool)
        ex = []
        for a in range(0, n, chunk):
            sl = slice(a, min(a + chunk, n))
            # one stream per (strength, bank) condition, its draws taken in order
            conds = np.arange(sl.start // nd, sl.stop // nd)
            gens = run_generators(spec.seed, conds, f"read_test.{kind}")
            rngs = [g for g in gens for _ in range(nd)]
            img = D.degrade(kind, ins.render(b_of[sl]), s_of[sl], rngs)
            img = D.quantize_bits(img, spec.bits)
            res = reader(img)
            read[sl], ok[sl] = res.bank_rad, res.valid
            for i in range(ns):
                k = (i * nb + ex_j) * nd
                if sl.start <= k < sl.stop:
                    ex.append(
                        (i, img[k - sl.start].copy(), res.bank_rad[k - sl.start], res.valid[k - sl.start])
                    )
            done += sl.stop - sl.start
            if progress is not None:
                progress(done, total)
        read = read.reshape(ns, nb, nd)
        ok = ok.reshape(ns, nb, nd)
        readings[kind], valid[kind] = read, ok
        ex.sort(key=lambda e: e[0])
        examples[kind] = ex
        for i, s in enumerate(strengths):
            stats.append(condition_stats(kind, s, banks, read[i], ok[i], spec.outlier_deg))
    for kind, s in spec.operating_points():
        i = [abs(v - s) < 1e-12 for v in spec.kinds[kind]].index(True)
        fits.append(fit_sensor_model(kind, s, banks, readings[kind][i], valid[kind][i], spec.outlier_deg))
    return ReadTestResult(
        spec=spec,
        reader_name=reader_name or spec.reader,
        banks_rad=banks,
        readings=readings,
        valid=valid,
        stats=stats,
        fits=fits,
        examples=examples,
        example_bank_rad=float(banks[ex_j]),
        seconds=time.perf_counter() - t0,
    )


# ------------------------------------------------------------------ files and readers
@dataclass(frozen=True)
class ReadTestFile:
    """A read-test input: its spec, and the scenario it sits in (if the file is one)."""

    path: str
    sha256: str
    spec: ReadTestSpec
    scenario: object | None  # rollrig.sim.scenario.Scenario
    template: str | None  # the scenario's text without [read_test], for the writer


def load_read_test(path: str) -> ReadTestFile:
    """Read a scenario with an optional ``[read_test]`` section, or a file holding only ``[read_test]``."""
    import hashlib
    from pathlib import Path

    import tomlkit

    from ..errors import ScenarioError
    from ..scenario import parse_scenario

    p = Path(path)
    raw, text, doc = read_toml_file(p, "file")
    rt = doc.pop("read_test", None)
    sec = None if rt is None else Section(rt, file=str(p), path="read_test")
    spec = parse_read_test(sec)
    sha = hashlib.sha256(raw).hexdigest()
    if not doc:
        if rt is None:
            raise ScenarioError(f"{p}: is empty; allowed: a scenario, or a [read_test] section")
        return ReadTestFile(str(p), sha, spec, None, None)
    sc = parse_scenario(doc, file=str(p), sha256=sha)
    tdoc = tomlkit.parse(text)
    tdoc.pop("read_test", None)
    return ReadTestFile(str(p), sha, spec, sc, tomlkit.dumps(tdoc))


def make_reader(name: str, size_px: int, *, allow_code: bool = False, base_dir: str = "."):
    """The reader named ``moment``, ``robust``, ``onnx:FILE`` or ``python:module:function``."""
    from pathlib import Path

    from rollrig.sensors.readers import (
        CallableReader,
        MomentReader,
        OnnxReader,
        ReaderLoadError,
        RobustReader,
    )

    from ..errors import UserInputError

    if name == "moment":
        return MomentReader(size_px)
    if name == "robust":
        return RobustReader(size_px)
    try:
        if name.startswith("onnx:"):
            f = Path(name[5:])
            if not f.is_absolute() and not f.exists():
                f = Path(base_dir) / f
            return OnnxReader(f, size_px)
        if name.startswith("python:"):
            if not allow_code:
                raise UserInputError(
                    f"reader {name!r} runs your Python code; allowed: add --allow-code to permit it"
                )
            return CallableReader(name[7:])
    except ReaderLoadError as exc:
        raise UserInputError(str(exc)) from None
    raise UserInputError(
        f"reader {name!r}: allowed: 'moment', 'robust', 'onnx:FILE.onnx', 'python:module:function'"
    )


def fitted_scenario(sc, fit):
    """The scenario with its camera's error model replaced by ``fit`` (timing kept)."""
    from dataclasses import replace

    return replace(
        sc,
        camera=replace(
            sc.camera,
            bias_rad=float(np.clip(fit.bias_rad, -math.pi / 4, math.pi / 4)),  # the [sensor] ranges
            scale=float(np.clip(fit.scale, 0.5, 2.0)),
            noise_rad=min(fit.noise_rad, math.radians(30.0)),
            outlier_prob=min(fit.outlier_prob, 0.5),
            outlier_rad=min(fit.outlier_rad, math.pi),
            # the reader's invalid frames on top of the scenario's own independent losses
            dropout_prob=min(
                1.0 - (1.0 - np.asarray(sc.camera.dropout_prob)) * (1.0 - fit.dropout_prob), 0.99
            ),
            quantization_rad=fit.quantization_rad,
            wander_rad=0.0,
            classifier=None,
        ),
    )
