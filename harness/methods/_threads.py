"""The number of threads a cell may use, set by the backend and read by methods with their own pools.

BLAS and OpenMP pools are capped by :func:`threadpoolctl.threadpool_limits` in
the backend; libraries that start pools of their own (numba's threading layer,
``n_jobs`` arguments) ask :func:`cell_threads` instead, so parallel cells do
not oversubscribe the cores.
"""

from __future__ import annotations

import os
from collections.abc import Iterator
from contextlib import contextmanager
from typing import Any

_limit: list[int] = []


def cell_threads() -> int:
    """Threads the current cell may use (all cores outside a backend)."""
    return _limit[-1] if _limit else max(1, os.cpu_count() or 1)


@contextmanager
def thread_budget(threads: int) -> Iterator[None]:
    """Within the block, :func:`cell_threads` returns ``threads``."""
    _limit.append(max(1, int(threads)))
    try:
        yield
    finally:
        _limit.pop()


def limit_numba_threads() -> None:
    """Cap numba's parallel loops at the cell's budget (a no-op when numba is absent)."""
    try:
        import numba
    except ImportError:
        return
    config: Any = numba.config  # its settings are set at import, not declared
    numba.set_num_threads(min(cell_threads(), int(config.NUMBA_NUM_THREADS)))
