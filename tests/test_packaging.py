"""One distinctive import name: rollrig installs as ``rollrig`` only, a user's own
``sim``/``sensors``/``controllers`` packages cannot shadow it, and the README's
scripting example runs as written."""

from __future__ import annotations

import json
import os
import re
import subprocess
import sys
import zipfile
from pathlib import Path

import pytest
from helpers import REPO

SCENARIO = REPO / "scenarios" / "light-single-wings-level.toml"


def _rollrig_exe() -> str:
    exe = Path(sys.executable).parent / "rollrig"
    if not exe.exists():
        pytest.skip("rollrig console script not installed (pip install -e .)")
    return str(exe)


def _run_metrics(tmp: Path, name: str, env: dict[str, str]) -> dict:
    out = tmp / name
    res = subprocess.run(
        [_rollrig_exe(), "run", str(SCENARIO), "--runs", "2", "--out", str(out), "--format", "json"],
        cwd=tmp,
        env=env,
        capture_output=True,
        text=True,
        timeout=300,
    )
    assert res.returncode == 0, res.stderr
    return json.loads((out / "metrics.json").read_text())["summary"]


def test_user_packages_named_like_ours_do_not_shadow_rollrig(tmp_path):
    """A folder on sys.path holding its own sim/, sensors/, controllers/ (each
    raising on import) leaves ``rollrig run`` unchanged."""
    decoy = tmp_path / "decoys"
    for name in ("sim", "sensors", "controllers"):
        (decoy / name).mkdir(parents=True)
        (decoy / name / "__init__.py").write_text(f"raise ImportError('decoy {name} imported')\n")
        (decoy / name / "core.py").write_text("raise ImportError('decoy module imported')\n")
    env = {k: v for k, v in os.environ.items() if k != "PYTHONPATH"}
    clean = _run_metrics(tmp_path, "clean", env)
    shadowed = _run_metrics(tmp_path, "shadowed", dict(env, PYTHONPATH=str(decoy)))
    assert clean == shadowed


def test_readme_scripting_example_runs():
    text = (REPO / "README.md").read_text()
    m = re.search(r"## Scripting rollrig from Python.*?```python\n(.*?)```", text, flags=re.S)
    assert m, "README lost its scripting example"
    res = subprocess.run(
        [sys.executable, "-c", m.group(1)], cwd=REPO, capture_output=True, text=True, timeout=300
    )
    assert res.returncode == 0, res.stderr
    lines = res.stdout.strip().splitlines()
    assert len(lines) == 3, res.stdout
    gm, pm = (float(v) for v in lines[-1].split())
    assert gm > 0 and pm > 0


def test_public_api_names_resolve():
    import rollrig

    for name in rollrig.__all__:
        assert getattr(rollrig, name) is not None, name
    with pytest.raises(AttributeError):
        rollrig.no_such_name  # noqa: B018


def test_wheel_installs_only_rollrig_at_top_level(tmp_path):
    """Build the wheel and read its file list: one top-level package, ``rollrig``,
    holding every source subpackage."""
    res = subprocess.run(
        [sys.executable, "-m", "pip", "wheel", "--no-deps", "--quiet", "-w", str(tmp_path), str(REPO)],
        capture_output=True,
        text=True,
        timeout=600,
    )
    assert res.returncode == 0, res.stderr
    (wheel,) = tmp_path.glob("rollrig-*.whl")
    names = zipfile.ZipFile(wheel).namelist()
    top = {n.split("/")[0] for n in names}
    assert {t for t in top if not t.endswith(".dist-info")} == {"rollrig"}
    for folder in ("sim", "sensors", "controllers"):
        for init in (REPO / folder).rglob("__init__.py"):
            rel = init.relative_to(REPO).as_posix()
            assert f"rollrig/{rel}" in names, rel
    assert "rollrig/sim/cli/main.py" in names
