"""Errors a user can cause, and how they are worded.

Every user mistake raises a subclass of :class:`UserInputError` (itself a
``ValueError``) whose message is one line naming the file, the key and the
allowed range. The CLI prints that line and exits with status 2.
"""

from __future__ import annotations

__all__ = ["UserInputError", "ScenarioError", "LogFileError"]


class UserInputError(ValueError):
    """A mistake in something the user gave us (a file, an option, a value)."""


class ScenarioError(UserInputError):
    """A scenario file that cannot be read, or holds a value out of range."""


class LogFileError(UserInputError):
    """A recorded sensor log that cannot be used."""
