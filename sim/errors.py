"""Errors a user can cause, and how they are worded.

Every user mistake raises a subclass of :class:`UserInputError` (itself a
``ValueError``) whose message is one line naming the file, the key and the
allowed range. The CLI prints that line (through :func:`line`, which keeps
it one line and at most :data:`MAX_LINE` characters) and exits with status 2.
"""

from __future__ import annotations

__all__ = ["UserInputError", "ScenarioError", "LogFileError", "line", "shorten", "MAX_LINE"]

#: longest error line printed (characters); longer ones are cut in the middle
MAX_LINE = 1000


class UserInputError(ValueError):
    """A mistake in something the user gave us (a file, an option, a value)."""


class ScenarioError(UserInputError):
    """A scenario file that cannot be read, or holds a value out of range."""


class LogFileError(UserInputError):
    """A recorded sensor log that cannot be used."""


def shorten(text: str, limit: int) -> str:
    """``text`` cut in the middle to at most ``limit`` characters (``…`` marks the cut)."""
    text = str(text)
    if len(text) <= limit:
        return text
    head = (limit - 1) * 2 // 3
    tail = limit - 1 - head
    return text[:head] + "…" + (text[-tail:] if tail > 0 else "")


def line(message: str, limit: int = MAX_LINE) -> str:
    """One printable line: line breaks and control characters become spaces, then capped."""
    text = "".join(c if c.isprintable() else " " for c in str(message))
    return shorten(text, limit)
