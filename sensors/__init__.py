"""Sensors: the camera reader that turns true bank into readings, and a rate gyro.

A leaf package: numpy and scipy only, never ``sim``.
"""

from __future__ import annotations

__all__: list[str] = []
