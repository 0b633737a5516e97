"""CLI fuzz (issue 9): exit 0 or 2 only, one stderr line for 2, and ``check`` ok ⇒ ``run`` ok.

Scenarios come from :func:`fuzz_scenarios.random_case` (in-range values at the
ends of their ranges, timing corners, and now and then one mistake). Hypothesis
supplies the random source, so CI (derandomized) runs the same few hundred
cases every time. The long run (10,000+ cases, hangs timed) is
``bench/fuzz_cli.py``.
"""

from __future__ import annotations

import random

from fuzz_scenarios import random_case
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st


def _ok_or_one_line(code: int, out: str, err: str) -> None:
    assert code in (0, 2), f"exit {code}: {err[-2000:]!r}"
    assert "Traceback" not in err
    if code == 2:
        assert err.count("\n") == 1 and err.startswith("rollrig: error: "), err[-2000:]


@settings(max_examples=300, deadline=None, suppress_health_check=list(HealthCheck))
@given(st.randoms(use_true_random=False))
def test_cli_fuzz_check_ok_means_run_ok(tmp_path_factory, cli_plain, rnd: random.Random):
    text, extra = random_case(rnd)
    path = tmp_path_factory.mktemp("fuzz") / "case.toml"
    path.write_text(text, encoding="utf-8")
    checked = cli_plain(["check", str(path)])
    _ok_or_one_line(*checked)
    ran = cli_plain(["run", str(path), "--no-files", "--format", "csv", *extra])
    _ok_or_one_line(*ran)
    if checked[0] == 0 and not extra:
        assert ran[0] == 0, f"check passed, run failed: {ran[2]!r}\n{text}"
