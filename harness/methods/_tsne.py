"""scikit-learn's t-SNE with a PCA start that never depends on the seed.

scikit-learn's ``init="pca"`` fits ``PCA(svd_solver="auto", random_state=seed)``.
For tall tables (at least ten rows per feature, at most 1,000 features) and small
ones (at most 500 rows and columns) its solver is exact and the start, hence the
whole Barnes-Hut fit, is the same for every seed; for the wide tables in between
it picks the randomized solver, and the start moves with the seed.  Here the
start is always exact: the same solver as scikit-learn's choice where that is
exact (so those fits are unchanged to the bit), the full SVD where it would be
randomized.  The seed is then unused, so a t-SNE cell with a PCA start is fitted
once per dataset and its other seeds are copies (see :func:`harness.run.cells.seed_copies`).
"""

from __future__ import annotations

from typing import Any

import numpy as np
from sklearn.decomposition import PCA
from sklearn.manifold import TSNE
from sklearn.utils import check_array


def exact_pca_start(X: Any, n_components: int) -> np.ndarray:
    """The start scikit-learn's TSNE builds for ``init="pca"``, with an exact solver.

    Parameters
    ----------
    X : array-like of shape (n_samples, n_features)
        The data as the estimator receives it.
    n_components : int
        Embedding dimension.

    Returns
    -------
    numpy.ndarray of shape (n_samples, n_components), float32
        The principal-component scores, scaled so the first has standard deviation 1e-4
        (scikit-learn's rule for its PCA start, the spread of its random start).
    """
    X = check_array(X, dtype=[np.float32, np.float64])
    n, d = X.shape
    # scikit-learn's "auto" rule (PCA._fit), with "full" in place of "randomized"
    solver = "covariance_eigh" if d <= 1_000 and n >= 10 * d else "full"
    start = PCA(n_components=n_components, svd_solver=solver).fit_transform(X).astype(np.float32, copy=False)
    scale: np.ndarray = start / np.std(start[:, 0]) * 1e-4
    return scale


class ExactStartTSNE(TSNE):
    """:class:`sklearn.manifold.TSNE` whose ``init="pca"`` start is exact (seed-free)."""

    def fit_transform(self, X: Any, y: Any = None) -> np.ndarray:
        """Fit as :class:`~sklearn.manifold.TSNE` does, from :func:`exact_pca_start` when ``init="pca"``."""
        init: Any = self.init
        if not (isinstance(init, str) and init == "pca") or self.metric == "precomputed":
            out: np.ndarray = super().fit_transform(X, y)
            return out
        setattr(self, "init", exact_pca_start(X, self.n_components))  # noqa: B010 (TSNE types it str)
        try:
            out = super().fit_transform(X, y)
        finally:
            setattr(self, "init", init)  # noqa: B010
        return out
