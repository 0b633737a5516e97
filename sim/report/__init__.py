"""Reports: terminal tables, CSV/JSON/Markdown, PNG plots and output folders."""

from __future__ import annotations

CAUTION = (
    "Simulation only: not certified flight software, and no substitute for flight "
    "test under your local aviation authority and licensed practice."
)

__all__ = ["CAUTION"]
