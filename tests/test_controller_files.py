"""Controllers in their own TOML files, referenced from a scenario; bundled kinds need no --allow-code."""

from __future__ import annotations

import numpy as np
import pytest
from rollrig.sim.errors import ScenarioError
from rollrig.sim.runner import run_scenario
from rollrig.sim.scenario import load_scenario

SCENARIO = """
[aircraft]
model = "roll-only"
[sensor]
frame_rate_hz = 25.0
latency_s = 0.05
[sensor.gyro]
rate_hz = 100.0
[controller]
{controller}
[command]
profile = "step"
to_deg = 10.0
[run]
duration_s = 3.0
runs = 2
"""


def test_file_reference_equals_inline(tmp_path):
    body = 'kind = "lqg"\nlabel = "LQG, slow"\nmax_bank_error_deg = 8.0\n'
    (tmp_path / "ctl").mkdir()
    (tmp_path / "ctl" / "lqg.toml").write_text("[controller]\n" + body)
    inline = tmp_path / "inline.toml"
    inline.write_text(SCENARIO.format(controller=body))
    ref = tmp_path / "ref.toml"
    ref.write_text(SCENARIO.format(controller='file = "ctl/lqg.toml"'))
    a, b = load_scenario(inline), load_scenario(ref)
    assert a.controller.kind == b.controller.kind == "lqg" and b.controller.name == "LQG, slow"
    assert a.controller.params == b.controller.params
    # a bundled kind runs without allow_code
    np.testing.assert_array_equal(run_scenario(a).trace.bank, run_scenario(b).trace.bank)


@pytest.mark.parametrize(
    "body, match",
    [
        ('kind = "cascade"\nk_bank = 2.0\n', r"ctl.toml.*k_bank.*k_bank_per_s"),  # unknown key, suggestion
        ('kind = "lqg"\nmax_bank_error_deg = -1.0\n', r"ctl.toml.*max_bank_error_deg"),
        ('kind = "smith"\nkp = 0.3\ndelay_s = 0.1\ndelay_from_age = true\n', r"delay_s"),
        ('file = "other.toml"\n', r"cannot refer to another"),
    ],
)
def test_bad_controller_file_is_one_line(tmp_path, body, match):
    (tmp_path / "ctl.toml").write_text("[controller]\n" + body)
    ref = tmp_path / "s.toml"
    ref.write_text(SCENARIO.format(controller='file = "ctl.toml"'))
    with pytest.raises(ScenarioError, match=match) as exc:
        load_scenario(ref)
    assert "\n" not in str(exc.value)


def test_missing_controller_file(tmp_path):
    ref = tmp_path / "s.toml"
    ref.write_text(SCENARIO.format(controller='file = "nowhere.toml"'))
    with pytest.raises(ScenarioError, match="no such controller file"):
        load_scenario(ref)
