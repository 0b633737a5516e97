"""Margins code layout (issue 8 house-keeping): analysis imports stay lazy, presentation
lives in sim/report, and linear_loop no longer imports the plot module."""

from __future__ import annotations

import subprocess
import sys


def _imported_after(statement: str) -> set[str]:
    code = f"import sys; {statement}; print(' '.join(sorted(sys.modules)))"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout
    return set(out.split())


def test_handling_alone_does_not_import_python_control_or_matplotlib() -> None:
    mods = _imported_after("import rollrig.sim.analysis.handling")
    assert "control" not in mods and "matplotlib" not in mods


def test_linear_loop_does_not_import_plots() -> None:
    mods = _imported_after("import rollrig.sim.analysis.linear_loop")
    assert "control" in mods  # (python-control itself imports matplotlib)
    assert "rollrig.sim.report.margin_plots" not in mods


def test_package_names_resolve_lazily() -> None:
    import rollrig.sim.analysis as analysis

    assert analysis.margins.__module__.endswith("linear_loop")
    assert analysis.Level.__module__.endswith("handling")
    assert analysis.load_frequency_response.__module__.endswith("frequency_response_file")
