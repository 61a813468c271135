"""Neighbourhood engine: k nearest neighbours in two spaces and the exact ranks between them.

For every query point ``i`` the engine returns, in one pass over blocks of
distance rows,

* its ``K`` nearest neighbours in the data and in the embedding, and
* the rank, in the *other* space, of each of those neighbours.

Every neighbourhood measure (trustworthiness, continuity, recall, MRRE, Q_NX,
R_NX, LCMC) for every ``k <= K`` is a function of these two ``(n, K)`` rank
tables, so nothing is recomputed per measure or per ``k``.  The measures need
exact ranks only in the first ``max(ks)`` columns; further columns only feed
the co-ranking curve, which needs to know whether a rank is ``<= K``.  A walk
can therefore be told (:meth:`RankWalk.exact_up_to`) to store ``min(rank, K+1)``
beyond a given column, which saves counting far-away ranks.

Rank rule (ties)
    The rank of ``j`` for query ``i`` is ``1 +`` the number of points ``l != i``
    that come before ``j`` in the order *(distance to i, index)*: closer
    points first, equal distances broken by the smaller index.  The query point
    itself is never its own neighbour, even when duplicates sit at distance 0.

How a row is ranked without sorting it
    One compiled pass per row (:mod:`._kernel`): the query's distance is set
    to ``-inf``; the ``(K+1)``-th smallest of the minima of strided groups of
    columns bounds a short list of candidates that holds the row's head; the
    candidates are sorted exactly by (distance, index), which gives the ``K``
    nearest neighbours and the exact rank of every candidate; a neighbour of
    the other space that is not a candidate is given ``K + 1`` (when only
    ``min(rank, K+1)`` is asked) or its exact rank, counted over the row in
    branch-free sweeps of four values at a time.

Threads
    With two or more CPUs, two threads each compute the matrix products of
    their own block (BLAS limited to one thread inside the walk) and rank it.
    An idle multi-threaded BLAS keeps spinning for a while after each product
    and made the ranking passes that follow it about three times slower; one
    BLAS thread per lane avoids that and keeps both cores busy.
"""

from __future__ import annotations

import functools
import os
import queue
import sys
from collections import deque
from collections.abc import Iterator
from concurrent.futures import Future, ThreadPoolExecutor
from dataclasses import dataclass
from typing import Any

import numpy as np
from threadpoolctl import ThreadpoolController

from ._distances import DistanceRows

#: Threads that each compute and rank their own blocks (numpy, BLAS and the kernel release the GIL).
THREADS = max(1, min(2, os.cpu_count() or 1))


@dataclass
class RankBlock:
    """Rank tables of one block of query points.

    Attributes
    ----------
    rows : ndarray of int, shape (b,)
        Query point indices.
    data_rank_of_embedding_nn : ndarray of int, shape (b, K)
        ``[r, p]`` is the data-space rank of the ``p+1``-th embedding neighbour
        (``min(rank, K+1)`` from the walk's ``exact`` column on).
    embedding_rank_of_data_nn : ndarray of int, shape (b, K)
        ``[r, p]`` is the embedding rank of the ``p+1``-th data neighbour
        (same convention).
    """

    rows: np.ndarray
    data_rank_of_embedding_nn: np.ndarray
    embedding_rank_of_data_nn: np.ndarray


class RankWalk:
    """Iterable over :class:`RankBlock` for the query points, block by block.

    Parameters
    ----------
    data, embedding : DistanceRows
        Distance rows of the two spaces (same ``n``).
    queries : ndarray of int
        Query point indices (all points for exact measures, a sample otherwise).
    k : int
        Neighbourhood size ``K``; ``1 <= K <= n - 2``.
    block_rows : int
        Query points per matrix product (see :mod:`harness.metrics._memory`).
    exact : int, optional
        Columns of the rank tables that hold exact ranks; the others hold
        ``min(rank, K + 1)``.  Default ``K`` (all exact).
    lanes : int, optional
        Threads that compute and rank blocks; default: up to :data:`THREADS`
        within the BLAS limit in force.  One lane never touches the process's
        BLAS settings (what a task on a Dask worker thread needs: the limit is
        process-wide, and threads changing it at once leave it wrong).
    """

    def __init__(
        self,
        data: DistanceRows,
        embedding: DistanceRows,
        queries: np.ndarray,
        k: int,
        block_rows: int,
        exact: int | None = None,
        lanes: int | None = None,
    ) -> None:
        self.data, self.embedding, self.queries = data, embedding, queries
        self.k, self.block_rows = k, block_rows
        self.exact = k if exact is None else max(0, min(k, exact))
        self.lanes = lanes

    def exact_up_to(self, columns: int) -> RankWalk:
        """The same walk with exact ranks only in the first ``columns`` columns."""
        return RankWalk(self.data, self.embedding, self.queries, self.k, self.block_rows, columns, self.lanes)

    def __iter__(self) -> Iterator[RankBlock]:
        step = self.block_rows
        starts = list(range(0, len(self.queries), step))
        rows_max = min(step, len(self.queries))
        lanes = max(1, min(self.lanes, len(starts))) if self.lanes is not None else lanes_for(len(starts))
        workers = [_Lane(self, rows_max) for _ in range(lanes)]
        if lanes == 1:
            for start in starts:
                yield from workers[0].rank(start)
            return
        # Each lane computes its own blocks' products with a single-threaded
        # BLAS and ranks them: both cores stay busy, and no idle BLAS thread
        # spins against the ranking passes (which made them ~3x slower).
        # A block takes whichever lane is free (no lane waits for the other's
        # block to finish); blocks are yielded in order, at most two per lane ahead.
        free: queue.SimpleQueue[_Lane] = queue.SimpleQueue()
        for lane in workers:
            free.put(lane)

        def run(start: int) -> list[RankBlock]:
            lane = free.get()
            try:
                return lane.rank(start)
            finally:
                free.put(lane)

        with one_blas_thread(), ThreadPoolExecutor(lanes) as pool:
            ahead: deque[Future[list[RankBlock]]] = deque()
            for start in starts:
                ahead.append(pool.submit(run, start))
                if len(ahead) > 2 * lanes:
                    yield from ahead.popleft().result()
            while ahead:
                yield from ahead.popleft().result()


def lanes_for(blocks: int) -> int:
    """Threads that rank ``blocks`` blocks: up to :data:`THREADS`, within the caller's BLAS limit."""
    return 1 if blocks < 2 or THREADS < 2 else max(1, min(THREADS, blocks, _thread_budget()))


def one_blas_thread() -> Any:
    """Context limiting BLAS to one thread (a lane's setting), from :func:`_controller`."""
    return _controller(len(sys.modules)).limit(limits=1, user_api="blas")


@functools.lru_cache(maxsize=1)
def _controller(modules: int) -> ThreadpoolController:
    # Scanning the loaded libraries takes ~20 ms once scientific packages are loaded, a
    # good part of a small evaluation; it is redone when modules were imported since
    # (``modules``), as a new module may bring its own BLAS.
    return ThreadpoolController()


def _thread_budget() -> int:
    """Threads the caller allows: the BLAS limit in force (the runner sets it per cell)."""
    info = _controller(len(sys.modules)).info()
    blas = [lib["num_threads"] for lib in info if lib.get("user_api") == "blas"]
    return max(blas) if blas else THREADS


class _Lane:
    """Buffers of one thread: a block's distance rows in both spaces."""

    def __init__(self, walk: RankWalk, rows_max: int) -> None:
        n = walk.data.n
        self.walk = walk
        self.data_buf = np.empty((rows_max, n))
        self.emb_buf = np.empty((rows_max, n))

    def rank(self, start: int) -> list[RankBlock]:
        """Rank tables of the block of queries starting at position ``start``."""
        walk = self.walk
        rows = np.asarray(walk.queries[start : start + walk.block_rows], dtype=np.intp)
        dx = walk.data.block(rows, out=self.data_buf[: len(rows)])
        dy = walk.embedding.block(rows, out=self.emb_buf[: len(rows)])
        from ._kernel import rank_rows  # numba loads on first use, not with the package

        out_x = np.empty((len(rows), walk.k), dtype=np.int64)
        out_y = np.empty((len(rows), walk.k), dtype=np.int64)
        rank_rows(dx, dy, rows.astype(np.int64), walk.k, walk.exact, out_x, out_y)
        return [RankBlock(rows, out_x, out_y)]


def rank_blocks(
    data: DistanceRows, embedding: DistanceRows, queries: np.ndarray, k: int, block_rows: int
) -> RankWalk:
    """Walk the query points in blocks and yield their cross-space rank tables.

    Parameters
    ----------
    data, embedding : DistanceRows
        Distance rows of the two spaces (same ``n``).
    queries : ndarray of int
        Query point indices (all points for exact measures, a sample otherwise).
    k : int
        Neighbourhood size ``K``; ``1 <= K <= n - 2``.
    block_rows : int
        Query points per matrix product (see :mod:`harness.metrics._memory`).

    Returns
    -------
    RankWalk
        Iterable of :class:`RankBlock`, one per block of ``block_rows``
        query points, in query order; all ranks exact
        unless narrowed with :meth:`RankWalk.exact_up_to`.
    """
    return RankWalk(data, embedding, queries, k, block_rows)
