"""End-to-end tests of ``rollrig run`` and ``rollrig check`` on the bundled scenarios.

Runs go in-process through :func:`sim.cli.main.main` with ``--runs 2`` (or 3)
into temporary folders; what is checked is what a user relies on: exit 0, a
table, a complete output folder with its manifest, parseable CSV/JSON/Markdown,
valid PNG files, exact replay of one run and seed determinism.
"""

from __future__ import annotations

import csv
import hashlib
import io
import json
import os
import shutil
import subprocess
import sys
import tomllib
from pathlib import Path

import numpy as np
import pytest
from helpers import BUNDLED, REPO

import rollrig

PNG_MAGIC = b"\x89PNG\r\n\x1a\n"
IDS = [p.stem for p in BUNDLED]


def test_bundled_scenarios_exist():
    assert len(BUNDLED) >= 3


def _metrics(folder: Path) -> dict:
    return json.loads((folder / "metrics.json").read_text())


def _per_run(folder: Path) -> dict[str, np.ndarray]:
    """Per-run metrics from ``metrics.npz`` (the same columns as ``metrics.csv``)."""
    with np.load(folder / "metrics.npz") as z:
        return {k: z[k] for k in z.files}


def _assert_png(path: Path) -> None:
    data = path.read_bytes()
    assert data[:8] == PNG_MAGIC, f"{path.name} is not a PNG"
    from matplotlib.image import imread

    img = imread(path)
    assert img.ndim == 3 and img.shape[0] > 100 and img.shape[1] > 100


@pytest.mark.parametrize("scenario", BUNDLED, ids=IDS)
def test_run_writes_complete_folder(cli, tmp_path, scenario):
    out = tmp_path / "out"
    code, stdout, err = cli(["run", scenario, "--runs", "2", "--out", out, "--plot"])
    assert code == 0, err
    doc = tomllib.loads(scenario.read_text())
    title = doc["scenario"]["title"]
    assert title[:20] in stdout and "2 runs" in stdout  # the rich table's title
    assert f"wrote {out}" in stdout
    assert not [p for p in tmp_path.iterdir() if ".partial-" in p.name]

    names = {p.name for p in out.iterdir()}
    assert {
        "manifest.json",
        "metrics.json",
        "metrics.csv",
        "trace.npz",
        "metrics.md",
        "bank.png",
        "aileron.png",
        "envelope.png",
    } <= names

    man = json.loads((out / "manifest.json").read_text())
    assert man["version"] == rollrig.__version__
    assert man["scenario_sha256"] == hashlib.sha256(scenario.read_bytes()).hexdigest()
    assert man["seed"] == doc["run"]["seed"]
    assert man["runs"] == 2
    cmd = man["command_line"]
    assert isinstance(cmd, list) and "run" in cmd and str(scenario) in cmd and "--plot" in cmd

    met = _per_run(out)
    assert met["run"].tolist() == [0, 1]
    for key, values in met.items():
        assert values.shape == (2,), key
        assert not np.any(np.isnan(values.astype(float))), f"NaN written for {key}"
    summary = _metrics(out)["summary"]
    assert summary["rms_error_rad"]["n"] == 2 and "itae" not in summary

    rows = list(csv.reader(io.StringIO((out / "metrics.csv").read_text())))
    assert rows[0] == list(met) and len(rows) == 3
    assert [int(r[0]) for r in rows[1:]] == [0, 1]
    assert all(len(r) == len(rows[0]) for r in rows)
    col = rows[0].index("rms_error_rad")
    assert [float(r[col]) for r in rows[1:]] == met["rms_error_rad"].tolist()  # one unit per key

    with np.load(out / "trace.npz") as tr:
        n = int(round(doc["run"]["duration_s"] / doc["run"]["base_step_s"])) + 1
        assert tr["t_s"].shape == (n,)
        assert tr["bank_rad"].shape == (2, n)
        assert np.all(np.isfinite(tr["bank_rad"]))
        assert tr["run_index"].tolist() == [0, 1]

    for png in ("bank.png", "aileron.png", "envelope.png"):
        _assert_png(out / png)


def test_single_run_has_no_envelope(cli, tmp_path):
    out = tmp_path / "one"
    code, _, err = cli(["run", BUNDLED[0], "--runs", "1", "--out", out, "--plot", "--format", "csv"])
    assert code == 0, err
    assert (out / "bank.png").exists() and (out / "aileron.png").exists()
    assert not (out / "envelope.png").exists()
    assert _per_run(out)["run"].tolist() == [0]


def test_force_replaces_a_folder_rollrig_wrote(cli, tmp_path):
    out = tmp_path / "out"
    code, _, err = cli(["run", BUNDLED[0], "--runs", "2", "--out", out, "--format", "csv"])
    assert code == 0, err
    code, _, err = cli(["run", BUNDLED[0], "--runs", "1", "--out", out, "--force", "--format", "csv"])
    assert code == 0, err
    assert _metrics(out)["runs"] == 1
    assert [p.name for p in tmp_path.iterdir()] == ["out"]  # no temp or old folder left


# --------------------------------------------------------------- printed formats
@pytest.fixture(scope="module")
def uav() -> Path:
    return next(p for p in BUNDLED if "uav" in p.name)


def test_format_json(cli, uav):
    code, out, err = cli(["run", uav, "--runs", "2", "--no-files", "--format", "json"])
    assert code == 0, err
    data = json.loads(out)
    assert data  # parseable and not empty
    text = json.dumps(data)
    assert "NaN" not in text  # JSON has no NaN; diverged values are named, not NaN


def test_format_csv(cli, uav):
    code, out, err = cli(["run", uav, "--runs", "2", "--no-files", "--format", "csv"])
    assert code == 0, err
    blocks = [list(csv.reader(io.StringIO(b))) for b in out.strip().split("\n\n")]
    assert len(blocks) >= 2  # metrics, then criteria
    for block in blocks:  # a header row, then rows of the header's width
        header, *body = block
        assert len(header) >= 2 and body
        assert all(len(r) == len(header) for r in body)
    head = blocks[0][0]
    assert head[:2] == ["metric", "unit"] and blocks[1][0][0] == "criterion"
    for row in blocks[0][1:]:  # one value per cell: every statistic is a plain number (or empty)
        for name, cell in zip(head[2:], row[2:], strict=True):
            if cell:
                float(cell), name
    assert "[" not in out and "@" not in out and "# " not in out


def test_format_md(cli, uav):
    code, out, err = cli(["run", uav, "--runs", "2", "--no-files", "--format", "md"])
    assert code == 0, err
    lines = [ln for ln in out.splitlines() if ln.startswith("|")]
    assert len(lines) >= 3
    sep = lines[1].replace("|", "").replace(" ", "")
    assert set(sep) <= {"-", ":"} and sep  # the header separator row
    ncol = lines[0].count("|")
    assert all(ln.count("|") == ncol for ln in lines[:3])


def test_check_all_bundled(cli):
    code, out, err = cli(["check", *BUNDLED])
    assert code == 0 and err == ""
    lines = out.strip().splitlines()
    assert len(lines) == len(BUNDLED)
    for path, line in zip(BUNDLED, lines, strict=True):
        assert line.startswith(f"{path}: ok")


# --------------------------------------------------------------- replay and seeds
@pytest.fixture(scope="module")
def replayed(tmp_path_factory, uav):
    """Folders of a 3-run batch and of ``--replay 2`` of it."""
    from rollrig.sim.cli.main import main

    root = tmp_path_factory.mktemp("replay")
    batch, one = root / "batch", root / "one"
    assert main(["run", str(uav), "--runs", "3", "--out", str(batch), "--format", "csv"]) == 0
    assert main(["run", str(uav), "--runs", "3", "--replay", "2", "--out", str(one), "--format", "csv"]) == 0
    return batch, one


def test_replay_is_run_n_of_the_batch(replayed):
    """Replay gives run 2's own random streams: equal to ~1e-12, while other runs differ."""
    batch, one = replayed
    mb, mo = _per_run(batch), _per_run(one)
    assert mo["run"].tolist() == [2]
    assert json.loads((one / "manifest.json").read_text())["run_indices"] == [2]
    with np.load(batch / "trace.npz") as tb, np.load(one / "trace.npz") as to:
        # the camera readings and controller output are bit-identical ...
        np.testing.assert_array_equal(to["bank_reading_rad"][0], tb["bank_reading_rad"][2])
        np.testing.assert_array_equal(to["aileron_cmd_rad"][0], tb["aileron_cmd_rad"][2])
        np.testing.assert_allclose(to["bank_rad"][0], tb["bank_rad"][2], rtol=0, atol=1e-12)
        # ... and the check can fail: run 1 is far from run 2
        assert np.max(np.abs(tb["bank_reading_rad"][1] - tb["bank_reading_rad"][2])) > 1e-3
    for key, values in mb.items():
        if key == "run":
            continue
        np.testing.assert_allclose(
            mo[key][0].astype(float), values[2].astype(float), rtol=1e-10, atol=1e-12, err_msg=key
        )


def test_replay_is_bit_identical(replayed):
    batch, one = replayed
    mb, mo = _per_run(batch), _per_run(one)
    for key, values in mb.items():
        assert mo[key].tolist() == [values[2]], key  # exact, as --replay promises
    with np.load(batch / "trace.npz") as tb, np.load(one / "trace.npz") as to:
        np.testing.assert_array_equal(to["bank_rad"][0], tb["bank_rad"][2])


def test_same_seed_same_metrics_other_seed_differs(cli, tmp_path, uav):
    a, b, c = (tmp_path / n for n in "abc")
    for folder, seed in ((a, "5"), (b, "5"), (c, "6")):
        code, _, err = cli(["run", uav, "--runs", "2", "--seed", seed, "--out", folder, "--format", "csv"])
        assert code == 0, err
    ma, mb, mc = (_per_run(f) for f in (a, b, c))
    assert all(ma[k].tolist() == mb[k].tolist() for k in ma)
    assert json.loads((a / "manifest.json").read_text())["seed"] == 5
    changed = [k for k in ma if ma[k].tolist() != mc[k].tolist()]
    assert "rms_error_rad" in ma and "rms_error_rad" in changed, changed


# --------------------------------------------------------------- entry points
def test_module_help_in_subprocess():
    env = dict(os.environ, PYTHONPATH=str(REPO) + os.pathsep + os.environ.get("PYTHONPATH", ""))
    res = subprocess.run(
        [sys.executable, "-m", "rollrig.sim.cli.main", "--help"],
        cwd=REPO,
        env=env,
        capture_output=True,
        text=True,
        timeout=60,
    )
    assert res.returncode == 0, res.stderr
    assert "rollrig" in res.stdout and "run" in res.stdout and "check" in res.stdout


def test_console_script_version():
    exe = shutil.which("rollrig") or (
        str(Path(sys.executable).parent / "rollrig")
        if (Path(sys.executable).parent / "rollrig").exists()
        else None
    )
    if exe is None:
        pytest.skip("rollrig console script not installed (pip install -e .)")
    res = subprocess.run([exe, "--version"], capture_output=True, text=True, timeout=60)
    assert res.returncode == 0 and rollrig.__version__ in res.stdout


def test_help_and_version_in_process(cli):
    code, out, _ = cli(["run", "--help"])
    assert code == 0 and "--replay" in out and "--allow-code" in out
    code, out, _ = cli(["--version"])
    assert code == 0 and rollrig.__version__ in out
