"""Draw a report's figures on two cores: a forked child draws some while this process draws the rest.

Figures are independent (each reads the finished analysis and writes its own
PNG), and drawing them is single-threaded Python and Agg work, so a second
process halves the wall time on a machine with a free core.  The child is a
``fork`` of this process (it inherits the analysis; nothing is pickled) and is
used only where that is safe: a POSIX system, at least two usable cores and no
other Python thread alive.  A child that fails, or whose files are missing, is
not trusted: its figures are drawn again here.
"""

from __future__ import annotations

import json
import logging
import os
import threading
from collections.abc import Callable, Mapping, Sequence
from pathlib import Path

log = logging.getLogger(__name__)

Drawer = Callable[[], "Path | None"]


def _cores() -> int:
    try:
        return len(os.sched_getaffinity(0))
    except AttributeError:  # not Linux
        return os.cpu_count() or 1


def can_fork() -> bool:
    """Whether a second drawing process may be forked here (see the module docstring)."""
    return hasattr(os, "fork") and _cores() >= 2 and threading.active_count() == 1


def draw_figures(drawers: Mapping[str, Drawer], in_child: Sequence[str] = ()) -> dict[str, Path | None]:
    """Run every drawer and return ``{name: path or None}``.

    Parameters
    ----------
    drawers : mapping of str to callable
        Each callable draws one figure and returns its path (``None`` when it has nothing to draw).
    in_child : sequence of str
        Names drawn by the forked child when :func:`can_fork`; the rest are drawn here.

    Returns
    -------
    dict
        One entry per drawer, in the order of ``drawers``.
    """
    away = [n for n in in_child if n in drawers]
    if not away or len(away) == len(drawers) or not can_fork():
        return {name: draw() for name, draw in drawers.items()}
    read, write = os.pipe()
    pid = os.fork()
    if pid == 0:  # the child: draw, report the paths, leave without running any cleanup of the parent's
        code = 1
        try:
            os.close(read)
            done = {}
            for name in away:
                path = drawers[name]()
                done[name] = None if path is None else str(path)
            os.write(write, json.dumps(done).encode("utf-8"))
            code = 0
        finally:
            os._exit(code)
    os.close(write)
    drawn = {name: draw() for name, draw in drawers.items() if name not in away}
    with os.fdopen(read, "rb") as pipe:
        raw = pipe.read()
    _, status = os.waitpid(pid, 0)
    theirs = _trusted(raw, status, away)
    for name in away:
        drawn[name] = theirs[name] if name in theirs else drawers[name]()
    return {name: drawn[name] for name in drawers}


def _trusted(raw: bytes, status: int, names: Sequence[str]) -> dict[str, Path | None]:
    """The child's figures that can be trusted: it exited cleanly and each file it names exists."""
    if not (os.WIFEXITED(status) and os.WEXITSTATUS(status) == 0):
        log.warning("the second drawing process failed (status %s); its figures are drawn again", status)
        return {}
    try:
        doc = json.loads(raw.decode("utf-8"))
    except (UnicodeDecodeError, json.JSONDecodeError):
        log.warning("the second drawing process sent an unreadable answer; its figures are drawn again")
        return {}
    out: dict[str, Path | None] = {}
    for name in names:
        value = doc.get(name, "missing") if isinstance(doc, dict) else "missing"
        if value is None:
            out[name] = None
        elif isinstance(value, str) and value != "missing" and Path(value).is_file():
            out[name] = Path(value)
    return out
