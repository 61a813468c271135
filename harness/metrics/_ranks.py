"""Neighbourhood engine: k nearest neighbours in two spaces and the exact ranks between them.

For every query point ``i`` the engine returns, in one pass over blocks of
distance rows,

* its ``K`` nearest neighbours in the data and in the embedding, and
* the rank, in the *other* space, of each of those neighbours.

Every neighbourhood measure (trustworthiness, continuity, recall, MRRE, Q_NX,
R_NX, LCMC) for every ``k <= K`` is a function of these two ``(n, K)`` rank
tables, so nothing is recomputed per measure or per ``k``.

Rank rule (ties)
    The rank of ``j`` for query ``i`` is ``1 +`` the number of points ``l != i``
    that come before ``j`` in the order *(distance to i, index)*: closer
    points first, equal distances broken by the smaller index.  The query point
    itself is never its own neighbour, even when duplicates sit at distance 0.

How a row is ranked without sorting it
    The row's values are mapped into ``nb`` equal-width buckets on
    ``[0, row maximum]`` by a monotone map (multiply, add, clip, truncate), and
    a histogram of the buckets gives, for any value, the exact number of
    points in lower buckets.  The ``K`` nearest neighbours are the points in
    the buckets up to the one holding the ``(K+1)``-th smallest value,
    ordered exactly.  The rank of a needed value adds the exact count of the
    few points sharing its bucket.  All of it is a handful of vectorised passes
    over the block, against ``n log n`` per row for a full sort.
"""
from __future__ import annotations

from collections.abc import Iterator
from dataclasses import dataclass

import numpy as np

from ._distances import DistanceRows


@dataclass
class _BucketedRows:
    """One block of distance rows with its bucket histogram and neighbour list."""

    dist: np.ndarray        # (b, n) distances used for every decision of these rows
    bucket: np.ndarray      # (b, n) bucket id, offset by row * n_buckets (globally increasing)
    cum: np.ndarray         # (b * n_buckets,) points in buckets <= this one, per row
    n_buckets: int
    neighbours: np.ndarray  # (b, K) indices, nearest first, query point excluded


#: Query rows per pass of the bucket work (cache-sized; see :func:`rank_blocks`).
SUB_ROWS = 32
#: Distances per sub-block that keep its bucket tables cache-friendly.
SUB_ELEMENTS = 2**20


def buckets_per_row(n: int) -> int:
    """Number of histogram buckets per distance row (the row length)."""
    return n


def sub_rows_for(n: int) -> int:
    """Rows per sub-block: about a million distances, at most :data:`SUB_ROWS`."""
    return max(1, min(SUB_ROWS, SUB_ELEMENTS // n))


def _bucketise(dist: np.ndarray, rows: np.ndarray, k: int, n_buckets: int,
               scratch: np.ndarray, bucket_out: np.ndarray) -> _BucketedRows:
    b, n = dist.shape
    # The query point gets distance -1: below every real distance, so it sits
    # first in its row and in bucket 0, and is counted exactly once below
    # every needed value (subtracted in _count_ranks).
    dist[np.arange(b), rows] = -1.0
    top = dist.max(axis=1)
    scale = np.zeros(b)
    np.divide(float(n_buckets), top, out=scale, where=top > 0)
    offset = np.arange(b, dtype=np.float64) * n_buckets
    # Each step is monotone non-decreasing in the distance, so a lower bucket
    # always means a strictly smaller distance; equal buckets are resolved exactly.
    t = np.multiply(dist, scale[:, None], out=scratch[:b])
    t += offset[:, None]
    np.clip(t, offset[:, None], (offset + (n_buckets - 1))[:, None], out=t)
    bucket = bucket_out[:b]
    np.copyto(bucket, t, casting="unsafe")
    cum = np.bincount(bucket.ravel(), minlength=b * n_buckets).reshape(b, n_buckets)
    np.cumsum(cum, axis=1, out=cum)

    # Bucket holding the (k+1)-th smallest value of each row (the query point
    # is the smallest value, so k+1 values give the k nearest other points).
    last = np.array([np.searchsorted(row, k + 1) for row in cum])
    limit = (np.arange(b) * n_buckets + last)[:, None]
    cand = np.flatnonzero(bucket <= limit)
    crow = cand // n
    ccol = cand - crow * n
    cval = dist.ravel()[cand]
    per_row = np.bincount(crow, minlength=b)
    slot = np.arange(len(cand)) - (np.cumsum(per_row) - per_row)[crow]
    width = int(per_row.max())
    vals = np.full((b, width), np.inf)
    cols = np.full((b, width), n, dtype=np.intp)
    vals[crow, slot] = cval
    cols[crow, slot] = ccol
    # Candidates of a row arrive in index order, so a stable sort by distance
    # yields the (distance, index) order of the rank rule.
    order = np.argsort(vals, axis=1, kind="stable")[:, 1:k + 1]
    neighbours = np.take_along_axis(cols, order, axis=1)
    return _BucketedRows(dist, bucket, cum.ravel(), n_buckets, neighbours)


def _count_ranks(view: _BucketedRows, rows: np.ndarray, qrow: np.ndarray,
                 qcol: np.ndarray) -> np.ndarray:
    """Exact ranks of points ``qcol`` for the block-local query rows ``qrow``."""
    if len(qrow) == 0:
        return np.zeros(0, dtype=np.intp)
    dist, bucket, cum, nb = view.dist, view.bucket, view.cum, view.n_buckets
    b, n = dist.shape
    flat = qrow * n + qcol
    qval = dist.ravel()[flat]
    qbucket = bucket.ravel()[flat]
    # Points in lower buckets of the same row (the query point among them,
    # unless it shares bucket 0 with the needed value and is counted below).
    lower = np.where(qbucket - qrow * nb > 0, cum[qbucket - 1], 0)

    # Points sharing a bucket with some needed value are compared exactly.
    flag = np.zeros(b * nb, dtype=bool)
    flag[qbucket] = True
    hit = np.flatnonzero(flag[bucket])
    hcol = hit % n
    hval = dist.ravel()[hit]
    hbucket = bucket.ravel()[hit]

    qorder = np.argsort(qbucket, kind="stable")
    uniq, first, count = np.unique(qbucket[qorder], return_index=True, return_counts=True)
    first_of = np.empty(b * nb, dtype=np.intp)
    count_of = np.empty(b * nb, dtype=np.intp)
    first_of[uniq] = first
    count_of[uniq] = count
    # Pair every hit with every needed value in its bucket (usually one).
    hcount = count_of[hbucket]
    pair_hit = np.repeat(np.arange(len(hit)), hcount)
    within = np.arange(len(pair_hit)) - np.repeat(np.cumsum(hcount) - hcount, hcount)
    pair_q = qorder[first_of[hbucket][pair_hit] + within]
    hv = hval[pair_hit]
    qv = qval[pair_q]
    before = (hv < qv) | ((hv == qv) & (hcol[pair_hit] < qcol[pair_q]))
    same = np.bincount(pair_q, weights=before, minlength=len(qrow)).astype(np.intp)
    return lower + same  # 1 + points before it, minus the query point


def _cross_ranks(view: _BucketedRows, rows: np.ndarray, other: np.ndarray) -> np.ndarray:
    """Ranks, in ``view``'s space, of the points listed in ``other`` (b, K)."""
    own = view.neighbours
    b, k = own.shape
    n = view.dist.shape[1]
    row_base = (np.arange(b) * n)[:, None]
    own_key = (own + row_base).ravel()
    order = np.argsort(own_key)
    sorted_key = own_key[order]
    other_key = (other + row_base).ravel()
    at = np.minimum(np.searchsorted(sorted_key, other_key), len(sorted_key) - 1)
    found = sorted_key[at] == other_key
    ranks = np.empty(b * k, dtype=np.intp)
    ranks[found] = order[at[found]] % k + 1
    missing = np.flatnonzero(~found)
    ranks[missing] = _count_ranks(view, rows, missing // k, other.ravel()[missing])
    return ranks.reshape(b, k)


@dataclass
class RankBlock:
    """Rank tables of one block of query points.

    Attributes
    ----------
    rows : ndarray of int, shape (b,)
        Query point indices.
    data_rank_of_embedding_nn : ndarray of int, shape (b, K)
        ``[r, p]`` is the data-space rank of the ``p+1``-th embedding neighbour.
    embedding_rank_of_data_nn : ndarray of int, shape (b, K)
        ``[r, p]`` is the embedding rank of the ``p+1``-th data neighbour.
    """

    rows: np.ndarray
    data_rank_of_embedding_nn: np.ndarray
    embedding_rank_of_data_nn: np.ndarray


def rank_blocks(data: DistanceRows, embedding: DistanceRows, queries: np.ndarray, k: int,
                block_rows: int) -> Iterator[RankBlock]:
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

    Yields
    ------
    RankBlock
        One per sub-block of :func:`sub_rows_for` query points; the bucket
        work runs on sub-blocks so that its passes stay in cache.
    """
    n = data.n
    nb = buckets_per_row(n)
    rows_max = min(block_rows, len(queries))
    sub = max(1, min(sub_rows_for(n), rows_max))
    data_buf = np.empty((rows_max, n))
    emb_buf = np.empty((rows_max, n))
    scratch = np.empty((sub, n))
    data_bucket = np.empty((sub, n), dtype=np.intp)
    emb_bucket = np.empty((sub, n), dtype=np.intp)
    for start in range(0, len(queries), block_rows):
        rows = np.asarray(queries[start:start + block_rows], dtype=np.intp)
        data_rows = data.block(rows, out=data_buf[:len(rows)])
        emb_rows = embedding.block(rows, out=emb_buf[:len(rows)])
        for s in range(0, len(rows), sub):
            part = rows[s:s + sub]
            data_view = _bucketise(data_rows[s:s + sub], part, k, nb, scratch, data_bucket)
            emb_view = _bucketise(emb_rows[s:s + sub], part, k, nb, scratch, emb_bucket)
            yield RankBlock(part,
                            _cross_ranks(data_view, part, emb_view.neighbours),
                            _cross_ranks(emb_view, part, data_view.neighbours))
