"""Running a suite: plan cells, execute them on a backend, keep results in a run folder and a cache.

Modules: ``cells`` (Cell, CellResult, the plan), ``compute`` (one cell, pure),
``backends`` (local child processes, Dask), ``cache`` (fits shared across
runs), ``folder`` (:class:`RunFolder`, the one reader and writer of a run
folder), ``atomic`` (atomic file writes), ``manifest`` (what a run was made
with) and ``execute`` (the whole run).
"""

from .backends import Execution, execute
from .cache import EmbeddingCache, default_cache_dir
from .cells import Cell, CellResult, KnownFit, plan
from .compute import compute_cell, score_cell
from .execute import ExecutedRun, ProgressHook, RunInterrupted, execute_suite
from .folder import RunFolder

__all__ = [
    "Cell",
    "CellResult",
    "EmbeddingCache",
    "ExecutedRun",
    "Execution",
    "KnownFit",
    "ProgressHook",
    "RunFolder",
    "RunInterrupted",
    "compute_cell",
    "default_cache_dir",
    "execute",
    "execute_suite",
    "plan",
    "score_cell",
]
