"""Area under the whole R_NX curve, K = 1..n-2, with weights 1/K (Lee, Peluffo-Ordonez & Verleysen 2015).

    AUC = sum_{K=1..n-2} R_NX(K) / K  /  sum_{K=1..n-2} 1 / K

R_NX(K) = ((n-1) Q_NX(K) - K) / (n-1-K) and Q_NX(K) is the mean over points of
``|data K-NN ∩ embedding K-NN| / K`` (Lee & Verleysen 2009), so the area is the
mean over points of a per-point area, which is what lets sampled query points
estimate it with the same interval as every other local measure.

The curve to K = n-2 needs every point's *whole* rank row in both spaces.
For one query the overlap at every K follows from the two rank rows at once:
point ``j`` is in both K-neighbourhoods exactly when ``max(rank_X(j),
rank_Y(j)) <= K``, so a histogram of those maxima and a cumulative sum give
the overlap for K = 1..n-2.  The rows are ordered by (distance, index) from
the same float64 distance rows the neighbourhood engine reads, so ties are
broken exactly as there (by index) and the query comes first; the order is a
compiled radix sort of the float32 roundings with equal roundings put in
float64 order (:func:`._kernel.full_ranks`), about five times faster here than
``numpy.argsort``, and blocks of rows are shared between two threads as in the engine.
"""

from __future__ import annotations

from collections.abc import Callable
from concurrent.futures import ThreadPoolExecutor

import numpy as np

from ._distances import DistanceRows
from ._ranks import lanes_for, one_blas_thread

#: A function with the signature and results of :func:`area_terms`.
AreaTerms = Callable[[DistanceRows, DistanceRows, np.ndarray, "np.ndarray | None"], np.ndarray]

#: Full rank rows (query points times n) computed exactly; above, query points are sampled.
FULL_RANK_ELEMENTS = 2**25
#: Fewest sampled query points when the budget above would allow fewer.
MIN_QUERIES = 100
#: Distances per block of query rows (bounds the temporary arrays, about 50 bytes each).
_BLOCK_ELEMENTS = 2**21


def area_step(n: int) -> int:
    """Query rows per block of :func:`area_terms` (a slice of whole blocks gives the same numbers)."""
    return max(1, _BLOCK_ELEMENTS // n)


def exact_affordable(n: int) -> bool:
    """Whether full rank rows of all ``n`` points fit in :data:`FULL_RANK_ELEMENTS`."""
    return n * n <= FULL_RANK_ELEMENTS


def sample_size(n: int, n_queries: int) -> int:
    """Query points sampled for ``n`` points when the exact area is not affordable."""
    return int(min(n, n_queries, max(MIN_QUERIES, FULL_RANK_ELEMENTS // n)))


def _ranks(dist: np.ndarray, rows: np.ndarray) -> np.ndarray:
    """Rank of every point in each row by (distance, index); the query gets 0."""
    from ._kernel import full_ranks  # numba loads on first use, not with the package

    out = np.empty(dist.shape, dtype=np.int32)
    full_ranks(dist, rows.astype(np.int64), out)
    return out


def data_rank_rows(data: DistanceRows) -> np.ndarray:
    """Every point's whole rank row in the data space, (n, n) int32 (query 0), for :func:`area_terms`."""
    n = data.n
    out = np.empty((n, n), dtype=np.int32)
    step = max(1, _BLOCK_ELEMENTS // n)
    for start in range(0, n, step):
        rows = np.arange(start, min(n, start + step), dtype=np.intp)
        out[rows] = _ranks(data.block(rows), rows)
    return out


def area_terms(
    data: DistanceRows,
    embedding: DistanceRows,
    queries: np.ndarray,
    data_ranks: np.ndarray | None = None,
    lanes: int | None = None,
) -> np.ndarray:
    """Per-point area under R_NX(K), K = 1..n-2, weights 1/K.

    Parameters
    ----------
    data, embedding : DistanceRows
        Distance rows of the two spaces (same ``n >= 3``).
    queries : ndarray of int
        Query points.
    data_ranks : ndarray of shape (n, n), optional
        :func:`data_rank_rows` of ``data``, made once for every embedding of it.
    lanes : int, optional
        Threads that rank blocks (default: as the engine chooses); 1 where the caller's
        threads are the parallelism (a Dask worker), since a lane limits BLAS process-wide.

    Returns
    -------
    ndarray of shape (len(queries),)
        The mean of these over all points is the area of the mean curve.
    """
    n = data.n
    big_k = np.arange(1, n - 1, dtype=np.float64)
    weight = (1.0 / big_k) / np.sum(1.0 / big_k)
    # The area is linear in the overlaps: sum_K w_K R_i(K) = sum_K c_K overlap_i(K) + c0,
    # and sum_K c_K overlap_i(K) = sum_j suffix(max rank of j), suffix(m) = sum_{K >= m} c_K.
    c = weight * (n - 1.0) / (big_k * (n - 1.0 - big_k))
    c0 = -float(np.sum(weight * big_k / (n - 1.0 - big_k)))
    suffix = np.zeros(n)
    suffix[1 : n - 1] = np.cumsum(c[::-1])[::-1]
    out = np.empty(len(queries))
    step = area_step(n)

    def block(start: int) -> None:
        rows = np.asarray(queries[start : start + step], dtype=np.intp)
        known = _ranks(data.block(rows), rows) if data_ranks is None else np.asarray(data_ranks[rows])
        both = np.maximum(known, _ranks(embedding.block(rows), rows))
        # The query (rank 0 in both) is not its own neighbour: take out its suffix(0) = 0.
        out[start : start + len(rows)] = suffix[both].sum(axis=1) + c0

    starts = range(0, len(queries), step)
    lanes = lanes_for(len(starts)) if lanes is None else max(1, min(lanes, len(starts)))
    if lanes == 1:
        for start in starts:
            block(start)
    else:
        # As in the engine: one single-threaded BLAS per lane, each lane ranks its own blocks.
        with one_blas_thread(), ThreadPoolExecutor(lanes) as pool:
            list(pool.map(block, starts))
    return out


def rnx_area(
    data: DistanceRows,
    embedding: DistanceRows,
    queries: np.ndarray,
    sampled: bool,
    n_queries: int,
    rng: np.random.Generator,
    data_ranks: np.ndarray | None = None,
    terms: AreaTerms = area_terms,
) -> tuple[np.ndarray, bool]:
    """Per-point terms of the full-range area: every point when affordable, else a sample.

    Parameters
    ----------
    data, embedding : DistanceRows
    queries : ndarray of int
        The query points of the other neighbourhood measures.
    sampled : bool
        Whether ``queries`` is a sample; then the area is estimated from it
        (or from a random part of it, as many points as :func:`sample_size` allows).
    n_queries : int
        Sample size asked for.
    rng : numpy.random.Generator
        Draws the sample when one is needed.
    data_ranks : ndarray, optional
        :func:`data_rank_rows` of ``data`` (used for the exact area).
    terms : callable, optional
        What computes the per-point terms: :func:`area_terms` (default) or a
        function with its signature and results (the cluster's, :mod:`._cluster`).

    Returns
    -------
    terms : ndarray
        One per-point area per point used; their mean is the area (or its estimate).
    estimated : bool
        The terms are a sample of the points (the caller gives the interval).
    """
    n = data.n
    if not sampled and exact_affordable(n):
        return terms(data, embedding, np.arange(n), data_ranks), False
    pool = queries if sampled else np.arange(n)
    m = sample_size(n, n_queries)
    if len(pool) > m:
        pool = np.sort(rng.choice(pool, m, replace=False))
    return terms(data, embedding, pool, None), True
