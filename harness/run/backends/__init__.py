"""Where cells run: backends behind one small protocol, found by name in a registry.

A backend takes a list of cells and yields one :class:`~harness.run.cells.CellResult`
per cell, in finishing order, and writes nothing.  Two are built in:
``local`` (a child process per cell on this machine) and ``dask`` (tasks on a
Dask cluster; needs the ``dask`` extra, imported only when chosen).  A new one
is a class with the method below, registered with :func:`register_backend`,
as joblib registers its parallel backends.
"""

from __future__ import annotations

import threading
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field
from typing import Protocol

from ...config import Scoring
from ...datasets import Dataset
from ...errors import InputError, suggest
from ..cache import EmbeddingCache
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
    """

    jobs: int = 1
    time_limit: float | None = None
    isolate: bool = True
    scheduler: str | None = None
    plugin_roots: tuple[str, ...] = field(default=())


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
        exactly one result; nothing is written.
        """
        ...


BACKENDS: dict[str, Callable[[], Backend]] = {}


def register_backend(name: str, factory: Callable[[], Backend]) -> None:
    """Make a backend available by name (``run.backend`` in a suite, ``--backend``)."""
    BACKENDS[name] = factory


def get_backend(name: str, where: str = "--backend") -> Backend:
    """The backend registered under ``name``, or a one-line error listing the others."""
    if name not in BACKENDS:
        raise InputError(
            where, f"expected one of {', '.join(BACKENDS)}, got {name!r}{suggest(name, BACKENDS)}"
        )
    return BACKENDS[name]()


def execute(
    cells: list[Cell],
    datasets: dict[str, Dataset],
    scoring: Scoring,
    execution: Execution,
    *,
    backend: str = "local",
    cache: EmbeddingCache | None = None,
    stop: threading.Event | None = None,
) -> Iterator[CellResult]:
    """Compute cells on a backend, scoring fits the cache already has instead of fitting again.

    Parameters
    ----------
    cells : list of Cell
    datasets : dict
        Dataset name to :class:`~harness.datasets.Dataset`.
    scoring : Scoring
    execution : Execution
    backend : str
        A registered backend name.
    cache : EmbeddingCache, optional
        Read here, in the caller's process: backends and workers never see it.
    stop : threading.Event, optional
        Set it to stop the run; unfinished cells come back ``interrupted``.

    Yields
    ------
    CellResult
        One per cell, in finishing order.
    """
    known = {} if cache is None else {c.key: fit for c in cells if (fit := cache.get(c)) is not None}
    return get_backend(backend).execute(cells, datasets, scoring, execution, known, stop or threading.Event())


def _local() -> Backend:
    from .local import LocalBackend

    return LocalBackend()


def _dask() -> Backend:
    from .dask import DaskBackend

    return DaskBackend()


register_backend("local", _local)
register_backend("dask", _dask)
