"""``rollrig`` entry point: sub-commands, one-line errors, exit status 2.

Each sub-command lives in its own module with ``add_parser(subparsers)`` and
``run(args) -> int``; register it in :data:`COMMANDS` as
``"name": ("module", "one-line help")``. Only the module of the command
being run is imported, so ``rollrig --version`` and ``rollrig --help`` stay
fast whatever the commands import; ``--help`` lists every command with the
help text given here.

Signals: Ctrl-C (SIGINT), SIGTERM and SIGHUP stop the command; output
folders being written are removed (see :mod:`rollrig.sim.report.outdir`),
one line names the signal and the exit status is ``128 + signal number``
(130, 143, 129), as a shell reports it.
"""

from __future__ import annotations

import argparse
import importlib
import signal
import sys

from rollrig.sim.errors import UserInputError, line

__all__ = ["main", "COMMANDS", "build_parser", "Stopped"]

#: sub-command name -> (module under ``rollrig.sim.cli``, one-line help for ``rollrig --help``);
#: a bare module name also works (its module is then imported to build ``--help``)
COMMANDS: dict[str, tuple[str, str] | str] = {
    "run": ("run_cmd", "simulate a scenario and report metrics"),
    "check": ("check_cmd", "validate scenario files without running them"),
    "turbulence": ("turbulence_cmd", "compare simulated Dryden turbulence with its specified σ and PSD"),
    "fit-sensor": ("fit_cmd", "fit the camera model to a recorded sensor log"),
    "make-log": ("makelog_cmd", "write a synthetic sensor log from a scenario (for fit-sensor)"),
    "margins": ("margins_cmd", "stability margins (analytic and empirical) and handling qualities"),
    "rank-faults": ("faults_cmd", "rank the camera's faults by what each costs the loop"),
    "sweep": ("sweep_cmd", "map metrics over a grid or sample of scenario parameters (resumable)"),
    "report": ("report_cmd", "one self-contained HTML page of any rollrig output folder"),
    "tune": ("tune_cmd", "search PID gains that stay good across camera degradations"),
    "read-test": (
        "readtest_cmd",
        "characterise an image reader of the instrument across bank and degradations",
    ),
    "compare": ("compare_cmd", "put controllers side by side on the same runs (common random numbers)"),
    "train": ("train_cmd", "train a learned policy (ARS; PPO/SAC with the rl extra) and judge it"),
}

#: signals treated like Ctrl-C: stop, remove partial output, exit 128 + number
_STOP_SIGNALS = ("SIGTERM", "SIGHUP")


class Stopped(KeyboardInterrupt):
    """Raised in the main thread when SIGTERM or SIGHUP arrives (cleans up like Ctrl-C)."""

    def __init__(self, signum: int) -> None:
        super().__init__(signum)
        self.signum = signum


class _Parser(argparse.ArgumentParser):
    def error(self, message: str) -> None:  # one line, exit 2
        self.exit(2, line(f"rollrig: error: {message} (see {self.prog} --help)") + "\n")


class _Version(argparse.Action):
    """``--version``: the version is looked up only when asked for."""

    def __call__(self, parser, namespace, values, option_string=None) -> None:
        import rollrig

        sys.stdout.write(f"rollrig {rollrig.__version__}\n")
        parser.exit(0)


def _module(name: str) -> str:
    entry = COMMANDS[name]
    return entry if isinstance(entry, str) else entry[0]


def _chosen(argv: list[str]) -> str | None:
    """The sub-command named on the command line (first word that is a command)."""
    for a in argv:
        if a in COMMANDS:
            return a
        if not a.startswith("-"):
            return None
    return None


def build_parser(argv: list[str] | None = None) -> argparse.ArgumentParser:
    """The parser; only the command named in ``argv`` gets its full options (all if ``None``)."""
    parser = _Parser(
        prog="rollrig",
        description="Testbed for roll-hold autopilots fed by a camera reading the attitude instrument.",
        epilog="Simulation only: not certified; no substitute for flight test.",
    )
    parser.add_argument("--version", action=_Version, nargs=0, help="show the version and exit")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    sub.required = True
    chosen = None if argv is None else _chosen(argv)
    for name, entry in COMMANDS.items():
        if isinstance(entry, str) or argv is None or name == chosen:
            importlib.import_module(f"rollrig.sim.cli.{_module(name)}").add_parser(sub)
        else:  # listed in --help, options built only when this command runs
            sub.add_parser(name, help=entry[1])
    return parser


def _raise_stopped(signum, frame) -> None:
    raise Stopped(signum)


def _install_signal_handlers() -> dict:
    old = {}
    for name in _STOP_SIGNALS:
        sig = getattr(signal, name, None)
        if sig is None:
            continue
        try:
            old[sig] = signal.signal(sig, _raise_stopped)
        except ValueError:  # not the main thread (main() called from a worker)
            pass
    return old


def main(argv: list[str] | None = None) -> int:
    args_in = list(sys.argv[1:] if argv is None else argv)
    args_in = [str(a) for a in args_in]
    parser = build_parser(args_in)
    old_handlers = _install_signal_handlers()
    try:
        args = parser.parse_args(args_in)
        # what the manifest records: this call's arguments, also when main() is called in-process
        args.command_line = ["rollrig", *args_in]
        return int(args.func(args) or 0)
    except UserInputError as exc:
        print(line(f"rollrig: error: {exc}"), file=sys.stderr)
        return 2
    except Stopped as exc:
        name = signal.Signals(exc.signum).name
        print(f"rollrig: stopped by {name}; no output was written", file=sys.stderr)
        return 128 + exc.signum
    except KeyboardInterrupt:
        print("rollrig: interrupted; no output was written", file=sys.stderr)
        return 130
    finally:
        for sig, handler in old_handlers.items():
            signal.signal(sig, handler)


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
