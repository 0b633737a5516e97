"""Controllers: the protocol every controller follows, and the bundled ones.

A leaf package: it imports numpy, scipy and python-control, never ``sim``.
"""

from __future__ import annotations

from .base import Controller, Observation

__all__ = ["Controller", "Observation"]
