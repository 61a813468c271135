"""What a cell says while it runs: its output kept to a size, its warnings counted and capped.

Both backends use these: a cell's printed output goes to ``<log_dir>/<key>.log``
(at most :data:`LOG_LIMIT` bytes, with a note when cut), and its record keeps
at most :data:`MAX_WARNINGS` distinct warnings, each with how often it came.
"""

from __future__ import annotations

import logging
from pathlib import Path

from .. import atomic

#: Bytes of a cell's output kept in its log; the rest is counted and dropped.
LOG_LIMIT = 1 << 20
#: Distinct warnings kept in a cell's record.
MAX_WARNINGS = 20
#: Characters kept of one warning.
WARNING_WIDTH = 300


def cut_note(dropped: int) -> bytes:
    """The line that ends a log cut at :data:`LOG_LIMIT`."""
    return f"\n[foldbench: output cut at {LOG_LIMIT} bytes; {dropped} more bytes were dropped]\n".encode()


def log_path(log_dir: str | None, key: str) -> Path | None:
    """Where the output of the cell with this key goes (None: not kept)."""
    return None if log_dir is None else Path(log_dir) / f"{key}.log"


class CappedText:
    """A text sink that keeps the first :data:`LOG_LIMIT` bytes written and counts the rest."""

    def __init__(self, limit: int = LOG_LIMIT) -> None:
        self.limit = limit
        self.parts: list[bytes] = []
        self.kept = 0
        self.dropped = 0

    def write(self, text: str) -> int:
        """Keep what fits; returns ``len(text)`` as a stream does."""
        self.add(text.encode("utf-8", "replace"))
        return len(text)

    def add(self, data: bytes) -> None:
        """Keep what fits of raw bytes."""
        room = max(0, self.limit - self.kept)
        if room:
            self.parts.append(data[:room])
            self.kept += min(room, len(data))
        self.dropped += max(0, len(data) - room)

    def getvalue(self) -> bytes:
        """Everything kept, with the cut note when something was dropped."""
        return b"".join(self.parts) + (cut_note(self.dropped) if self.dropped else b"")


def write_log(log_dir: str | None, key: str, data: bytes) -> None:
    """Write (or, with no output, remove an earlier) log of a cell."""
    path = log_path(log_dir, key)
    if path is None:
        return
    if data:
        atomic.write_bytes(path, data)
    else:
        path.unlink(missing_ok=True)


class WarningTally(logging.Handler):
    """Counts the warnings logged while a cell runs, keeping :data:`MAX_WARNINGS` distinct ones.

    Parameters
    ----------
    thread_name : str, optional
        Count only records of this thread (a Dask worker runs other code beside the cell).
    """

    def __init__(self, thread_name: str | None = None) -> None:
        super().__init__(logging.WARNING)
        self.thread_name = thread_name
        self.counts: dict[str, int] = {}
        self.dropped = 0

    def emit(self, record: logging.LogRecord) -> None:
        if self.thread_name is not None and record.threadName != self.thread_name:
            return
        line = " ".join(record.getMessage().split())[:WARNING_WIDTH]
        if line in self.counts:
            self.counts[line] += 1
        elif len(self.counts) < MAX_WARNINGS:
            self.counts[line] = 1
        else:
            self.dropped += 1

    def lines(self) -> tuple[str, ...]:
        """The kept warnings (``... (N times)`` when repeated) and a line counting the rest."""
        kept = [line if n == 1 else f"{line} ({n} times)" for line, n in self.counts.items()]
        if self.dropped:
            kept.append(
                f"{self.dropped} more warnings beyond the first {MAX_WARNINGS} distinct ones "
                "are not kept here (the cell's log has them all)"
            )
        return tuple(kept)
