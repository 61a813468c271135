"""What every command module shares: exit codes, the one-line-error parser, the command record."""

from __future__ import annotations

import argparse
import os
import tempfile
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
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


#: Folders of the running system, never a place for results.
_SYSTEM_ROOTS = (Path("/proc"), Path("/sys"), Path("/dev"))


def writable_folders(*folders: tuple[str | Path, str, bool]) -> None:
    """Check, before any work, that each ``(path, flag, create)`` is a folder the command can write in.

    First every path is checked for what it is (so a bad one is refused before
    any other folder is created), then each missing one is created when
    ``create`` allows and an empty probe file is written and removed inside
    it.  Nothing is written anywhere else.

    Raises
    ------
    InputError
        A file, a device or a system path (``/dev/null``, ``/proc/self``), a
        missing folder when ``create`` is false, or a folder that cannot be
        written (read-only, no permission, ...).
    """
    for path, flag, create in folders:
        _folder_kind(Path(path), flag, create)
    for path, flag, _create in folders:
        p = Path(path)
        try:
            p.mkdir(parents=True, exist_ok=True)
            fd, probe = tempfile.mkstemp(prefix=".foldbench-probe-", dir=p)
            os.close(fd)
            os.unlink(probe)
        except OSError as exc:
            problem = exc.strerror or str(exc)
            raise InputError(flag, f"expected a folder it can write in, {p} is not ({problem})") from None


def _folder_kind(p: Path, flag: str, create: bool) -> None:
    real = p.resolve()
    if any(real == root or root in real.parents for root in _SYSTEM_ROOTS):
        raise InputError(flag, f"expected a folder on disk, got {p}, a path of the running system ({real})")
    if p.exists() and not p.is_dir():
        kind = "a file" if p.is_file() else "not a folder (a device or other special file)"
        raise InputError(flag, f"expected a folder, but {p} is {kind}")
    if not p.exists() and not create:
        raise InputError(flag, f"expected an existing folder, {p} does not exist")


def writable_folder(path: str | Path, flag: str, *, create: bool = True) -> Path:
    """:func:`writable_folders` for one folder; returns it."""
    writable_folders((path, flag, create))
    return Path(path)
