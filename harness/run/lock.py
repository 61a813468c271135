"""One foldbench process at a time per run folder: a lock file held while a run, resume or report works on it.

The lock is an operating-system file lock (:mod:`filelock`) on ``<folder>/.lock``,
so it is released when its process ends, however it ends; nothing stale is
left to clear by hand.  The holder writes its process id to ``<folder>/.lock.pid``
so that a refused process can say who holds the folder.
"""

from __future__ import annotations

import logging
import os
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

from filelock import FileLock, Timeout

from ..errors import InputError

log = logging.getLogger(__name__)

LOCK_NAME = ".lock"
PID_NAME = ".lock.pid"


class FolderBusy(InputError):
    """Another process holds the run folder; raised at once instead of waiting.

    Attributes
    ----------
    holder : int or None
        The process id written by the holder (None when it could not be read).
    """

    def __init__(self, folder: Path, holder: int | None) -> None:
        self.holder = holder
        who = f"foldbench process {holder}" if holder is not None else "another foldbench process"
        super().__init__(
            f"run folder {folder}",
            f"in use by {who} (lock {folder / LOCK_NAME}); wait for it to end or stop it, then try again",
        )


def holder_pid(folder: str | Path) -> int | None:
    """The process id written beside the folder's lock, or None."""
    try:
        return int((Path(folder) / PID_NAME).read_text(encoding="ascii").strip())
    except (OSError, ValueError):
        return None


@contextmanager
def folder_lock(folder: str | Path) -> Iterator[Path]:
    """Hold the run folder's lock for the life of the ``with`` block.

    Parameters
    ----------
    folder : str or Path
        An existing run folder.

    Yields
    ------
    Path
        The folder.

    Raises
    ------
    FolderBusy
        When another process holds it (no waiting).
    """
    path = Path(folder)
    lock = FileLock(path / LOCK_NAME, timeout=0)
    try:
        lock.acquire(blocking=False)
    except Timeout:
        raise FolderBusy(path, holder_pid(path)) from None
    pid_file = path / PID_NAME
    try:
        pid_file.write_text(f"{os.getpid()}\n", encoding="ascii")
        log.debug("holding the lock of %s", path)
        yield path
    finally:
        # Only the holder writes or removes the pid file, so removing it here cannot hide another's.
        pid_file.unlink(missing_ok=True)
        lock.release()
