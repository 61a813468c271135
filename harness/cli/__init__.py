"""The ``foldbench`` command line: parse, call the API, print, exit code.

Each command lives in a small module of this package that offers
``COMMANDS``, a list of :class:`~harness.cli._base.Command`; this module
assembles the parser and dispatches.  Exit codes: 0 everything finished, 1
some cells failed (or a check found a regression), 2 bad input (one line on
stderr, no traceback), 130 interrupted.
"""

from __future__ import annotations

import argparse
import logging
import os
import sys

from ..config import foldbench_version
from ..errors import InputError
from . import cache, choose, results, run, score, suites
from ._base import EXIT_FAILED, EXIT_INPUT, EXIT_INTERRUPTED, EXIT_OK, Command, Parser

#: Every command, in the order ``foldbench --help`` lists them.
COMMANDS: list[Command] = [
    *run.COMMANDS,
    *choose.COMMANDS,
    *score.COMMANDS,
    *suites.COMMANDS,
    *results.COMMANDS,
    *cache.COMMANDS,
]


def build_parser() -> argparse.ArgumentParser:
    """The whole argument parser (usage errors raise :class:`InputError`)."""
    parser = Parser(
        prog="foldbench",
        description="Benchmark low-dimensional embeddings: fit every method on every dataset across seeds, "
        "score, rank.",
    )
    parser.add_argument("--version", action="version", version=f"foldbench {foldbench_version()}")
    parser.add_argument("-v", "--verbose", action="store_true", help="log progress details to stderr")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=Parser)
    for command in COMMANDS:
        command.add_to(sub)
    return parser


def main(argv: list[str] | None = None) -> int:
    """Entry point of the ``foldbench`` command; returns the exit code."""
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
        logging.basicConfig(
            level=logging.INFO if args.verbose else logging.WARNING,
            format="%(levelname)s %(name)s: %(message)s",
        )
        if not args.command:
            parser.print_help()
            return EXIT_INPUT
        handler: Command = args.handler
        return _guarded(handler, args)
    except InputError as err:
        print(f"foldbench: error: {err}", file=sys.stderr)
        return EXIT_INPUT
    except KeyboardInterrupt:
        print("foldbench: interrupted", file=sys.stderr)
        return EXIT_INTERRUPTED
    except BrokenPipeError:
        # the reader went away (e.g. `foldbench list methods | head`): stop quietly
        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return EXIT_OK


def _guarded(handler: Command, args: argparse.Namespace) -> int:
    """Run a command; the machine failing it (disk full, read-only, out of memory) is one line, exit 1.

    A plug-in or library that calls ``sys.exit`` while a command runs is one
    line and exit 2, not a silent exit with its code.
    """
    try:
        return handler.run(args)
    except SystemExit as exc:
        print(
            f"foldbench: error: code run by '{handler.name}' (a plug-in?) called sys.exit({exc.code}); "
            "expected it to return or raise",
            file=sys.stderr,
        )
        return EXIT_INPUT
    except MemoryError:
        print(
            f"foldbench: error: '{handler.name}' ran out of memory; results already stored are kept",
            file=sys.stderr,
        )
        return EXIT_FAILED
    except (BrokenPipeError, InputError, KeyboardInterrupt):
        raise
    except OSError as exc:
        where = f"{exc.filename}: " if exc.filename else "writing results: "
        print(
            f"foldbench: error: {where}{exc.strerror or exc} (a problem of this machine, not the input); "
            "results already stored are kept",
            file=sys.stderr,
        )
        return EXIT_FAILED


__all__ = ["COMMANDS", "build_parser", "main"]
