"""rollrig simulation side: plant models, the stepping core, metrics, scenarios.

Everything that *drives* the stepping core (analysis, tuning, reports, the CLI)
lives in subpackages of ``sim``. The leaves ``sensors`` and ``controllers``
never import from here.
"""

from __future__ import annotations

from rollrig import __version__

__all__ = ["__version__"]
