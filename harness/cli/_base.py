"""What every command module shares: exit codes, the one-line-error parser, the command record."""

from __future__ import annotations

import argparse
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any, NoReturn

from ..errors import InputError

EXIT_OK, EXIT_FAILED, EXIT_INPUT, EXIT_INTERRUPTED = 0, 1, 2, 130


class Parser(argparse.ArgumentParser):
    """argparse with usage errors as one line and exit code 2."""

    def error(self, message: str) -> NoReturn:
        raise InputError(self.prog, message)


@dataclass(frozen=True)
class Command:
    """One ``foldbench`` command: its name, its help line, its arguments and what it does.

    Attributes
    ----------
    name : str
        The word after ``foldbench``.
    help : str
        One line for ``foldbench --help``.
    arguments : callable
        ``arguments(parser)`` adds the command's arguments.
    handler : callable
        ``handler(args) -> exit code``.
    description : str
        Longer text for ``foldbench <name> --help`` (default: the help line).
    """

    name: str
    help: str
    arguments: Callable[[argparse.ArgumentParser], None]
    handler: Callable[[argparse.Namespace], int]
    description: str = ""

    def add_to(self, sub: Any) -> None:
        """Add this command to an ``add_subparsers`` object."""
        parser = sub.add_parser(self.name, help=self.help, description=self.description or self.help)
        self.arguments(parser)
        parser.set_defaults(handler=self)

    def run(self, args: argparse.Namespace) -> int:
        """Run the command; returns its exit code."""
        return self.handler(args)


def positive_int(value: int | None, flag: str) -> None:
    """Refuse a count below 1 (``--jobs 0``)."""
    if value is not None and value < 1:
        raise InputError(flag, f"expected an integer >= 1, got {value}")
