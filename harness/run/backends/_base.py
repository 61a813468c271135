"""The protocol every backend follows and the execution settings it receives."""

from __future__ import annotations

import threading
from collections.abc import Iterator
from dataclasses import dataclass, field
from typing import Protocol

from ...config import Scoring
from ...datasets import Dataset
from ..cells import Cell, CellResult, KnownFit


@dataclass(frozen=True)
class Execution:
    """How to execute cells.

    Attributes
    ----------
    jobs : int
        Cells computed at the same time.
    time_limit : float or None
        Seconds a cell may take (fit and scoring) before it is stopped.
    isolate : bool
        Run each cell in a child process (needed for time limits and crash isolation).
    scheduler : str or None
        Address of a Dask scheduler (dask backend only; none starts a local cluster).
    plugin_roots : tuple of str
        Folders plug-in methods may be imported from (the suite's).
    log_dir : str or None
        Folder for each cell's captured output (``<key>.log``, written by the
        backend in the caller's process); none: the output is not kept.
    """

    jobs: int = 1
    time_limit: float | None = None
    isolate: bool = True
    scheduler: str | None = None
    plugin_roots: tuple[str, ...] = field(default=())
    log_dir: str | None = None


class Backend(Protocol):
    """What every backend provides."""

    def execute(
        self,
        cells: list[Cell],
        datasets: dict[str, Dataset],
        scoring: Scoring,
        execution: Execution,
        known: dict[str, KnownFit],
        stop: threading.Event,
    ) -> Iterator[CellResult]:
        """Compute ``cells`` and yield each result as soon as it is ready.

        ``known`` maps cell keys to earlier fits (from the cache) that need only
        scoring.  When ``stop`` is set, running cells are stopped and the rest
        are not started; they come back ``interrupted``.  Every cell ends with
        exactly one result; nothing is written but the cells' output, into
        ``execution.log_dir``.  Closing the iterator early stops running cells.
        """
        ...
