"""``rollrig`` entry point: sub-commands, one-line errors, exit status 2.

Each sub-command lives in its own module with ``add_parser(subparsers)`` and
``run(args) -> int``; register it in :data:`COMMANDS`.
"""

from __future__ import annotations

import argparse
import importlib
import sys

from rollrig.sim import __version__
from rollrig.sim.errors import UserInputError

__all__ = ["main", "COMMANDS"]

#: sub-command name -> module under ``sim.cli``
COMMANDS = {
    "run": "run_cmd",
    "check": "check_cmd",
    "turbulence": "turbulence_cmd",
    "fit-sensor": "fit_cmd",
    "make-log": "makelog_cmd",
    "margins": "margins_cmd",
    "rank-faults": "faults_cmd",
    "train": "train_cmd",
}


class _Parser(argparse.ArgumentParser):
    def error(self, message: str) -> None:  # one line, exit 2
        self.exit(2, f"rollrig: error: {message} (see {self.prog} --help)\n")


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(
        prog="rollrig",
        description="Testbed for roll-hold autopilots fed by a camera reading the attitude instrument.",
        epilog="Simulation only: not certified; no substitute for flight test.",
    )
    parser.add_argument("--version", action="version", version=f"rollrig {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    sub.required = True
    for mod in COMMANDS.values():
        importlib.import_module(f"rollrig.sim.cli.{mod}").add_parser(sub)
    return parser


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    # what the manifest records: this call's arguments, also when main() is called in-process
    args.command_line = ["rollrig", *(sys.argv[1:] if argv is None else argv)]
    try:
        return int(args.func(args) or 0)
    except UserInputError as exc:
        print(f"rollrig: error: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("rollrig: interrupted; nothing was written", file=sys.stderr)
        return 130


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
