"""The ``ndtmap`` command line: one module per command, each with ``register(subparsers)``.

The command line only parses arguments and calls library functions; every
behaviour is available from Python too. A user mistake (a bad file, a bad
option) ends with one line on stderr that says what is wrong and exit
status 2; nothing prints a traceback unless ``--debug`` is given.

Exit status: 0 success; 1 the command ran but found problems (``info`` on
an invalid grid) or finished a batch partially; 2 usage or input error;
70 an internal error (a bug: please report it with ``--debug`` output);
130 interrupted (Ctrl-C).

The command modules import the library (xarray, numpy, the processing
subpackages) only when their command runs, so that ``ndtmap --help`` and the
parser start quickly.

Examples
--------
>>> parser = build_parser()
>>> args = parser.parse_args(["info", "grid.nc", "--json"])
>>> args.command, args.json
('info', True)
"""

from __future__ import annotations

import argparse
import sys
from collections.abc import Sequence

from ndtmap._shared.caution import CAUTION
from ndtmap._version import __version__
from ndtmap.cli import convert, demo, indications, info, make_samples, report
from ndtmap.cli import map as map_command
from ndtmap.cli._exit_codes import EXIT_INTERNAL, EXIT_INTERRUPTED, EXIT_OK, EXIT_PROBLEMS, EXIT_USAGE
from ndtmap.errors import NdtmapError

__all__ = [
    "main",
    "build_parser",
    "EXIT_OK",
    "EXIT_PROBLEMS",
    "EXIT_USAGE",
    "EXIT_INTERNAL",
    "EXIT_INTERRUPTED",
]

#: The command modules in the order ``ndtmap --help`` lists their commands.
COMMANDS = (info, demo, make_samples, map_command, indications, report, convert)


class _Parser(argparse.ArgumentParser):
    """argparse, but usage errors are one line and exit status 2."""

    def error(self, message: str) -> None:  # pragma: no cover - exercised through main
        self.exit(EXIT_USAGE, f"{self.prog}: error: {message} (see `{self.prog} --help`)\n")


def build_parser() -> argparse.ArgumentParser:
    """The argument parser of ``ndtmap`` (for documentation and tests)."""
    parser = _Parser(
        prog="ndtmap",
        description="Open workbench for encoded pulse-echo ultrasonic scans. " + CAUTION,
    )
    parser.add_argument("--version", action="version", version=f"ndtmap {__version__}")
    parser.add_argument("--debug", action="store_true", help="show the full traceback of an error")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    for command in COMMANDS:
        command.register(sub)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Run ``ndtmap`` with `argv` (default: ``sys.argv[1:]``); return the exit status."""
    parser = build_parser()
    args = parser.parse_args(argv)
    if not getattr(args, "func", None):
        parser.print_help()
        return EXIT_USAGE
    try:
        return int(args.func(args) or 0)
    except NdtmapError as exc:
        if args.debug:
            raise
        print(f"ndtmap {args.command}: error: {exc}", file=sys.stderr)
        return EXIT_USAGE
    except KeyboardInterrupt:
        print(f"ndtmap {args.command}: interrupted", file=sys.stderr)
        return EXIT_INTERRUPTED
    except BrokenPipeError:
        return EXIT_OK
    except Exception as exc:  # noqa: BLE001 - the last line of defence against tracebacks
        if args.debug:
            raise
        print(
            f"ndtmap {args.command}: internal error: {type(exc).__name__}: {exc} "
            "(this is a bug; rerun with --debug and report the output)",
            file=sys.stderr,
        )
        return EXIT_INTERNAL
