"""rollrig simulation side: plant models, the stepping core, metrics, scenarios.

Everything that *drives* the stepping core (analysis, tuning, reports, the CLI)
lives in subpackages of ``sim``. The leaves ``sensors`` and ``controllers``
never import from here.
"""

from __future__ import annotations

__all__ = ["__version__"]

try:  # installed distribution
    from importlib.metadata import PackageNotFoundError, version

    __version__ = version("rollrig")
except PackageNotFoundError:  # running from a source tree
    __version__ = "0.0.0+source"
