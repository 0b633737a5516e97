"""Read an open-loop frequency response ``L(jω)`` from a CSV file.

The format (ours) is a plain CSV with a header row; lines starting with ``#``
are comments. Column names carry their units:

* frequency: ``omega_rad_s`` (rad/s) **or** ``frequency_hz`` (Hz);
* response: ``magnitude_db`` and ``phase_deg`` **or** ``real_rad_per_rad``
  and ``imag_rad_per_rad`` (the loop gain is aileron command out per aileron
  command in, rad/rad).

Example::

    # open loop broken at the aileron command, identified from flight data
    frequency_hz,magnitude_db,phase_deg
    0.05,24.1,-97.0
    0.10,18.0,-101.5
    ...

Rows must have strictly increasing, positive frequencies and finite values;
at least 3 rows. Other columns are not allowed (a misspelt name would be
silently ignored otherwise).
"""

from __future__ import annotations

import csv
import math
from pathlib import Path

import numpy as np
from rollrig.sim.errors import UserInputError

from .loop_sources import FrequencyResponse

__all__ = ["FREQUENCY_COLUMNS", "RESPONSE_COLUMNS", "load_frequency_response"]

FREQUENCY_COLUMNS = ("omega_rad_s", "frequency_hz")
RESPONSE_COLUMNS = (("magnitude_db", "phase_deg"), ("real_rad_per_rad", "imag_rad_per_rad"))


def _header_help() -> str:
    freq = " or ".join(FREQUENCY_COLUMNS)
    resp = " or ".join(" + ".join(pair) for pair in RESPONSE_COLUMNS)
    return f"allowed columns: {freq}; and {resp}"


def load_frequency_response(path: str | Path) -> FrequencyResponse:
    """Load a frequency-response CSV file (format in the module docstring).

    Parameters
    ----------
    path : str or path-like

    Returns
    -------
    FrequencyResponse

    Raises
    ------
    UserInputError
        One line naming the file, the line or column, and what is allowed.
    """
    p = Path(path)
    try:
        text = p.read_text(encoding="utf-8-sig")
    except OSError as exc:
        raise UserInputError(
            f"{p}: cannot read the frequency-response file ({exc.strerror or exc})"
        ) from None
    except UnicodeDecodeError:
        raise UserInputError(f"{p}: not a text CSV file (expected UTF-8)") from None
    lines = [
        (i + 1, line)
        for i, line in enumerate(text.splitlines())
        if line.strip() and not line.lstrip().startswith("#")
    ]
    if not lines:
        raise UserInputError(f"{p}: no header row; {_header_help()}")
    header_line, header = lines[0]
    names = [c.strip() for c in next(csv.reader([header]))]
    freq = [c for c in names if c in FREQUENCY_COLUMNS]
    pair = next((pr for pr in RESPONSE_COLUMNS if pr[0] in names and pr[1] in names), None)
    unknown = [c for c in names if c not in FREQUENCY_COLUMNS and c not in sum(RESPONSE_COLUMNS, ())]
    if unknown:
        raise UserInputError(f"{p}:{header_line}: unknown column {unknown[0]!r}; {_header_help()}")
    if len(freq) != 1 or pair is None or len(names) != 3 or len(set(names)) != 3:
        raise UserInputError(
            f"{p}:{header_line}: need one frequency column and one response pair; {_header_help()}"
        )
    cols = [names.index(freq[0]), names.index(pair[0]), names.index(pair[1])]
    rows = []
    for lineno, line in lines[1:]:
        cells = [c.strip() for c in next(csv.reader([line]))]
        if len(cells) != 3:
            raise UserInputError(f"{p}:{lineno}: expected 3 values, got {len(cells)}")
        try:
            vals = [float(cells[k]) for k in cols]
        except ValueError:
            raise UserInputError(f"{p}:{lineno}: not a number in {cells!r}") from None
        if not all(math.isfinite(v) for v in vals):
            raise UserInputError(f"{p}:{lineno}: values must be finite")
        rows.append((lineno, *vals))
    if len(rows) < 3:
        raise UserInputError(f"{p}: needs at least 3 data rows, has {len(rows)}")
    arr = np.array([r[1:] for r in rows])
    f = arr[:, 0]
    scale = 2.0 * math.pi if freq[0] == "frequency_hz" else 1.0
    for k, (lineno, *_) in enumerate(rows):
        if f[k] <= 0.0:
            raise UserInputError(f"{p}:{lineno}: {freq[0]} must be > 0, got {f[k]:g}")
        if k and f[k] <= f[k - 1]:
            raise UserInputError(
                f"{p}:{lineno}: {freq[0]} must increase from row to row ({f[k]:g} after {f[k - 1]:g})"
            )
    if pair[0] == "magnitude_db":
        resp = 10.0 ** (arr[:, 1] / 20.0) * np.exp(1j * np.radians(arr[:, 2]))
    else:
        resp = arr[:, 1] + 1j * arr[:, 2]
        zero = np.nonzero(resp == 0.0)[0]
        if zero.size:
            raise UserInputError(f"{p}:{rows[int(zero[0])][0]}: the response is 0 (magnitude must be > 0)")
    return FrequencyResponse(f * scale, resp, name=p.name)
