"""Sammon mapping (Sammon 1969), our own vectorised implementation.

Sammon's stress of a configuration ``Y`` against distances ``d``::

    E = (1 / sum_{i<j} d_ij) * sum_{i<j} (d_ij - e_ij)**2 / d_ij,   e_ij = |y_i - y_j|

is minimised by Sammon's pseudo-Newton iteration: each coordinate moves by its
first derivative divided by the magnitude of its own second derivative (the
diagonal of the Hessian).  Two safeguards replace Sammon's fixed "magic
factor": each point's move is capped at 0.2 times the mean distance, and the
whole step is halved until the stress drops, so the stress never rises from one
iteration to the next.  The trial fraction starts at twice the last accepted one.

Pairs at distance zero get weight zero: ``1 / d_ij`` is undefined for them and
they say nothing about the scale to keep.  Duplicated items therefore receive
identical updates and stay together.  Embedded distances are floored at
``1e-12`` (after scaling the distances to mean 1) so a pair that collapses
does not divide by zero.
"""

from __future__ import annotations

import logging

import numpy as np
from scipy.spatial.distance import cdist
from sklearn.base import BaseEstimator
from sklearn.utils import check_random_state

from ._classical import classical_scaling, pca_scores

logger = logging.getLogger(__name__)

_FLOOR = 1e-12
_MAX_HALVINGS = 30
_BLOCK_BYTES = 1 << 21
_MAX_MOVE = 0.2


class SammonMapping(BaseEstimator):
    """Nonlinear mapping that keeps small distances in proportion (Sammon 1969).

    Parameters
    ----------
    n_components : int, default=2
        Output dimension.
    init : {"pca", "random"} or ndarray of shape (n, n_components), default="pca"
        Start configuration.  ``"pca"`` uses principal-component scores of the
        coordinates, or classical (Torgerson) scaling when ``metric`` is
        ``"precomputed"``; the two agree for Euclidean distances.
        ``"random"`` draws standard normal coordinates from ``random_state``.
        An array is the start itself, in the units of the data (the
        ``embedding_`` of an earlier fit on the same items continues that fit).
    max_iter : int, default=500
        Maximum number of pseudo-Newton iterations.
    tol : float, default=1e-9
        Stop when the relative drop of the stress in one iteration is below this.
    random_state : int, RandomState or None, default=None
        Seed for ``init="random"`` and for the tiny jitter added when the start
        configuration places two distinct items on the same point.
    metric : {"euclidean", "precomputed"}, default="euclidean"
        ``"precomputed"`` means ``fit`` receives a square distance matrix.

    Attributes
    ----------
    embedding_ : ndarray of shape (n, n_components)
        The configuration found.
    stress_ : float
        Sammon's stress of ``embedding_``.
    n_iter_ : int
        Number of iterations run.
    """

    def __init__(
        self,
        n_components: int = 2,
        *,
        init: str | np.ndarray = "pca",
        max_iter: int = 500,
        tol: float = 1e-9,
        random_state: int | np.random.RandomState | None = None,
        metric: str = "euclidean",
    ) -> None:
        self.n_components = n_components
        self.init = init
        self.max_iter = max_iter
        self.tol = tol
        self.random_state = random_state
        self.metric = metric

    def fit(self, X: np.ndarray, y: object = None) -> SammonMapping:
        """Fit the mapping to coordinates or a distance matrix.

        Parameters
        ----------
        X : ndarray of shape (n, d) or (n, n)
            Coordinates, or distances when ``metric="precomputed"``.
        y : ignored

        Returns
        -------
        self
        """
        self._check_params()
        X, exponent = _power_of_two_standard(np.asarray(X, dtype=np.float64), self.metric == "precomputed")
        D = self._distances(X)
        rng = check_random_state(self.random_state)

        off_diagonal = ~np.eye(D.shape[0], dtype=bool)
        scale = D[off_diagonal].mean()
        if not scale > 0:
            raise ValueError("Sammon mapping needs at least two distinct items; all distances are zero")
        D = D / scale
        if not isinstance(self.init, str):
            Y = np.ldexp(self._start_array(D.shape[0]), -exponent) / scale
        elif self.init == "pca":
            Y = (
                classical_scaling(D, self.n_components)
                if self.metric == "precomputed"
                else pca_scores(X, self.n_components) / scale
            )
        else:
            Y = rng.standard_normal((D.shape[0], self.n_components))

        Y, stress, history = _minimise(D, Y, self.max_iter, self.tol)
        self.embedding_ = np.ldexp(Y * scale, exponent)
        self.stress_ = float(stress)
        self.n_iter_ = len(history) - 1
        self._stress_history = np.asarray(history)
        return self

    def fit_transform(self, X: np.ndarray, y: object = None) -> np.ndarray:
        """Fit and return the embedding (see :meth:`fit`)."""
        return self.fit(X).embedding_

    def _check_params(self) -> None:
        if not (isinstance(self.n_components, (int, np.integer)) and self.n_components >= 1):
            raise ValueError(f"n_components must be a positive integer, got {self.n_components!r}")
        if isinstance(self.init, str) and self.init not in ("pca", "random"):
            raise ValueError(f"init must be 'pca', 'random' or an array, got {self.init!r}")
        if self.metric not in ("euclidean", "precomputed"):
            raise ValueError(f"metric must be 'euclidean' or 'precomputed', got {self.metric!r}")
        if not (isinstance(self.max_iter, (int, np.integer)) and self.max_iter >= 1):
            raise ValueError(f"max_iter must be a positive integer, got {self.max_iter!r}")
        if not self.tol >= 0:
            raise ValueError(f"tol must be >= 0, got {self.tol!r}")

    def _start_array(self, n: int) -> np.ndarray:
        """``init`` as a float array, refused unless it is finite with shape (n, n_components)."""
        try:
            start = np.asarray(self.init, dtype=np.float64)
        except (TypeError, ValueError):
            raise ValueError(f"init must be 'pca', 'random' or an array, got {self.init!r}") from None
        if start.shape != (n, self.n_components):
            raise ValueError(
                f"an init array must have shape (n, n_components) = ({n}, {self.n_components}), "
                f"got {start.shape}"
            )
        if not np.all(np.isfinite(start)):
            raise ValueError("the init array contains NaN or infinite values")
        return start

    def _distances(self, X: np.ndarray) -> np.ndarray:
        if X.ndim != 2 or X.shape[0] < 2:
            raise ValueError(f"expected a 2-D array with at least two rows, got shape {X.shape}")
        if not np.all(np.isfinite(X)):
            raise ValueError("input contains NaN or infinite values")
        if self.metric == "euclidean":
            return cdist(X, X)
        if X.shape[0] != X.shape[1]:
            raise ValueError(f"metric='precomputed' needs a square distance matrix, got shape {X.shape}")
        if np.any(X < 0) or not np.allclose(X, X.T) or np.any(np.diag(X) != 0):
            raise ValueError(
                "a precomputed distance matrix must be symmetric, non-negative, with a zero diagonal"
            )
        return (X + X.T) / 2


def _power_of_two_standard(X: np.ndarray, precomputed: bool) -> tuple[np.ndarray, int]:
    """``X`` (centred unless a distance matrix) times ``2**-e`` with its largest entry in [0.5, 1), and ``e``.

    Powers of two scale exactly, so the fit is the same at any magnitude of the
    input, where squared distances of coordinates near 1e160 (or 1e-160) would
    overflow (underflow); the embedding is scaled back by ``2**e``.
    """
    if X.ndim != 2 or X.shape[0] < 2 or not np.all(np.isfinite(X)):
        return X, 0  # refused with a message by _distances
    if not precomputed:
        X = X - np.median(X, axis=0)
    top = float(np.max(np.abs(X)))
    exponent = int(np.frexp(top)[1]) if top > 0 else 0
    return np.ldexp(X, -exponent), exponent


class _SammonObjective:
    """Sammon's stress of configurations against fixed distances ``D`` (mean 1), and its Newton step.

    The n x n work is done in row blocks that fit in cache, which is several
    times faster than whole-matrix passes and needs only one stored n x n
    array besides ``D``.
    """

    def __init__(self, D: np.ndarray) -> None:
        n = D.shape[0]
        rows = max(1, _BLOCK_BYTES // (8 * n))
        self.blocks = [slice(i, min(i + rows, n)) for i in range(0, n, rows)]
        self.weighted = D > 0  # the diagonal and duplicates carry no weight
        self.has_zero_pairs = np.count_nonzero(self.weighted) < n * (n - 1)
        with np.errstate(divide="ignore"):
            self.D_inv = np.where(self.weighted, 1.0 / D, 0.0)
        self.D_inv_rows = self.D_inv.sum(axis=1)
        self.d_total = D.sum()  # twice the sum over pairs i<j

    def collapsed(self, Y: np.ndarray) -> bool:
        """Two distinct items sit on the same point (no force would push them apart)."""
        return any(np.any(cdist(Y[b], Y)[self.weighted[b]] <= _FLOOR) for b in self.blocks)

    def stress(self, Y: np.ndarray) -> float:
        """Sammon's stress of ``Y``."""
        # Over ordered pairs, sum (d - e)^2 / d = sum d - 2 sum e + sum e^2 / d; the
        # last sum follows from Y by the Gram identity without an n x n array.
        e_sum = 0.0
        for b in self.blocks:
            E = cdist(Y[b], Y)
            if self.has_zero_pairs:
                E *= self.weighted[b]
            e_sum += E.sum()
        sq = np.einsum("ij,ij->i", Y, Y)
        e2_over_d = 2.0 * (sq @ self.D_inv_rows) - 2.0 * np.einsum("ij,ij->", Y, self.D_inv @ Y)
        return max(self.d_total - 2.0 * e_sum + e2_over_d, 0.0) / self.d_total

    def newton_step(self, Y: np.ndarray) -> np.ndarray:
        """The pseudo-Newton move of every point, each capped at ``_MAX_MOVE``."""
        # Gradient and diagonal second derivative of E, both times c/2
        # (c = sum of d_ij over pairs), which cancels in their ratio:
        #   grad_p = sum_j W_pj (y_j - y_p),             W = 1/e - 1/d
        #   curv_pk = sum_j V_pj (y_pk - y_jk)^2 - W_pj,   V = 1/e^3
        n, k = Y.shape
        Z = np.hstack([Y, Y * Y, np.ones((n, 1))])
        WZ = np.empty_like(Z)
        VZ = np.empty_like(Z)
        for b in self.blocks:
            E = cdist(Y[b], Y)
            np.maximum(E, _FLOOR, out=E)
            E_inv = np.divide(1.0, E, out=E)
            if self.has_zero_pairs:
                E_inv *= self.weighted[b]
            else:
                E_inv[np.arange(b.stop - b.start), np.arange(b.start, b.stop)] = 0.0
            WZ[b] = E_inv @ Z - self.D_inv[b] @ Z
            V = E_inv * E_inv
            V *= E_inv
            VZ[b] = V @ Z
        WY, W_rows = WZ[:, :k], WZ[:, 2 * k :]
        VY, VY2, V_rows = VZ[:, :k], VZ[:, k : 2 * k], VZ[:, 2 * k :]
        grad = WY - W_rows * Y
        curvature = Y * Y * V_rows - 2.0 * Y * VY + VY2 - W_rows
        step = grad / np.maximum(np.abs(curvature), _FLOOR)
        # Points whose curvature is nearly flat get huge Newton moves; capping
        # each move (a trust region) spares the halvings that would otherwise
        # shrink every other point's move too.
        lengths = np.sqrt(np.einsum("ij,ij->i", step, step))
        step *= np.minimum(1.0, _MAX_MOVE / np.maximum(lengths, _FLOOR))[:, None]
        return step


#: Seed of the fixed pattern that separates items starting on the same point.
_NUDGE_SEED = 0


def _minimise(
    D: np.ndarray, Y: np.ndarray, max_iter: int, tol: float
) -> tuple[np.ndarray, float, list[float]]:
    """Run the safeguarded pseudo-Newton iteration from ``Y``; ``D`` has mean 1."""
    objective = _SammonObjective(D)
    if objective.collapsed(Y):
        # Two distinct items start on the same point; nudge the start by a fixed pattern (not a
        # draw from the fit's seed: from a PCA start the mapping stays independent of the seed).
        Y = Y + 1e-6 * np.random.RandomState(_NUDGE_SEED).standard_normal(Y.shape)
    current = objective.stress(Y)
    history = [current]
    fraction = 0.5
    for _ in range(max_iter):
        if current == 0.0:
            break
        newton = objective.newton_step(Y)
        # Start from twice the last accepted fraction of the step.
        fraction = min(1.0, 2.0 * fraction)
        for _ in range(_MAX_HALVINGS):
            trial = Y - fraction * newton
            value = objective.stress(trial)
            if value < current:
                break
            fraction *= 0.5
        else:
            logger.debug("Sammon mapping: no step lowers the stress; stopping")
            break
        drop = (current - value) / current
        Y, current = trial, value
        history.append(current)
        if drop < tol:
            break
    return Y, current, history
