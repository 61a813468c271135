"""Processes that end with the run that started them, however the run ends.

Two guards, so that one covers the other: on Linux the kernel kills a process
whose parent ends (``prctl(PR_SET_PDEATHSIG)``), and a watchdog thread ends a
cell when a pipe from the main process reaches end-of-file, which happens
when the main process is gone, even by SIGKILL.  A cell leads a process group
of its own, so whatever it started ends with it.
"""

from __future__ import annotations

import contextlib
import ctypes
import os
import signal
import sys
import threading
from multiprocessing.connection import Connection

#: ``PR_SET_PDEATHSIG`` from ``<linux/prctl.h>``.
_PR_SET_PDEATHSIG = 1


def die_with_parent() -> bool:
    """Ask the kernel to SIGKILL this process when its parent thread ends (Linux only).

    Returns
    -------
    bool
        Whether the request was made.
    """
    if not sys.platform.startswith("linux"):
        return False
    try:
        libc = ctypes.CDLL(None, use_errno=True)
        return int(libc.prctl(_PR_SET_PDEATHSIG, int(signal.SIGKILL), 0, 0, 0)) == 0
    except (OSError, AttributeError):
        return False


def lead_own_group() -> bool:
    """Make this process the leader of a new process group (so its whole group can be killed)."""
    try:
        os.setpgid(0, 0)
    except OSError:
        return False
    return True


def end_with(alive: Connection) -> threading.Thread:
    """Start a daemon thread that kills this process's group when ``alive`` reaches end-of-file.

    The other end of ``alive`` stays open in the main process only, so the
    end-of-file comes when the main process ends or lets the cell go.
    """

    def watch() -> None:
        with contextlib.suppress(OSError, EOFError):
            alive.poll(None)
        try:
            if os.getpgid(0) == os.getpid():
                os.killpg(os.getpid(), signal.SIGKILL)
        finally:
            os._exit(1)

    thread = threading.Thread(target=watch, name="foldbench-parent-watch", daemon=True)
    thread.start()
    return thread


def kill_group(pid: int | None) -> None:
    """SIGKILL the process group led by ``pid``, if there is one."""
    if pid is None:
        return
    with contextlib.suppress(OSError):
        os.killpg(pid, signal.SIGKILL)
