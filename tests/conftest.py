"""Shared fixtures: in-process CLI runs and scenario files (helpers live in ``helpers.py``)."""

from __future__ import annotations

import os
from collections.abc import Callable
from pathlib import Path

import pytest
from helpers import MINIMAL_SCENARIO, to_toml
from hypothesis import settings

# CI explores a fixed set of examples (a property test must not turn a
# submission red by chance); a developer's run draws new ones each time.
settings.register_profile("ci", derandomize=True)
if os.environ.get("CI"):
    settings.load_profile("ci")


@pytest.fixture
def cli(capsys) -> Callable[[list[str]], tuple[int, str, str]]:
    """Run ``rollrig ARGS`` in-process: returns ``(exit status, stdout, stderr)``.

    argparse's own errors and ``--help`` end in ``SystemExit``; its code is
    returned like a normal exit status.
    """
    from rollrig.sim.cli.main import main

    def run(args: list[str]) -> tuple[int, str, str]:
        capsys.readouterr()  # drop anything printed before
        try:
            code = main([str(a) for a in args])
        except SystemExit as exc:
            code = exc.code if isinstance(exc.code, int) else (0 if exc.code is None else 1)
        out, err = capsys.readouterr()
        return code, out, err

    return run


@pytest.fixture
def scenario_text() -> str:
    """A valid minimal scenario (TOML text)."""
    return MINIMAL_SCENARIO


@pytest.fixture
def write_doc(tmp_path) -> Callable[..., Path]:
    """Write a document (dict) or TOML text to ``tmp_path/<name>``; return the path."""

    def write(doc: dict | str | bytes, name: str = "scenario.toml") -> Path:
        path = tmp_path / name
        if isinstance(doc, bytes):
            path.write_bytes(doc)
        else:
            path.write_text(doc if isinstance(doc, str) else to_toml(doc), encoding="utf-8")
        return path

    return write


@pytest.fixture(scope="session")
def cli_plain() -> Callable[[list[str]], tuple[int, str, str]]:
    """Like :func:`cli` without pytest's capture fixture (usable inside hypothesis tests)."""
    import contextlib
    import io

    from rollrig.sim.cli.main import main

    def run(args: list[str]) -> tuple[int, str, str]:
        out, err = io.StringIO(), io.StringIO()
        with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
            try:
                code = main([str(a) for a in args])
            except SystemExit as exc:
                code = exc.code if isinstance(exc.code, int) else (0 if exc.code is None else 1)
        return code, out.getvalue(), err.getvalue()

    return run
