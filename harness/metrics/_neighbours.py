"""k nearest neighbours under the neighbourhood engine's rule, for the measures that need lists.

Rule (the same as :mod:`._ranks`): neighbours come in the order *(distance,
index)*: closer points first, equal distances broken by the smaller index; a
query point is never its own neighbour, even when duplicates sit at distance 0.
Distances are the engine's own float64 rows of standardised coordinates
(:mod:`._standard`, :class:`._distances.DistanceRows`), so a neighbour list
here is exactly the head of the engine's rank row, and two isometric copies of
integer-valued points (where the arithmetic is exact) get identical lists.

scikit-learn's neighbour search breaks ties in whatever order its tree or brute
search visits the points, which depends on the coordinates' layout; that is why
k-NN overlap and k-NN accuracy use this instead.
"""

from __future__ import annotations

import numpy as np

from ._distances import DistanceRows
from ._standard import standard_points

#: Distances per block of query rows.
_BLOCK_ELEMENTS = 2**22


def nearest_neighbours(
    points: np.ndarray, k: int, queries: np.ndarray | None = None, among: np.ndarray | None = None
) -> np.ndarray:
    """The ``k`` nearest neighbours of query points by (distance, index).

    Parameters
    ----------
    points : ndarray of shape (n, d)
        Coordinates (any offset or scale; they are standardised first).
    k : int
        Neighbours per query point, ``1 <= k`` and at most the number of candidates.
    queries : ndarray of int, optional
        Query points; all points by default.
    among : ndarray of bool of shape (n,), optional
        Points that may be neighbours (all others by default); the query is
        never its own neighbour.

    Returns
    -------
    ndarray of int, shape (len(queries), k)
        Neighbour indices, nearest first.
    """
    from ._kernel import head_rows  # numba loads on first use, not with the package

    n = points.shape[0]
    rows = DistanceRows(points=standard_points(np.asarray(points, dtype=np.float64)))
    idx = np.arange(n) if queries is None else np.asarray(queries, dtype=np.intp)
    out = np.empty((len(idx), k), dtype=np.int64)
    step = max(1, _BLOCK_ELEMENTS // n)
    for start in range(0, len(idx), step):
        part = idx[start : start + step]
        dist = rows.block(part)
        if among is not None:
            dist[:, ~among] = np.inf
        head_rows(dist, part.astype(np.int64), k, out[start : start + len(part)])
    return out.astype(np.intp, copy=False)


def knn_overlap(a: np.ndarray, b: np.ndarray, k: int, queries: np.ndarray | None = None) -> float:
    """Mean share of the ``k`` nearest neighbours two embeddings of the same points agree on.

    Parameters
    ----------
    a, b : ndarray of shape (n, d_a), (n, d_b)
        Two embeddings of the same points (rows match); ``1 <= k < n``.
    k : int
    queries : ndarray of int, optional
        Points whose neighbourhoods are compared (all by default).

    Returns
    -------
    float
        In [0, 1]; 1 when every query has the same k neighbours in both.
    """
    na = np.sort(nearest_neighbours(a, k, queries), axis=1)
    nb = np.sort(nearest_neighbours(b, k, queries), axis=1)
    return _shared_share(na, nb, k)


def knn_overlap_pairs(embeddings: list[np.ndarray], k: int, queries: np.ndarray | None = None) -> list[float]:
    """:func:`knn_overlap` of every pair of embeddings, in ``itertools.combinations`` order.

    Each embedding's neighbour lists are found once; byte-identical embeddings
    (the copies of a seed-free fit) share theirs and agree fully.

    Parameters
    ----------
    embeddings : list of ndarray of shape (n, d)
        Embeddings of the same points (rows match); ``1 <= k < n``.
    k : int
    queries : ndarray of int, optional
        Points whose neighbourhoods are compared (all by default).

    Returns
    -------
    list of float
        One overlap per pair ``(i, j)``, ``i < j``.
    """
    lists: list[np.ndarray] = []
    for i, e in enumerate(embeddings):
        same = next((j for j in range(i) if np.array_equal(embeddings[j], e)), None)
        lists.append(lists[same] if same is not None else np.sort(nearest_neighbours(e, k, queries), axis=1))
    return [_shared_share(lists[i], lists[j], k) for i in range(len(lists)) for j in range(i + 1, len(lists))]


def _shared_share(na: np.ndarray, nb: np.ndarray, k: int) -> float:
    if na is nb:
        return 1.0
    shared = 0
    for start in range(0, len(na), 1024):  # bounds the (rows, k, k) comparison
        sa, sb = na[start : start + 1024], nb[start : start + 1024]
        shared += int(np.count_nonzero(sa[:, :, None] == sb[:, None, :]))
    return shared / (len(na) * k)
