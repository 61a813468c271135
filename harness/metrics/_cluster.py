"""One embedding's neighbourhood measures spread over the workers of a Dask cluster.

For an embedding too large for one machine's time budget, the two passes that
cost a distance product per pair of points are cut into slices of query rows
and computed on the cluster's workers:

* the neighbourhood engine (:class:`~harness.metrics._ranks.RankWalk` and
  :func:`~harness.metrics._local.collect`): trustworthiness, continuity, k-NN
  recall, MRRE, LCMC, ``rnx_auc@k`` and the co-ranking curve Q_NX / R_NX;
* the per-point terms of the full-range R_NX area
  (:func:`~harness.metrics._rnx_area.area_terms`).

Everything else (the pair-sampled global measures with their jackknife, the
label measures, the sampling of query points) costs far less and stays on the
caller's machine.

The distance rows of both spaces (and the data's whole rank rows when the
caller has them) go up once, broadcast to every worker.  Each task computes
whole engine blocks (the same ``block_rows`` and block boundaries as the local
walk, so every matrix product has the same operands and shape) and returns its
per-point terms and its summed overlaps.  The caller puts the per-point terms
back in query order and adds the overlaps, which are integer counts held in
float64 (exact in any order below 2**53), so the values are those of the local
engine, bit for bit.

``distributed`` is imported only when asked for: it is the optional ``dask``
extra.
"""

from __future__ import annotations

import logging
from collections.abc import Callable, Iterator, Sequence
from contextlib import contextmanager
from types import ModuleType
from typing import Any

import numpy as np

from ..config import MEASURE_BACKENDS
from ..errors import InputError
from ._distances import DistanceRows
from ._local import LocalTerms, collect
from ._ranks import RankWalk
from ._rnx_area import area_step, area_terms

log = logging.getLogger(__name__)

#: Seconds to wait for the scheduler before giving up.
CONNECT_TIMEOUT = 10.0
#: Tasks per worker thread: enough to even out slow and fast workers, few enough that
#: each task still holds many blocks.
TASKS_PER_THREAD = 4

MISSING_EXTRA = "backend='dask' needs the dask extra: pip install 'foldbench[dask]'"


def check_backend(backend: str, scheduler: str | None) -> None:
    """Refuse an unknown backend, or the dask backend without a scheduler address, in one line."""
    if backend not in MEASURE_BACKENDS:
        raise InputError("backend", f"one of {', '.join(MEASURE_BACKENDS)}, got {backend!r}")
    if backend == "dask" and (not isinstance(scheduler, str) or not scheduler.strip()):
        raise InputError(
            "scheduler",
            f"the address of a running Dask scheduler (such as tcp://10.0.0.5:8786) "
            f"with backend='dask', got {scheduler!r}",
        )
    if backend == "local" and scheduler is not None:
        raise InputError("scheduler", "expected only together with backend='dask'")


def _import_distributed() -> ModuleType:
    try:
        import distributed
    except ImportError:
        raise InputError("backend", MISSING_EXTRA) from None
    return distributed


@contextmanager
def connect(scheduler: str) -> Iterator[Any]:
    """A ``distributed.Client`` of the scheduler at this address, or a one-line InputError."""
    dd = _import_distributed()
    try:
        client = dd.Client(scheduler, timeout=CONNECT_TIMEOUT, set_as_default=False)
    except (OSError, TimeoutError, ValueError) as exc:
        raise InputError(
            "scheduler",
            f"expected the address of a running Dask scheduler (tcp://host:8786); "
            f"could not connect to {scheduler!r} ({type(exc).__name__}: {str(exc).splitlines()[0]})",
        ) from None
    try:
        yield client
    finally:
        client.close()


class ClusterMeasures:
    """The engine's passes over query rows, computed on a cluster's workers.

    Parameters
    ----------
    client : distributed.Client
        Connected client.
    data, embedding : DistanceRows
        Distance rows of the two spaces, sent to every worker once.
    """

    def __init__(self, client: Any, data: DistanceRows, embedding: DistanceRows) -> None:
        threads = sum(client.nthreads().values())
        if threads == 0:  # checked first: a broadcast to no worker would wait for one
            raise InputError("scheduler", f"a cluster with workers; {client.scheduler.address} has none")
        self.client = client
        self.n = data.n
        self.threads = threads
        self._rows = client.scatter([data, embedding], broadcast=True, hash=False)
        self._ranks: Any = None
        log.info("neighbourhood measures on %d worker threads of %s", threads, client.scheduler.address)

    def close(self) -> None:
        """Let the workers drop the distance rows."""
        self.client.cancel([*self._rows, *([self._ranks] if self._ranks is not None else [])])

    def _slices(self, total: int, step: int) -> list[tuple[int, int]]:
        """Cut ``total`` query positions into slices of whole blocks of ``step``, for the cluster."""
        blocks = -(-total // step)
        tasks = max(1, min(blocks, TASKS_PER_THREAD * self.threads))
        per = -(-blocks // tasks)
        return [(b * step, min(total, (b + per) * step)) for b in range(0, blocks, per)]

    def _map(self, fn: Callable[..., Any], queries: np.ndarray, step: int, *args: Any) -> list[Any]:
        futures = [
            self.client.submit(fn, *self._rows, queries[a:b], *args, pure=False)
            for a, b in self._slices(len(queries), step)
        ]
        try:
            return list(self.client.gather(futures))
        finally:
            self.client.cancel(futures)

    def local_terms(
        self, queries: np.ndarray, k: int, block_rows: int, ks: Sequence[int], k_curve: int
    ) -> LocalTerms:
        """:func:`~harness.metrics._local.collect` of the walk over ``queries``, on the workers."""
        parts = self._map(_walk_part, queries, block_rows, k, block_rows, list(ks), k_curve)
        overlap_sum = np.zeros(k_curve)
        for part in parts:
            overlap_sum += part.overlap_sum  # integer counts: exact in any order
        keys = parts[0].terms.keys()
        terms = {key: np.concatenate([p.terms[key] for p in parts]) for key in keys}
        return LocalTerms(terms, overlap_sum, sum(p.n_queries for p in parts))

    def area_terms(
        self,
        data: DistanceRows,
        embedding: DistanceRows,
        queries: np.ndarray,
        data_ranks: np.ndarray | None = None,
    ) -> np.ndarray:
        """:func:`~harness.metrics._rnx_area.area_terms` on the workers (same signature)."""
        if data_ranks is not None and self._ranks is None:
            self._ranks = self.client.scatter(data_ranks, broadcast=True, hash=False)
        ranks = self._ranks if data_ranks is not None else None
        return np.concatenate(self._map(_area_part, queries, area_step(self.n), ranks))


# ---------------------------------------------------------------- on the worker


def _walk_part(
    data: DistanceRows,
    embedding: DistanceRows,
    queries: np.ndarray,
    k: int,
    block_rows: int,
    ks: list[int],
    k_curve: int,
) -> LocalTerms:
    """The local engine on one slice of whole blocks of query rows, in this task's thread only.

    The worker's threads are the parallelism here; a walk of two lanes would
    change the process-wide BLAS limit from several task threads at once.
    """
    return collect(RankWalk(data, embedding, queries, k, block_rows, lanes=1), data.n, ks, k_curve)


def _area_part(
    data: DistanceRows, embedding: DistanceRows, queries: np.ndarray, data_ranks: np.ndarray | None
) -> np.ndarray:
    return area_terms(data, embedding, queries, data_ranks, lanes=1)
