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

from ...config import BACKEND_NAMES, Scoring
from ...datasets import Dataset
from ...errors import InputError, suggest
from ..cache import EmbeddingCache
from ..cells import Cell, CellResult
from ._base import Backend, Execution

__all__ = ["BACKENDS", "Backend", "Execution", "execute", "get_backend", "register_backend"]


BACKENDS: dict[str, Callable[[], Backend]] = {}


def register_backend(name: str, factory: Callable[[], Backend]) -> None:
    """Make a backend available by name (``run.backend`` in a suite, ``--backend``)."""
    BACKENDS[name] = factory
    if name not in BACKEND_NAMES:
        BACKEND_NAMES.append(name)


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
