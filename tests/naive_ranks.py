"""Naive O(n^2 log n) references for the neighbourhood engine's tests (written plainly on purpose)."""

from __future__ import annotations

import numpy as np


def full_sort_ranks(dist: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Full sort of every row by (distance, index), the query point left out.

    Returns rank[i, j] (1-based, 0 on the diagonal) and the neighbour order.
    """
    n = len(dist)
    rank = np.zeros((n, n), dtype=int)
    order = np.empty((n, n - 1), dtype=int)
    for i in range(n):
        o = np.lexsort((np.arange(n), dist[i]))
        o = o[o != i]
        order[i] = o
        rank[i, o] = np.arange(1, n)
    return rank, order


def squared_distances(z: np.ndarray) -> np.ndarray:
    """All squared Euclidean distances by the direct formula."""
    return ((z[:, None, :] - z[None, :, :]) ** 2).sum(-1)
