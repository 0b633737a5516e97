"""Output folders written atomically, each with a run manifest.

Files are written into a hidden sibling folder; only when everything is in
place is it renamed to the requested name, so an error, Ctrl-C, SIGTERM or
SIGHUP never leaves a half-written result behind. Rules that keep a user's
own files safe:

* the destination is checked before any work: it must be writable (a probe
  folder is created and removed), and an existing folder is refused unless
  ``--force`` is given;
* ``--force`` replaces only an empty folder or a folder rollrig wrote: one
  whose ``manifest.json`` says ``"tool": "rollrig"`` and lists every file
  the folder holds (a file added by hand makes it the user's again);
* the working folder, the home folder, any of their parents and a folder
  holding the scenario (or log) being read are never an output folder;
* hidden ``.NAME.partial-PID-*`` folders left behind by a killed process
  (SIGKILL cannot be caught) are removed the next time rollrig writes into
  the same parent, and reported on stderr;
* folders get the user's usual permissions (umask), not ``mkdtemp``'s 0700.

JSON files go through :func:`write_json` (see :func:`json_text` for the
rules: never-reached values are ``null``).
"""

from __future__ import annotations

import json
import os
import re
import shutil
import sys
import tempfile
import time
from collections.abc import Iterable
from contextlib import contextmanager
from pathlib import Path
from typing import Any

from rollrig.sim import __version__
from rollrig.sim.errors import UserInputError

from . import CAUTION

__all__ = [
    "default_out_dir",
    "check_out_dir",
    "output_folder",
    "write_json",
    "json_text",
    "jsonable",
    "manifest",
    "MANIFEST",
    "clean_stale_partials",
]

#: name of the manifest in every output folder
MANIFEST = "manifest.json"

_PARTIAL = re.compile(r"^\..+\.(?:partial|old)-(\d+)(?:-.*)?$")


def default_out_dir(stem: str, root: str = "rollrig-runs") -> Path:
    """``rollrig-runs/<stem>-<YYYYmmdd-HHMMSS>`` (suffixed if taken)."""
    base = Path(root) / f"{stem[:80]}-{time.strftime('%Y%m%d-%H%M%S')}"
    out, n = base, 2
    while out.exists():
        out = base.with_name(f"{base.name}-{n}")
        n += 1
    return out


def _rollrig_files(folder: Path) -> set[str] | None:
    """Files rollrig's manifest lists in ``folder``, or ``None`` if it is not rollrig's."""
    try:
        doc = json.loads((folder / MANIFEST).read_text())
    except (OSError, ValueError):
        return None
    if not isinstance(doc, dict) or doc.get("tool") != "rollrig" or not isinstance(doc.get("files"), list):
        return None
    return {str(f) for f in doc["files"]} | {MANIFEST}


def _holds_only_rollrig_files(folder: Path) -> bool:
    try:
        present = {str(p.relative_to(folder)) for p in folder.rglob("*") if not p.is_dir()}
    except OSError:
        return False
    if not present and not any(folder.iterdir()):
        return True  # an empty folder: nothing to lose
    listed = _rollrig_files(folder)
    return listed is not None and present <= listed


def _probe_writable(path: Path) -> None:
    """Create and remove a folder where ``path`` will go; one line if that fails."""
    anc = path.parent
    while not anc.exists() and anc != anc.parent:  # first existing ancestor
        anc = anc.parent
    if not anc.is_dir():  # --out some_file/sub
        raise UserInputError(f"{anc}: exists and is not a folder; allowed: an output path inside a folder")
    try:
        probe = tempfile.mkdtemp(prefix=".rollrig-probe-", dir=anc)
        os.rmdir(probe)
    except OSError as exc:
        why = exc.strerror or type(exc).__name__
        raise UserInputError(
            f"{path}: cannot write output there ({anc}: {why}); allowed: a folder you can write to"
        ) from None


def check_out_dir(path: Path, force: bool, *, protect: Iterable[str | Path] = ()) -> None:
    """Check an output folder before any work; raise :class:`UserInputError` with one line.

    Parameters
    ----------
    path : Path
        The folder to be written.
    force : bool
        Whether the user asked to replace an existing folder (``--force``).
    protect : paths
        Input files (scenario, log) that must not be inside the folder.
    """
    path = Path(path)
    try:
        real = path.resolve()
        keep = {Path.cwd().resolve(), Path.home().resolve()}
    except (OSError, RuntimeError) as exc:
        raise UserInputError(f"{path}: cannot be used as an output folder ({exc})") from None
    for k in keep:
        if k == real or real in k.parents:
            what = "the working folder" if k == Path.cwd().resolve() else "the home folder"
            rel = "is" if k == real else "holds"
            raise UserInputError(
                f"{str(path) or '.'}: {rel} {what}; allowed: a new folder (e.g. --out results/run1)"
            )
    for p in protect:
        try:
            pr = Path(p).resolve()
        except (OSError, RuntimeError):
            continue
        if real in pr.parents:
            raise UserInputError(
                f"{path}: holds the input file {p}; allowed: an output folder that holds no input"
            )
    if path.exists() or path.is_symlink():
        if not path.is_dir():
            raise UserInputError(f"{path}: exists and is not a folder; allowed: a folder path")
        if not force:
            raise UserInputError(
                f"{path}: output folder exists; allowed: a new folder, or --force to replace it"
            )
        if path.is_symlink() or not _holds_only_rollrig_files(path):
            raise UserInputError(
                f"{path}: --force replaces only a folder rollrig wrote (its manifest.json lists every "
                "file), and this one holds other files; allowed: a new folder"
            )
    _probe_writable(path)


def clean_stale_partials(parent: Path, *, report=None) -> list[Path]:
    """Remove hidden partial folders in ``parent`` whose writing process is gone.

    Returns the removed paths; each is reported on ``report`` (default stderr).
    """
    report = sys.stderr if report is None else report
    removed = []
    try:
        entries = list(Path(parent).iterdir())
    except OSError:
        return removed
    for p in entries:
        m = _PARTIAL.match(p.name)
        if m is None or not p.is_dir():
            continue
        pid = int(m.group(1))
        if pid == os.getpid() or _alive(pid):
            continue
        shutil.rmtree(p, ignore_errors=True)
        if not p.exists():
            removed.append(p)
            print(f"rollrig: removed {p}/, left by a stopped run (process {pid})", file=report)
        else:
            print(f"rollrig: could not remove {p}/, left by a stopped run; remove it by hand", file=report)
    return removed


def _alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except (PermissionError, OverflowError, OSError):
        return True  # someone else's process, or unknown: leave its folder alone
    return True


def _umask() -> int:
    mask = os.umask(0o022)
    os.umask(mask)
    return mask


@contextmanager
def output_folder(path: Path, force: bool = False, *, protect: Iterable[str | Path] = ()):
    """Yield a temporary folder that becomes ``path`` when the block succeeds.

    The block writes its files into the yielded folder. A ``manifest.json``
    written there gets the list of files added; a block that writes none gets
    a minimal one. Any exception (including Ctrl-C and the stop signals the
    CLI turns into :class:`KeyboardInterrupt`) removes the temporary folder;
    an ``OSError`` becomes a one-line :class:`UserInputError`.
    """
    path = Path(path)
    protect = list(protect)
    check_out_dir(path, force, protect=protect)
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        clean_stale_partials(path.parent)
        tmp = Path(tempfile.mkdtemp(prefix=f".{path.name[:80]}.partial-{os.getpid()}-", dir=path.parent))
        os.chmod(tmp, 0o777 & ~_umask())
    except OSError as exc:
        raise UserInputError(f"{path}: cannot write output there ({exc.strerror})") from None
    try:
        yield tmp
        _finish_manifest(tmp)
        old = None
        if path.exists():
            if not force or not _holds_only_rollrig_files(path):  # changed while we computed
                raise UserInputError(f"{path}: appeared or changed while computing; allowed: a new folder")
            old = path.with_name(f".{path.name[:80]}.old-{os.getpid()}")
            os.replace(path, old)
        os.replace(tmp, path)
    except OSError as exc:
        shutil.rmtree(tmp, ignore_errors=True)
        raise UserInputError(
            f"{path}: could not write output ({exc.strerror or type(exc).__name__}); nothing was written"
        ) from None
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    if old is not None:
        shutil.rmtree(old, ignore_errors=True)


def _finish_manifest(tmp: Path) -> None:
    """Add the list of files to the manifest (write a minimal one if missing)."""
    mf = tmp / MANIFEST
    doc = json.loads(mf.read_text()) if mf.exists() else manifest_minimal()
    doc["files"] = sorted(
        str(p.relative_to(tmp)) for p in tmp.rglob("*") if p.is_file() and p.name != MANIFEST
    )
    write_json(mf, doc)


def manifest_minimal() -> dict:
    return {"tool": "rollrig", "version": __version__, "caution": CAUTION}


def jsonable(obj: Any) -> Any:
    """Plain JSON values: numpy scalars and arrays unwrapped; NaN and ±inf become ``null``.

    Standard JSON has no infinity. A value that was never reached (a run
    that never settled, a limit never exceeded, a statistic over zero runs)
    is written as ``null``, with a count or flag beside it saying why
    (``n_inf``, ``n``, ``diverged``); see the README's results schema.
    """
    import math

    import numpy as np

    if isinstance(obj, dict):
        return {str(k): jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [jsonable(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return jsonable(obj.tolist())
    if isinstance(obj, (np.floating, float)):
        f = float(obj)
        return f if math.isfinite(f) else None
    if isinstance(obj, np.integer):
        return int(obj)
    if isinstance(obj, np.bool_):
        return bool(obj)
    if isinstance(obj, Path):
        return str(obj)
    return obj


def json_text(data: Any) -> str:
    """The one way rollrig writes JSON: :func:`jsonable` values, strict (no NaN/Infinity), UTF-8."""
    return json.dumps(jsonable(data), indent=2, ensure_ascii=False, allow_nan=False) + "\n"


def write_json(path: Path, data: Any) -> None:
    """Write ``data`` as JSON to ``path`` (see :func:`json_text`)."""
    Path(path).write_text(json_text(data))


def manifest(
    *,
    scenario_path: str,
    scenario_sha256: str,
    seed: int | None,
    runs: list[int] | range,
    extra: dict | None = None,
    command_line: list[str] | None = None,
) -> dict:
    """Provenance of an output folder."""
    import platform

    import numpy as np

    runs = list(runs)
    data = {
        "tool": "rollrig",
        "version": __version__,
        "created_utc": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
        "command_line": list(sys.argv if command_line is None else command_line),
        "scenario": scenario_path,
        "scenario_sha256": scenario_sha256,
        "seed": seed,
        "runs": len(runs),
        "run_indices": runs if len(runs) <= 20 else {"first": runs[0], "last": runs[-1]},
        "python": platform.python_version(),
        "numpy": np.__version__,
        "caution": CAUTION,
    }
    if extra:
        data.update(extra)
    return data
