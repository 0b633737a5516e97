"""Typed, range-checked reading of one table of a TOML scenario file.

A :class:`Section` wraps one TOML table. Each getter names the key, its unit
(carried in the key name, e.g. ``latency_s``) and its allowed range; a wrong
type, a non-finite number or an out-of-range value raises
:class:`~sim.errors.ScenarioError` with one line naming file, key and range.
:meth:`Section.finish` rejects keys nobody asked for and suggests the nearest
valid key, so typos never pass silently.
"""

from __future__ import annotations

import difflib
import math
import tomllib
from collections.abc import Iterable, Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np

from .errors import ScenarioError, shorten

__all__ = ["Section", "REQUIRED", "MAX_STRING", "read_toml_file"]

#: longest string value a scenario key may hold (characters) unless a getter says otherwise
MAX_STRING = 1000


class _Required:
    def __repr__(self) -> str:
        return "REQUIRED"


REQUIRED: Any = _Required()


def _fmt(x: float) -> str:
    return f"{x:g}"


class Section:
    """One table of a scenario file.

    Parameters
    ----------
    table
        The parsed TOML table (a mapping).
    file
        File name used in error messages.
    path
        Dotted table name used in error messages, e.g. ``"sensor"`` or
        ``"sensor.gyro"``.
    """

    def __init__(self, table: Mapping[str, Any], *, file: str, path: str) -> None:
        if not isinstance(table, Mapping):
            raise ScenarioError(f"{file}: [{path}] must be a table, got {type(table).__name__}")
        self.file = file
        self.path = path
        self._table = dict(table)
        self._asked: set[str] = set()

    # ------------------------------------------------------------------ helpers
    def where(self, key: str) -> str:
        """``file: [section] key`` prefix for messages."""
        key = key if key.isprintable() else repr(key)  # a quoted TOML key may hold "\n"
        return f"{self.file}: [{shorten(self.path, 120)}] {shorten(key, 80)}"

    def error(self, key: str, message: str) -> ScenarioError:
        """Build a one-line :class:`ScenarioError` about ``key``."""
        return ScenarioError(f"{self.where(key)}: {message}")

    def has(self, key: str) -> bool:
        """Whether ``key`` is present (marks it as a known key)."""
        self._asked.add(key)
        return key in self._table

    def known(self, keys: Iterable[str]) -> None:
        """Declare keys as valid without reading them (for :meth:`finish`)."""
        self._asked.update(keys)

    def _get(self, key: str, default: Any) -> Any:
        self._asked.add(key)
        if key in self._table:
            return self._table[key]
        if default is REQUIRED:
            raise self.error(key, "is required but missing")
        return default

    # ------------------------------------------------------------------ getters
    def number(
        self,
        key: str,
        default: Any = REQUIRED,
        *,
        lo: float | None = None,
        hi: float | None = None,
        lo_open: bool = False,
        hi_open: bool = False,
    ) -> float:
        """A finite real number within ``[lo, hi]`` (ends open if asked)."""
        value = self._get(key, default)
        if value is None:
            return value
        rng = self._range_text(key, lo, hi, lo_open, hi_open)
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            raise self.error(
                key,
                f"must be a number, got {type(value).__name__} {shorten(repr(value), 80)}; allowed: {rng}",
            )
        try:
            value = float(value)
        except OverflowError:  # TOML integers have no size limit
            raise self.error(key, f"is too large a number; allowed: {rng}") from None
        if not math.isfinite(value):
            raise self.error(key, f"must be a finite number, got {value}; allowed: {rng}")
        bad = (lo is not None and (value < lo or (lo_open and value == lo))) or (
            hi is not None and (value > hi or (hi_open and value == hi))
        )
        if bad:
            raise self.error(key, f"= {_fmt(value)} is out of range; allowed: {rng}")
        return value

    def integer(
        self, key: str, default: Any = REQUIRED, *, lo: int | None = None, hi: int | None = None
    ) -> int:
        """A whole number within ``[lo, hi]``."""
        value = self._get(key, default)
        if value is None:
            return value
        rng = self._range_text(key, lo, hi, False, False)
        if isinstance(value, bool) or not isinstance(value, int):
            if isinstance(value, float) and value.is_integer():
                value = int(value)
            else:
                raise self.error(
                    key, f"must be a whole number, got {shorten(repr(value), 80)}; allowed: {rng}"
                )
        if (lo is not None and value < lo) or (hi is not None and value > hi):
            raise self.error(key, f"= {value} is out of range; allowed: {rng}")
        return int(value)

    def boolean(self, key: str, default: Any = REQUIRED) -> bool:
        value = self._get(key, default)
        if not isinstance(value, bool):
            raise self.error(key, f"must be true or false, got {shorten(repr(value), 80)}")
        return value

    def string(
        self,
        key: str,
        default: Any = REQUIRED,
        *,
        choices: Sequence[str] | None = None,
        max_len: int = MAX_STRING,
    ) -> str:
        """A string (one of ``choices`` if given), at most ``max_len`` characters."""
        value = self._get(key, default)
        if value is None:
            return value
        if not isinstance(value, str):
            allowed = f"; allowed: {', '.join(map(repr, choices))}" if choices is not None else ""
            raise self.error(key, f"must be a string, got {shorten(repr(value), 80)}{allowed}")
        if len(value) > max_len:
            raise self.error(key, f"is {len(value)} characters long; allowed: at most {max_len}")
        if choices is not None and value not in choices:
            hint = difflib.get_close_matches(value, list(choices), n=1)
            did = f" (did you mean {hint[0]!r}?)" if hint else ""
            raise self.error(
                key,
                f"= {shorten(repr(value), 80)} is not allowed{did}; allowed: {', '.join(map(repr, choices))}",
            )
        return value

    def array(
        self,
        key: str,
        default: Any = REQUIRED,
        *,
        shape: tuple[int | None, ...] | None = None,
        lo: float | None = None,
        hi: float | None = None,
    ) -> np.ndarray:
        """A list (or list of lists) of finite numbers as a float array."""
        value = self._get(key, default)
        if value is None:
            return value
        try:
            arr = np.asarray(value, dtype=float)
        except (TypeError, ValueError, OverflowError):
            raise self.error(key, "must be a list of numbers (rows of equal length)") from None
        if arr.dtype == object or arr.ndim == 0:
            raise self.error(key, "must be a list of numbers (rows of equal length)")
        odd = [v for v in np.asarray(value, dtype=object).ravel() if isinstance(v, (bool, str))]
        if odd:  # numpy would quietly turn "1.5" into 1.5 and true into 1.0
            raise self.error(key, f"must hold numbers, got {shorten(repr(odd[0]), 80)}")
        if shape is not None:
            ok = arr.ndim == len(shape) and all(
                want is None or got == want for got, want in zip(arr.shape, shape, strict=True)
            )
            if not ok:
                want = "x".join("n" if s is None else str(s) for s in shape)
                got = "x".join(str(s) for s in arr.shape)
                raise self.error(key, f"has shape {got}; allowed shape: {want}")
        if not np.all(np.isfinite(arr)):
            raise self.error(key, "must hold finite numbers only")
        if (lo is not None and np.any(arr < lo)) or (hi is not None and np.any(arr > hi)):
            raise self.error(
                key, f"has values out of range; allowed: {self._range_text(key, lo, hi, False, False)}"
            )
        return arr

    def sub(self, key: str, *, required: bool = False) -> Section | None:
        """A nested table ``[path.key]`` as a :class:`Section`, or ``None``."""
        value = self._get(key, REQUIRED if required else None)
        if value is None:
            return None
        if not isinstance(value, Mapping):
            raise self.error(key, f"must be a table, got {type(value).__name__}")
        return Section(value, file=self.file, path=f"{self.path}.{key}")

    def mapping(self, key: str) -> dict[str, Any]:
        """A nested table returned as a plain dict (no checking of its keys)."""
        value = self._get(key, {})
        if not isinstance(value, Mapping):
            raise self.error(key, f"must be a table, got {type(value).__name__}")
        return dict(value)

    def tables(self, key: str) -> list[Section]:
        """An array of tables ``[[path.key]]`` as Sections named ``path.key #i`` (1-based)."""
        value = self._get(key, [])
        if not isinstance(value, list) or not all(isinstance(v, Mapping) for v in value):
            raise self.error(key, f"must be an array of tables, written [[{self.path}.{key}]]")
        return [Section(v, file=self.file, path=f"{self.path}.{key} #{i + 1}") for i, v in enumerate(value)]

    def finish(self) -> None:
        """Reject keys that no getter asked for, suggesting the nearest one."""
        for key in self._table:
            if key not in self._asked:
                hint = difflib.get_close_matches(key, sorted(self._asked), n=1, cutoff=0.6)
                did = f"; did you mean {hint[0]!r}?" if hint else ""
                allowed = ", ".join(sorted(self._asked)) or "none"
                raise self.error(key, f"is not a known key{did} (known keys: {allowed})")

    @staticmethod
    def _range_text(key: str, lo, hi, lo_open: bool, hi_open: bool) -> str:
        left = "" if lo is None else f"{_fmt(lo)} {'<' if lo_open else '≤'} "
        right = "" if hi is None else f" {'<' if hi_open else '≤'} {_fmt(hi)}"
        if lo is None and hi is None:
            return "any finite number"
        return f"{left}{key}{right}"


def read_toml_file(path: str | Path, what: str = "scenario file") -> tuple[bytes, str, dict]:
    """Read a TOML file: ``(raw bytes, text, document)``, or one line naming what is wrong.

    One place for every file rollrig reads as TOML (scenarios, controller
    files, tuning and read-test files): a missing or unreadable file, text
    that is not UTF-8 (a byte-order mark is fine) and invalid TOML each give a
    :class:`~rollrig.sim.errors.ScenarioError` naming the file.
    """
    p = Path(path)
    try:
        raw = p.read_bytes()
    except FileNotFoundError:
        raise ScenarioError(f"{p}: no such {what}") from None
    except OSError as exc:
        raise ScenarioError(f"{p}: cannot be read ({exc.strerror})") from None
    try:
        text = raw.decode("utf-8-sig")  # a byte-order mark some editors write is fine
        doc = tomllib.loads(text)
    except UnicodeDecodeError:
        raise ScenarioError(f"{p}: is not UTF-8 text") from None
    except tomllib.TOMLDecodeError as exc:
        raise ScenarioError(f"{p}: is not valid TOML: {exc}") from None
    return raw, text, doc
