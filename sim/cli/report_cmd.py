"""``rollrig report FOLDER``: one self-contained HTML page of an output folder.

Presentation lives in :mod:`rollrig.sim.report.html`; this module reads the
options and prints where the page went.
"""

from __future__ import annotations

import argparse
from pathlib import Path

__all__ = ["add_parser", "run"]


def add_parser(sub) -> None:
    p = sub.add_parser(
        "report",
        help="one self-contained HTML page of any rollrig output folder",
        description=(
            "Turn a rollrig output folder (run, margins, sweep, ...) into one HTML file with its "
            "tables, embedded figures, the scenario text, the manifest and the safety caution: "
            "a single file to mail. Folders of kinds this version does not know get a generic page."
        ),
    )
    p.add_argument("folder", metavar="FOLDER", type=Path, help="a rollrig output folder")
    p.add_argument(
        "-o", "--out", type=Path, metavar="FILE", help="page to write (default FOLDER/report.html)"
    )
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    from rollrig.sim.report.html import write_report

    out = write_report(args.folder, args.out)
    print(f"wrote {out}")
    return 0
