"""``rollrig margins --frequency-response FILE.csv``: measured open-loop data, same report.

Second method: the bundled example was sampled (with scatter) from a model loop;
the same loop sampled exactly, written to a CSV and read back, must give the
model's margins; python-control's FRD margins on the same data agree.
"""

from __future__ import annotations

import json
from pathlib import Path

import control as ct
import numpy as np
import pytest
from numpy.testing import assert_allclose
from rollrig.sim.analysis.frequency_response_file import load_frequency_response
from rollrig.sim.analysis.linear_loop import LoopParts, margins, open_loop_response
from rollrig.sim.cli.main import main
from rollrig.sim.errors import UserInputError

EXAMPLE = (
    Path(__file__).resolve().parents[1] / "scenarios" / "frequency-response" / "ridge-runner-open-loop.csv"
)

# The model the bundled example was sampled from (its header says so).
MODEL = LoopParts(
    plant_a=[[-6.0, 0.0], [1.0, 0.0]],
    plant_b=[40.0, 0.0],
    phi_index=1,
    p_index=0,
    actuator_tau_s=0.05,
    camera_delay_s=0.07,
    controller_dt_s=0.02,
    kp=0.35,
    ki_per_s=0.05,
    kd_s=0.04,
    derivative_filter_hz=4.0,
)


def _write(path: Path, w: np.ndarray, resp: np.ndarray, kind: str) -> Path:
    if kind == "db":
        rows = ["omega_rad_s,magnitude_db,phase_deg"]
        ph = np.degrees(np.unwrap(np.angle(resp)))
        rows += [
            f"{a:.17g},{20 * np.log10(abs(r)):.17g},{p:.17g}" for a, r, p in zip(w, resp, ph, strict=True)
        ]
    else:
        rows = ["# exact samples", "frequency_hz,real_rad_per_rad,imag_rad_per_rad"]
        rows += [f"{a / (2 * np.pi):.17g},{r.real:.17g},{r.imag:.17g}" for a, r in zip(w, resp, strict=True)]
    path.write_text("\n".join(rows) + "\n")
    return path


@pytest.mark.parametrize("kind", ["db", "complex"])
def test_csv_of_a_model_gives_the_model_margins(tmp_path: Path, kind: str) -> None:
    w = np.geomspace(0.05, 200.0, 800)
    path = _write(tmp_path / "loop.csv", w, open_loop_response(MODEL, w), kind)
    data = margins(load_frequency_response(path))
    exact = margins(MODEL)
    # spline interpolation between 200 points per decade: crossovers within 1e-4 relative
    assert_allclose(data.gain_crossover_rad_s, exact.gain_crossover_rad_s, rtol=1e-4)
    assert_allclose(data.phase_margin_deg, exact.phase_margin_deg, atol=1e-3)
    assert_allclose(data.gain_margin_db, exact.gain_margin_db, atol=1e-3)
    assert_allclose(data.delay_margin_s, exact.delay_margin_s, rtol=1e-4)
    assert data.closed_loop_stable is None and exact.closed_loop_stable


def test_bundled_example_margins_agree_with_python_control(capsys) -> None:
    data = load_frequency_response(EXAMPLE)
    ours = margins(data)
    gm, pm, sm, wpc, wgc, wsm = ct.stability_margins(ct.frd(data.response, data.omega_rad_s))
    # python-control interpolates the same data differently (its own smoothing): 0.3 dB, 0.5°,
    # 2 % in frequency.
    assert_allclose(ours.gain_margin_db, 20 * np.log10(gm), atol=0.3)
    assert_allclose(ours.phase_margin_deg, pm, atol=0.5)
    assert_allclose([ours.phase_crossover_rad_s, ours.gain_crossover_rad_s], [wpc, wgc], rtol=0.02)
    # and the invented loop's own margins, through the measurement scatter (0.15 dB, 0.8°)
    exact = margins(MODEL)
    assert_allclose(ours.gain_margin_db, exact.gain_margin_db, atol=0.5)
    assert_allclose(ours.phase_margin_deg, exact.phase_margin_deg, atol=1.5)

    assert main(["margins", "--frequency-response", str(EXAMPLE), "--format", "json"]) == 0
    out = json.loads(capsys.readouterr().out)
    rows = {r["figure"]: r for r in out[0]["rows"]}
    assert_allclose(rows["phase_margin_deg"]["value"], ours.phase_margin_deg)
    assert rows["closed_loop_stable"]["value"] is None and rows["closed_loop_stable"]["pass"] is None
    assert_allclose(rows["stability_margin"]["stability_margin_rad_s"], ours.stability_margin_rad_s)
    crossings = out[1]["rows"]
    assert [c["crossover"] for c in crossings].count("gain") == len(ours.gain_crossovers_rad_s)


def test_csv_plot_written(tmp_path: Path, capsys) -> None:
    out = tmp_path / "fr"
    assert main(["margins", "--frequency-response", str(EXAMPLE), "--plot", "--out", str(out)]) == 0
    assert (out / "margins.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert json.loads((out / "margins.json").read_text())[0]["rows"]


@pytest.mark.parametrize(
    "text, fragment",
    [
        ("omega_rad_s,gain_db,phase_deg\n1,0,0\n", "unknown column 'gain_db'"),
        ("omega_rad_s,magnitude_db\n1,0\n", "response pair"),
        ("omega_rad_s,magnitude_db,phase_deg\n1,0,0\n2,0,x\n3,0,0\n", ":3: not a number"),
        ("omega_rad_s,magnitude_db,phase_deg\n1,0,0\n1,0,0\n3,0,0\n", ":3: omega_rad_s must increase"),
        ("omega_rad_s,magnitude_db,phase_deg\n-1,0,0\n1,0,0\n3,0,0\n", ":2: omega_rad_s must be > 0"),
        ("omega_rad_s,magnitude_db,phase_deg\n1,0,0\n", "at least 3 data rows"),
        ("# nothing\n", "no header row"),
    ],
)
def test_bad_csv_is_one_line(tmp_path: Path, text: str, fragment: str, capsys) -> None:
    p = tmp_path / "bad.csv"
    p.write_text(text)
    with pytest.raises(UserInputError, match=fragment.replace("(", r"\(")):
        load_frequency_response(p)
    assert main(["margins", "--frequency-response", str(p)]) == 2
    err = capsys.readouterr().err
    assert fragment in err and err.count("\n") == 1 and "bad.csv" in err


def test_scenario_and_csv_are_exclusive(capsys) -> None:
    assert main(["margins"]) == 2
    assert "one of them" in capsys.readouterr().err
