"""Errors that reach the user as one line.

Every mistake in the user's input (a suite, a table, a flag) is raised as
:class:`InputError`.  The command line prints ``str(error)`` on one line and
exits with code 2; nothing else in the package prints.
"""

from __future__ import annotations

import difflib
from collections.abc import Iterable


class InputError(ValueError):
    """Bad input from the user: names where it is and what was expected.

    Parameters
    ----------
    where : str
        The place: a file, optionally followed by a path inside it
        (``suite.yaml: methods[1].grid.perplexity[2]``) or a column.
    expected : str
        What was expected there, in plain words.
    """

    def __init__(self, where: str, expected: str) -> None:
        self.where = _flat(where)
        self.expected = _flat(expected)
        super().__init__(f"{self.where}: {self.expected}" if self.where else self.expected)


def _flat(text: str) -> str:
    """Escape line breaks and other unprintable characters so a message stays on one line."""
    text = str(text)
    if text.isprintable():
        return text
    return "".join(ch if ch.isprintable() else repr(ch)[1:-1] for ch in text)


def suggest(name: str, choices: Iterable[str]) -> str:
    """Return ``" (did you mean 'x'?)"`` for the closest choice, or ``""``."""
    close = difflib.get_close_matches(str(name), sorted(map(str, choices)), n=1, cutoff=0.6)
    return f" (did you mean '{close[0]}'?)" if close else ""
