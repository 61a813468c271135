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

How a row is ranked without sorting it (all steps are whole-block numpy passes)
    1. The query's own distance is set to ``-inf`` (first in its row, counted
       once below every other value) and the row is rounded to float32.
       Rounding is monotone, so a smaller float32 value always means a smaller
       float64 value; only equal float32 values need the float64 numbers.
    2. Columns are grouped ``g`` at a time (strided), the minimum of each group
       is taken and the ``(K+1)``-th smallest group minimum ``t`` is found with
       a partition of ``n/g`` values.  At least ``K+1`` points lie at or below
       ``t`` (one per group), and for scattered neighbours only a few more.
    3. The candidates ``float32 <= t`` are sorted exactly by (float64 distance,
       index).  Every other point has a larger float32 value, hence a larger
       distance, so the candidates are exactly the head of the row's order: the
       ``K`` nearest neighbours and the exact rank of every candidate.
    4. A point listed by the other space that is not a candidate is counted:
       ``#(float32 < v)`` and ``#(float32 <= v)`` over the row, a compare pass
       per needed value and a byte-lane popcount.  When the two counts differ
       by exactly one (the point itself) the first count is its exact rank;
       otherwise (equal float32 values, rare outside discrete data) the
       float64 row is compared exactly.

Threads
    With two or more CPUs, two threads each compute the matrix products of
    their own block (BLAS limited to one thread inside the walk) and rank it.
    An idle multi-threaded BLAS keeps spinning for a while after each product
    and made the ranking passes that follow it about three times slower; one
    BLAS thread per lane avoids that and keeps both cores busy.
"""

from __future__ import annotations

import os
from collections.abc import Iterator
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass

import numpy as np
from threadpoolctl import threadpool_info, threadpool_limits

from ._distances import DistanceRows

#: Distances per sub-block: its float32 copy and compare masks stay in a core's L2 cache.
SUB_ELEMENTS = 2**18
#: Largest group of columns reduced to one minimum when looking for the threshold.
MAX_GROUP = 32
#: Bytes of compare masks per sub-block (bounds the values counted per pass).
MASK_BYTES = 2**22
#: Threads that each compute and rank their own blocks (numpy and BLAS release the GIL).
THREADS = max(1, min(2, os.cpu_count() or 1))


def sub_rows_for(n: int) -> int:
    """Query rows per sub-block: about :data:`SUB_ELEMENTS` distances, at least 1."""
    return max(1, SUB_ELEMENTS // n)


def mask_values_for(rows: int, n: int) -> int:
    """Needed values compared per pass so that the masks hold about :data:`MASK_BYTES`."""
    return max(1, MASK_BYTES // (rows * _padded(n)))


def _padded(n: int) -> int:
    return -(-n // 8) * 8


@dataclass
class _Head:
    """The exactly ordered head of each row of a sub-block."""

    dist: np.ndarray  # (b, n) float64, query entry set to -inf
    low: np.ndarray  # (b, n) float32 rounding of dist
    cols: np.ndarray  # (b, w) candidate columns in (distance, index) order, padded with n
    count: np.ndarray  # (b,) candidates per row (the query included, at position 0)


def _head(dist: np.ndarray, rows: np.ndarray, k: int, low: np.ndarray) -> _Head:
    b, n = dist.shape
    dist[np.arange(b), rows] = -np.inf
    with np.errstate(over="ignore"):
        np.copyto(low, dist, casting="same_kind")  # overflow to inf keeps the order
    g = max(1, min(MAX_GROUP, n // (4 * (k + 1))))
    m = n // g
    mins = low[:, : g * m].reshape(b, g, m).min(axis=1)
    if g * m < n:
        mins = np.concatenate([mins, low[:, g * m :]], axis=1)
    # Each group minimum is a distinct point, so >= k+1 points lie at or below t.
    t = np.partition(mins, k, axis=1)[:, k : k + 1]
    cand = np.flatnonzero(low <= t)
    crow = cand // n
    ccol = cand - crow * n
    count = np.bincount(crow, minlength=b)
    slot = np.arange(len(cand)) - np.repeat(np.cumsum(count) - count, count)
    width = int(count.max())
    vals = np.full((b, width), np.inf)
    cols = np.full((b, width), n, dtype=np.intp)
    vals[crow, slot] = dist.ravel()[cand]
    cols[crow, slot] = ccol
    # Candidates arrive in index order, so a stable sort by distance gives the
    # (distance, index) order of the rank rule; padding (inf, n) sorts last.
    order = np.argsort(vals, axis=1, kind="stable")
    return _Head(dist, low, np.take_along_axis(cols, order, axis=1), count)


def _count_true(mask: np.ndarray) -> np.ndarray:
    """True entries along the last axis of a bool array whose last axis is a multiple of 8."""
    words = mask.view(np.uint64)
    w = words.shape[-1]
    # Bytes of a word sum lane by lane without carry while at most 255 words are added.
    full = w // 255 * 255
    total = np.zeros(words.shape[:-1], dtype=np.int64)
    if full:
        lanes = words[..., :full].reshape(*words.shape[:-1], full // 255, 255).sum(axis=-1)
        total += lanes.view(np.uint8).reshape(*words.shape[:-1], -1).sum(axis=-1, dtype=np.int64)
    if full < w:
        lanes = words[..., full:].sum(axis=-1, dtype=np.uint64)
        total += lanes[..., None].view(np.uint8).sum(axis=-1, dtype=np.int64)
    return total


def _count_ranks(head: _Head, qrow: np.ndarray, qcol: np.ndarray, masks: np.ndarray) -> np.ndarray:
    """Exact ranks of points ``qcol`` (not candidates) for the block-local rows ``qrow``.

    ``masks`` is a bool scratch array of shape (>= b, c, padded n) whose
    columns from n on are False.
    """
    dist, low = head.dist, head.low
    b, n = dist.shape
    value = dist[qrow, qcol]
    with np.errstate(over="ignore"):
        v32 = value.astype(np.float32)
    # Lay the needed values out as (b, width), -inf in empty slots (counts 0);
    # qrow is non-decreasing.
    per_row = np.bincount(qrow, minlength=b)
    slot = np.arange(len(qrow)) - np.repeat(np.cumsum(per_row) - per_row, per_row)
    width = int(per_row.max())
    table = np.full((b, width), -np.inf, dtype=np.float32)
    table[qrow, slot] = v32
    below = np.empty((b, width), dtype=np.int64)
    upto = np.empty((b, width), dtype=np.int64)
    step = masks.shape[1]
    mask = masks[:b]
    for s in range(0, width, step):
        part = table[:, s : s + step, None]
        c = part.shape[1]
        view = mask[:, :c]
        np.less(low[:, None, :], part, out=view[:, :, :n])
        below[:, s : s + c] = _count_true(view)
        np.less_equal(low[:, None, :], part, out=view[:, :, :n])
        upto[:, s : s + c] = _count_true(view)
    lt = below[qrow, slot]
    ranks = lt.copy()  # the query (-inf) stands in for the "1 +" of the rank
    # The point itself is always in upto - below; anything more shares its
    # float32 value and is resolved with the float64 distances.
    for t in np.flatnonzero(upto[qrow, slot] - lt > 1):
        row = dist[qrow[t]]
        ranks[t] = np.count_nonzero(row < value[t]) + np.count_nonzero(row[: qcol[t]] == value[t])
    return ranks


def _cross_ranks(
    head: _Head, other: np.ndarray, exact: int, where: np.ndarray, masks: np.ndarray
) -> np.ndarray:
    """Ranks, in ``head``'s space, of the points listed in ``other`` (b, K).

    Columns ``< exact`` are exact; later columns hold ``min(rank, K + 1)``.
    ``where`` is a (b, n) int32 scratch table holding -1 everywhere; it is
    left that way on return.  ``masks``: see :func:`_count_ranks`.
    """
    b, k = other.shape
    cols = head.cols
    valid = np.arange(cols.shape[1]) < head.count[:, None]
    crow = np.broadcast_to(np.arange(b)[:, None], cols.shape)[valid]
    ccol = cols[valid]
    where[crow, ccol] = np.broadcast_to(np.arange(cols.shape[1]), cols.shape)[valid]
    orow = np.broadcast_to(np.arange(b)[:, None], other.shape)
    ranks = where[orow, other].astype(np.intp)  # position 0 is the query itself
    where[crow, ccol] = -1
    missing = ranks < 0
    ranks[missing] = k + 1  # not a candidate: beyond the K nearest
    missing[:, exact:] = False
    qrow, qpos = np.nonzero(missing)
    if len(qrow):
        ranks[qrow, qpos] = _count_ranks(head, qrow, other[qrow, qpos], masks)
    if exact < k:
        np.minimum(ranks[:, exact:], k + 1, out=ranks[:, exact:])
    return ranks


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


class _Scratch:
    """Per-thread float32 copies of a sub-block, candidate position table and compare masks."""

    def __init__(self, sub: int, n: int) -> None:
        self.low_x = np.empty((sub, n), dtype=np.float32)
        self.low_y = np.empty((sub, n), dtype=np.float32)
        self.where = np.full((sub, n), -1, dtype=np.int32)
        # Zero padding past column n lets the masks be read as whole 8-byte words.
        self.masks = np.zeros((sub, mask_values_for(sub, n), _padded(n)), dtype=bool)


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

    def _sub_block(self, dx: np.ndarray, dy: np.ndarray, part: np.ndarray, scratch: _Scratch) -> RankBlock:
        b = len(part)
        hx = _head(dx, part, self.k, scratch.low_x[:b])
        hy = _head(dy, part, self.k, scratch.low_y[:b])
        nx = hx.cols[:, 1 : self.k + 1]
        ny = hy.cols[:, 1 : self.k + 1]
        where = scratch.where[:b]
        return RankBlock(
            part,
            _cross_ranks(hx, ny, self.exact, where, scratch.masks),
            _cross_ranks(hy, nx, self.exact, where, scratch.masks),
        )

    def __iter__(self) -> Iterator[RankBlock]:
        step = self.block_rows
        starts = list(range(0, len(self.queries), step))
        rows_max = min(step, len(self.queries))
        # (threadpool_info scans the loaded libraries: only asked when there is a choice)
        if self.lanes is not None:
            lanes = max(1, min(self.lanes, len(starts)))
        elif len(starts) < 2 or THREADS < 2:
            lanes = 1
        else:
            lanes = max(1, min(THREADS, len(starts), _thread_budget()))
        workers = [_Lane(self, rows_max) for _ in range(lanes)]
        if lanes == 1:
            for start in starts:
                yield from workers[0].rank(start)
            return
        # Each lane computes its own blocks' products with a single-threaded
        # BLAS and ranks them: both cores stay busy, and no idle BLAS thread
        # spins against the ranking passes (which made them ~3x slower).
        with threadpool_limits(limits=1, user_api="blas"), ThreadPoolExecutor(lanes) as pool:
            for i in range(0, len(starts), lanes):
                futures = [
                    pool.submit(lane.rank, start) for lane, start in zip(workers, starts[i : i + lanes])
                ]
                for future in futures:
                    yield from future.result()


def _thread_budget() -> int:
    """Threads the caller allows: the BLAS limit in force (the runner sets it per cell)."""
    blas = [lib["num_threads"] for lib in threadpool_info() if lib.get("user_api") == "blas"]
    return max(blas) if blas else THREADS


class _Lane:
    """Buffers of one thread: a block's distance rows in both spaces and sub-block scratch."""

    def __init__(self, walk: RankWalk, rows_max: int) -> None:
        n = walk.data.n
        self.walk = walk
        self.sub = max(1, min(sub_rows_for(n), rows_max))
        self.scratch = _Scratch(self.sub, n)
        self.data_buf = np.empty((rows_max, n))
        self.emb_buf = np.empty((rows_max, n))

    def rank(self, start: int) -> list[RankBlock]:
        """Rank tables of the block of queries starting at position ``start``."""
        walk, sub = self.walk, self.sub
        rows = np.asarray(walk.queries[start : start + walk.block_rows], dtype=np.intp)
        dx = walk.data.block(rows, out=self.data_buf[: len(rows)])
        dy = walk.embedding.block(rows, out=self.emb_buf[: len(rows)])
        return [
            walk._sub_block(dx[s : s + sub], dy[s : s + sub], rows[s : s + sub], self.scratch)
            for s in range(0, len(rows), sub)
        ]


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
        Iterable of :class:`RankBlock`, one per sub-block of
        :func:`sub_rows_for` query points, in query order; all ranks exact
        unless narrowed with :meth:`RankWalk.exact_up_to`.
    """
    return RankWalk(data, embedding, queries, k, block_rows)
