"""The user's ONNX reader: the bundled example model against a numpy implementation; bad files refused."""

from __future__ import annotations

import importlib.util
from pathlib import Path

import numpy as np
import pytest
from numpy.testing import assert_allclose
from rollrig.sensors import image_degrade as D
from rollrig.sensors.instrument import Instrument
from rollrig.sensors.readers import MomentReader, OnnxReader, ReaderLoadError

pytest.importorskip("onnxruntime")  # the 'vision' extra; CI installs it
ROOT = Path(__file__).resolve().parents[1]
MODEL = ROOT / "tools" / "moment_reader_64.onnx"


def _tool():
    spec = importlib.util.spec_from_file_location("make_onnx_reader", ROOT / "tools" / "make_onnx_reader.py")
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


def test_onnx_reader_equals_numpy_implementation_of_the_same_model():
    tool = _tool()
    banks = np.radians(np.linspace(-80, 80, 41))
    img = D.pixel_noise(Instrument(64).render(banks), 0.03, np.random.default_rng(3))
    r = OnnxReader(MODEL, 64)(img)
    expected = tool.numpy_model(img[:, None], tool.moment_weights(64))
    # float32 arithmetic in both; atan near ±90° amplifies the last bits a little
    assert_allclose(np.degrees(r.bank_rad), expected, atol=1e-3)
    assert r.valid.all()
    # and it is the moment reader's formula, so both read alike
    assert_allclose(r.bank_rad, MomentReader(64)(img).bank_rad, atol=np.radians(1e-3))


def test_bundled_model_is_what_the_script_builds(tmp_path):
    pytest.importorskip("onnx")
    out = tmp_path / "m.onnx"
    _tool().main(["--out", str(out)])
    a = OnnxReader(out, 64)(Instrument(64).render(np.radians([10.0, -30.0])))
    b = OnnxReader(MODEL, 64)(Instrument(64).render(np.radians([10.0, -30.0])))
    assert_allclose(a.bank_rad, b.bank_rad, rtol=0, atol=0)


def test_bad_model_files_are_refused(tmp_path):
    junk = tmp_path / "junk.onnx"
    junk.write_text("this is not a model\n")
    with pytest.raises(ReaderLoadError, match="not a usable ONNX model"):
        OnnxReader(junk, 64)
    with pytest.raises(ReaderLoadError, match="input is tensor"):
        OnnxReader(MODEL, 128)  # the model reads 64 px


@pytest.mark.parametrize("case", ["junk", "wrong-size"])
def test_cli_refuses_bad_model_with_one_line_exit_2(cli, tmp_path, case):
    if case == "junk":
        model = tmp_path / "junk.onnx"
        model.write_bytes(b"\x00\x01 not onnx")
    else:
        model = MODEL
    f = tmp_path / "rt.toml"
    size = 64 if case == "junk" else 96
    f.write_text(f'[read_test]\nreader = "onnx:{model}"\nsize_px = {size}\nbank_count = 3\ndraws = 1\n')
    code, _, err = cli(["read-test", str(f), "--no-files"])
    assert code == 2
    assert err.count("\n") == 1 and str(model) in err


def test_cli_reads_with_the_bundled_model(cli, tmp_path):
    f = tmp_path / "rt.toml"
    f.write_text(
        f'[read_test]\nreader = "onnx:{MODEL}"\nbank_count = 5\nbank_min_deg = -30.0\nbank_max_deg = 30.0\n'
        "draws = 2\n[read_test.kinds]\nrotation = [0.0, 3.0]\n"
    )
    code, out, err = cli(["read-test", str(f), "--no-files", "--format", "json"])
    assert code == 0, err
    import json

    rows = json.loads(out)[0]["rows"]
    by = {r["strength"]: r for r in rows}
    assert by[3.0]["bias_deg"] == pytest.approx(3.0, abs=0.1)
