"""`rollrig read-test`: the sweep, its statistics, the fitted camera model and the command."""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest
from rollrig.sensors.readers import MomentReader
from rollrig.sim.analysis.read_test import ReadTestSpec, fit_sensor_model, run_read_test
from rollrig.sim.scenario import load_scenario

ROOT = Path(__file__).resolve().parents[1]
SMALL = "[read_test]\nbank_count = 9\nbank_min_deg = -40.0\nbank_max_deg = 40.0\ndraws = 2\n"


def test_fit_recovers_a_known_statistical_model():
    # readings made by the model itself: scale·bank + bias + N(0, σ), wild errors ±outlier, losses
    rng = np.random.default_rng(11)
    banks = np.radians(np.linspace(-50, 50, 101))
    n_draw = 200
    truth = np.broadcast_to(banks[:, None], (101, n_draw))
    sig, bias, scale = math.radians(0.5), math.radians(1.5), 1.03
    read = scale * truth + bias + sig * rng.standard_normal(truth.shape)
    wild = rng.random(truth.shape) < 0.05
    read = read + wild * np.radians(20.0) * rng.choice([-1, 1], truth.shape)
    ok = rng.random(truth.shape) > 0.1
    f = fit_sensor_model("noise", 0.05, banks, read, ok, outlier_deg=5.0)
    # 18 000 valid readings: SEs are ≈ 0.004° (bias), 1e-4 (scale), 0.5 % (σ), 0.002 (rates)
    assert math.degrees(f.bias_rad) == pytest.approx(1.5, abs=0.03)
    assert f.scale == pytest.approx(1.03, abs=1e-3)
    assert math.degrees(f.noise_rad) == pytest.approx(0.5, rel=0.03)
    assert f.outlier_prob == pytest.approx(0.05, abs=0.01)
    assert math.degrees(f.outlier_rad) == pytest.approx(20.0, abs=0.5)
    assert f.dropout_prob == pytest.approx(0.1, abs=0.01)
    assert f.quantization_rad == 0.0
    # a reader that rounds to 0.5°: the step is found, and the rounding variance q²/12 is not noise
    q = np.radians(0.5)
    rounded = np.round((truth + 0.3 * sig * rng.standard_normal(truth.shape)) / q) * q
    g = fit_sensor_model("noise", 0.0, banks, rounded, np.ones_like(ok), outlier_deg=5.0)
    assert math.degrees(g.quantization_rad) == pytest.approx(0.5, abs=1e-6)


def test_sweep_statistics_and_same_seed_same_result():
    spec = ReadTestSpec(
        banks_deg=tuple(np.linspace(-30, 30, 7)),
        kinds={"noise": (0.0, 0.05), "rotation": (0.0, 5.0)},
        draws=3,
        operating=(("rotation", 5.0),),
    )
    a = run_read_test(spec, MomentReader(64))
    b = run_read_test(spec, MomentReader(64))
    np.testing.assert_array_equal(a.readings["noise"], b.readings["noise"])
    by = {(s.kind, s.strength): s for s in a.stats}
    assert by[("rotation", 5.0)].bias_deg == pytest.approx(5.0, abs=0.1)  # the moment reader reads the image
    assert by[("rotation", 0.0)].rms_deg < 0.1
    assert by[("noise", 0.05)].rms_deg > by[("noise", 0.0)].rms_deg
    assert by[("noise", 0.05)].valid_frac == 1.0
    (fit,) = a.fits
    assert math.degrees(fit.bias_rad) == pytest.approx(5.0, abs=0.1)
    assert a.ranking()[0][0] == "rotation"


def test_command_writes_tables_plots_and_loadable_fitted_scenarios(cli, tmp_path):
    src = (ROOT / "scenarios" / "light-single-wings-level.toml").read_text()
    f = tmp_path / "rt.toml"
    f.write_text(
        src
        + "\n"
        + SMALL
        + 'reader = "moment"\n[read_test.kinds]\nrotation = [0.0, 4.0]\nnoise = [0.0, 0.05]\n'
        '[[read_test.operating]]\nkind = "rotation"\nstrength = 4.0\n'
    )
    out = tmp_path / "out"
    code, stdout, stderr = cli(["read-test", str(f), "--out", str(out), "--format", "json"])
    assert code == 0, stderr
    tables = json.loads(stdout)
    assert [t["title"].split(":")[0] for t in tables][0].startswith("Reader 'moment'")
    for name in (
        "read_test.md",
        "read_test.csv",
        "error_vs_bank.png",
        "error_vs_strength.png",
        "montage.png",
        "manifest.json",
        "sensor-rotation-4.toml",
    ):
        assert (out / name).exists(), name
    sc = load_scenario(out / "sensor-rotation-4.toml")
    assert math.degrees(sc.camera.bias_rad) == pytest.approx(4.0, abs=0.1)
    assert sc.camera.latency_s == pytest.approx(0.04)  # the scenario's timing is kept
    assert sc.title == load_scenario(ROOT / "scenarios" / "light-single-wings-level.toml").title


def test_read_test_section_alone_writes_a_sensor_table(cli, tmp_path):
    f = tmp_path / "only.toml"
    f.write_text(SMALL + "[read_test.kinds]\nblur = [0.0, 1.0]\n")
    code, _, stderr = cli(["read-test", str(f), "--out", str(tmp_path / "o"), "--format", "csv"])
    assert code == 0, stderr
    text = (tmp_path / "o" / "sensor-blur-1.toml").read_text()  # default operating point: the middle strength
    assert "[sensor]" in text and "noise_deg" in text


@pytest.mark.parametrize(
    "extra, args, needle",
    [
        ('reader = "python:os:getcwd"\n', [], "--allow-code"),
        ('reader = "onnx:missing.onnx"\n', [], "cannot be read"),
        ("outlier_deg = 0.0\n", [], "outlier_deg"),
        ("[read_test.kinds]\nsmoke = [0.0]\n", [], "smoke"),
    ],
)
def test_mistakes_give_one_line_and_exit_2(cli, tmp_path, extra, args, needle):
    f = tmp_path / "bad.toml"
    f.write_text(SMALL + extra)
    code, stdout, stderr = cli(["read-test", str(f), "--no-files", *args])
    assert code == 2
    assert needle in stderr and stderr.count("\n") == 1


def test_python_reader_runs_only_with_allow_code(cli, tmp_path, monkeypatch):
    (tmp_path / "my_reader_mod.py").write_text(
        "import numpy as np\n"
        "from rollrig.sensors.readers import MomentReader\n"
        "_r = MomentReader(64)\n"
        "def read(images):\n"
        "    r = _r(images)\n"
        "    return np.degrees(r.bank_rad) + 1.0, r.valid\n"
    )
    monkeypatch.syspath_prepend(str(tmp_path))
    f = tmp_path / "rt.toml"
    f.write_text(SMALL + 'reader = "python:my_reader_mod:read"\n[read_test.kinds]\nnoise = [0.0]\n')
    code, _, err = cli(["read-test", str(f), "--no-files"])
    assert code == 2 and "--allow-code" in err
    code, out, err = cli(["read-test", str(f), "--no-files", "--allow-code", "--format", "json"])
    assert code == 0, err
    row = json.loads(out)[0]["rows"][0]
    assert row["bias_deg"] == pytest.approx(1.0, abs=0.05)  # the function's own +1° shows as bias
