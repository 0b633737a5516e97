"""rollrig simulation side: plant models, the stepping core, metrics, scenarios.

Everything that *drives* the stepping core (analysis, tuning, reports, the CLI)
lives in subpackages of ``sim``. The leaves ``sensors`` and ``controllers``
never import from here.
"""

from __future__ import annotations

__all__ = ["__version__"]


def __getattr__(name: str):
    if name == "__version__":  # looked up lazily: ``rollrig --help`` need not pay for it
        import rollrig

        return rollrig.__version__
    raise AttributeError(f"module 'rollrig.sim' has no attribute {name!r}")
