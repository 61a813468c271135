"""Distance rows, one block of query points at a time, and distances of point pairs.

Ranks only need an order, so the neighbourhood engine works on *squared*
Euclidean distances computed as ``||a||^2 + ||b||^2 - 2 a.b`` with a single
float64 matrix product per block (BLAS-threaded).  The same numbers decide every
neighbour list and every rank of a row, so the ranks of one row are always
consistent with each other.  Rounding of this formula only matters for pairs
whose squared distances differ by about 1e-15 of the squared norms, which is
why the measures hand it standardised coordinates (centred on a median and
scaled by a power of two, :mod:`._standard`): the norms are then the size of the
spread, not of an offset.  For coordinates on which float64 arithmetic is exact
(small integers or short binary fractions) the computed distances are exact and
ties are true ties.

Global measures (stress, Sammon stress, Shepard correlation) need accurate
distances rather than an order, so :func:`pair_distances` uses the direct
formula ``sqrt(sum((a - b)^2))``.
"""

from __future__ import annotations

import numpy as np

#: Pairs handled per chunk in :func:`pair_distances` (bounds the temporary copy).
_PAIR_CHUNK = 65_536


class DistanceRows:
    """Squared Euclidean distances (or given distances) from query rows to all points.

    Parameters
    ----------
    points : ndarray of shape (n, d), optional
        Coordinates; rows are squared Euclidean distances.
    matrix : ndarray of shape (n, n), optional
        Precomputed distances; rows are read from it as they are.
    """

    def __init__(self, points: np.ndarray | None = None, matrix: np.ndarray | None = None) -> None:
        if (points is None) == (matrix is None):
            raise ValueError("give exactly one of points or matrix")
        self._matrix = matrix
        self._right: np.ndarray | None = None
        if points is not None:
            sq = np.einsum("ij,ij->i", points, points)
            # Right factor [x, |x|^2, 1]; the left factor of a block is
            # [-2x_i, 1, |x_i|^2], so one product yields |x_i|^2 + |x_j|^2 - 2 x_i.x_j.
            self._right = np.empty((points.shape[0], points.shape[1] + 2))
            self._right[:, :-2] = points
            self._right[:, -2] = sq
            self._right[:, -1] = 1.0
            self.n = points.shape[0]
        elif matrix is not None:
            self.n = matrix.shape[0]

    @property
    def nbytes(self) -> int:
        """Bytes held by this object beyond the caller's input."""
        return 0 if self._right is None else self._right.nbytes

    def block(self, rows: np.ndarray, out: np.ndarray | None = None) -> np.ndarray:
        """Distance rows for the query points ``rows``.

        Parameters
        ----------
        rows : ndarray of int
            Indices of the query points.
        out : ndarray of shape (len(rows), n), optional
            Buffer to write into.

        Returns
        -------
        ndarray of shape (len(rows), n)
            Row ``r`` holds the (squared, for coordinates) distances from point
            ``rows[r]`` to every point, itself included.
        """
        if self._right is None:
            assert self._matrix is not None  # one of the two is always set (see __init__)
            if out is None:
                return np.array(self._matrix[rows], dtype=np.float64)
            out[...] = self._matrix[rows]
            return out
        right = self._right
        left = np.empty((len(rows), right.shape[1]))
        left[:, :-2] = right[rows, :-2]
        left[:, :-2] *= -2.0
        left[:, -2] = 1.0
        left[:, -1] = right[rows, -2]
        return np.matmul(left, right.T, out=out)


def pair_distances(
    points: np.ndarray | None, matrix: np.ndarray | None, i: np.ndarray, j: np.ndarray
) -> np.ndarray:
    """Euclidean (or given) distances of the pairs ``(i[t], j[t])``, by the direct formula.

    Parameters
    ----------
    points : ndarray of shape (n, d) or None
        Coordinates (used when ``matrix`` is None).
    matrix : ndarray of shape (n, n) or None
        Precomputed distances.
    i, j : ndarray of int
        Pair indices.

    Returns
    -------
    ndarray of float64
    """
    if matrix is not None:
        return np.asarray(matrix[i, j], dtype=np.float64)
    if points is None:
        raise ValueError("give points or matrix")
    out = np.empty(len(i))
    for start in range(0, len(i), _PAIR_CHUNK):
        stop = start + _PAIR_CHUNK
        diff = points[i[start:stop]] - points[j[start:stop]]
        out[start:stop] = np.sqrt(np.einsum("ij,ij->i", diff, diff))
    return out
