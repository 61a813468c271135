"""Classical (Torgerson) scaling and PCA scores with a fixed sign convention.

Both give the same configuration for Euclidean data, so a method started from
"PCA" lands on the same start whether it sees coordinates or their distances.
"""

from __future__ import annotations

import numpy as np
from scipy.linalg import eigh
from sklearn.base import BaseEstimator


def _fix_signs(Y: np.ndarray) -> np.ndarray:
    """Flip each column so its largest-magnitude entry is positive.

    Eigenvectors are defined only up to sign; fixing it makes two routes to the
    same subspace (SVD of X, eigendecomposition of the centred Gram matrix)
    return the same array.
    """
    if Y.size == 0:
        return Y
    rows = np.argmax(np.abs(Y), axis=0)
    signs = np.sign(Y[rows, np.arange(Y.shape[1])])
    signs[signs == 0] = 1.0
    return Y * signs


def pca_scores(X: np.ndarray, n_components: int) -> np.ndarray:
    """Scores on the first principal axes of ``X`` (full SVD, deterministic).

    Parameters
    ----------
    X : ndarray of shape (n, d)
        Coordinates.
    n_components : int
        Number of axes; columns beyond the rank of ``X`` are zero.

    Returns
    -------
    ndarray of shape (n, n_components)
    """
    Xc = np.asarray(X, dtype=np.float64) - np.mean(X, axis=0)
    U, s, _ = np.linalg.svd(Xc, full_matrices=False)
    k = min(n_components, s.size)
    Y = np.zeros((Xc.shape[0], n_components))
    Y[:, :k] = U[:, :k] * s[:k]
    return _fix_signs(Y)


def classical_scaling(D: np.ndarray, n_components: int) -> np.ndarray:
    """Torgerson's classical scaling of a distance matrix.

    Double-centres ``-D**2 / 2`` and keeps the top eigenvectors scaled by the
    square roots of their eigenvalues; negative eigenvalues (non-Euclidean
    distances) give zero columns.

    Parameters
    ----------
    D : ndarray of shape (n, n)
        Symmetric distances with a zero diagonal.
    n_components : int
        Output dimension.

    Returns
    -------
    ndarray of shape (n, n_components)
    """
    n = D.shape[0]
    B = -0.5 * np.asarray(D, dtype=np.float64) ** 2
    B -= B.mean(axis=0, keepdims=True)
    B -= B.mean(axis=1, keepdims=True)
    k = min(n_components, n)
    vals, vecs = eigh(B, subset_by_index=(n - k, n - 1))
    order = np.argsort(vals)[::-1]
    vals, vecs = vals[order], vecs[:, order]
    Y = np.zeros((n, n_components))
    Y[:, :k] = vecs * np.sqrt(np.clip(vals, 0.0, None))
    return _fix_signs(Y)


class ClassicalScaling(BaseEstimator):
    """Classical multidimensional scaling (Torgerson 1952) as an estimator.

    Parameters
    ----------
    n_components : int
        Output dimension.
    metric : {"euclidean", "precomputed"}
        ``"precomputed"`` means ``fit_transform`` receives a square distance
        matrix; with ``"euclidean"`` it receives coordinates and the result
        equals PCA scores.
    """

    def __init__(self, n_components: int = 2, metric: str = "euclidean") -> None:
        self.n_components = n_components
        self.metric = metric

    def fit_transform(self, X: np.ndarray, y: object = None) -> np.ndarray:
        """Return the embedding of ``X`` (coordinates or distances)."""
        X = np.asarray(X, dtype=np.float64)
        if self.metric == "precomputed":
            if X.ndim != 2 or X.shape[0] != X.shape[1]:
                raise ValueError(f"expected a square distance matrix, got shape {X.shape}")
            self.embedding_ = classical_scaling(X, self.n_components)
        elif self.metric == "euclidean":
            self.embedding_ = pca_scores(X, self.n_components)
        else:
            raise ValueError(f"metric must be 'euclidean' or 'precomputed', got {self.metric!r}")
        return self.embedding_
