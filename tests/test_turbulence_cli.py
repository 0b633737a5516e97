"""``rollrig turbulence``: σ and PSD of the simulated gusts against MIL-F-8785C."""

from __future__ import annotations

import json

import pytest
from rollrig.sim.analysis.turbulence_check import check_turbulence
from rollrig.sim.cli.main import main
from rollrig.sim.turbulence import FT_M, INTENSITY_W20_MPS, dryden_params


def test_check_agrees_with_specification():
    """Sample σ within 5 % and Welch PSD within 1.5 dB of the analytic Dryden spectrum.

    Verification method: Madden, "Verifying Implementation of the Dryden
    Turbulence Model" (NASA Langley). 16 records x 600 s give a PSD estimate with
    about 128 averaged segments per channel, so the in-band scatter is a few
    tenths of a dB; 1.5 dB leaves room for the ZOH aliasing near the band's top.
    """
    p = dryden_params(300 * FT_M, INTENSITY_W20_MPS["moderate"], 25.0, 2.9)
    chk = check_turbulence(p, duration_s=600.0, runs=16, seed=3)
    for ch in ("v_gust", "p_gust", "r_gust"):
        assert chk.sigma_sample[ch] == pytest.approx(chk.sigma_spec[ch], rel=0.05)
        assert chk.max_db_error[ch] < 1.5


def test_cli_json_and_png(tmp_path, capsys):
    out = tmp_path / "turb"
    code = main(
        [
            "turbulence",
            "--airspeed-mps",
            "30",
            "--altitude-ft",
            "500",
            "--span-m",
            "3",
            "--duration-s",
            "200",
            "--records",
            "4",
            "--format",
            "json",
            "--out",
            str(out),
        ]
    )
    assert code == 0
    data = json.loads(capsys.readouterr().out.split("\nwrote")[0])
    rows = {r["channel"]: r for r in data[0]["rows"]}
    assert set(rows) == {"v_gust", "p_gust", "r_gust"}
    assert all(0.8 < r["ratio"] < 1.2 for r in rows.values())
    assert (out / "turbulence_psd.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


@pytest.mark.parametrize(
    "argv",
    [
        ["turbulence", "--airspeed-mps", "30"],  # altitude and span missing
        ["turbulence", "--airspeed-mps", "-3", "--altitude-ft", "500", "--span-m", "3"],
        ["turbulence", "scenarios/light-single-wings-level.toml"],  # no turbulence section
    ],
)
def test_cli_refuses_bad_requests(argv, capsys):
    assert main(argv) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1
    assert "allowed" in err[0] or "needed" in err[0]


def test_scenario_turbulence_is_used(capsys):
    code = main(
        [
            "turbulence",
            "scenarios/uav-ridge-turbulence.toml",
            "--duration-s",
            "60",
            "--records",
            "2",
            "--format",
            "json",
        ]
    )
    assert code == 0
    text = capsys.readouterr().out
    assert "V = 24 m/s" in text  # the scenario's airspeed, not a default
