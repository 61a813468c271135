"""Measures of points a method never saw: their own structure, their placement and their labels.

Held-out points are embedded by the fitted method's out-of-sample map; these
measures ask whether that map keeps what the fit kept for the training points.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
from sklearn.neighbors import KNeighborsClassifier, NearestNeighbors

from ._standard import standard_points

#: Prefix of every held-out measure column.
PREFIX = "heldout_"


def placement(
    X_train: np.ndarray, Y_train: np.ndarray, X_test: np.ndarray, Y_test: np.ndarray, k: int
) -> float:
    """Mean over held-out points of |k nearest training points in data ∩ in embedding| / k.

    Parameters
    ----------
    X_train, Y_train : ndarray
        Training points and their embedding.
    X_test, Y_test : ndarray
        Held-out points and where the method put them.
    k : int
        Neighbourhood size (at most the number of training points).

    Returns
    -------
    float in [0, 1]
    """
    # both spaces standardised together (one centre and scale per space), so the value
    # does not change under translation, rotation or uniform scaling of either space
    xs = standard_points(np.vstack([X_train, X_test]))
    ys = standard_points(np.vstack([Y_train, Y_test]))
    n = X_train.shape[0]
    near_x = NearestNeighbors(n_neighbors=k).fit(xs[:n]).kneighbors(xs[n:], return_distance=False)
    near_y = NearestNeighbors(n_neighbors=k).fit(ys[:n]).kneighbors(ys[n:], return_distance=False)
    shared = [np.intersect1d(a, b, assume_unique=True).size for a, b in zip(near_x, near_y, strict=True)]
    return float(np.mean(shared) / k)


def knn_transfer_accuracy(
    Y_train: np.ndarray, labels_train: np.ndarray, Y_test: np.ndarray, labels_test: np.ndarray, k: int
) -> float:
    """Share of held-out points a k-NN classifier on the training embedding labels correctly."""
    clf = KNeighborsClassifier(n_neighbors=k).fit(Y_train, labels_train)
    return float(clf.score(Y_test, labels_test))


def placement_measures(
    X_train: np.ndarray,
    Y_train: np.ndarray,
    X_test: np.ndarray,
    Y_test: np.ndarray,
    ks: Sequence[int],
    labels_train: np.ndarray | None = None,
    labels_test: np.ndarray | None = None,
) -> dict[str, float]:
    """``heldout_placement@k`` and, with labels, ``heldout_knn_accuracy@k`` for every k."""
    out: dict[str, float] = {}
    for k in ks:
        out[f"{PREFIX}placement@{k}"] = placement(X_train, Y_train, X_test, Y_test, k)
        if labels_train is not None and labels_test is not None:
            out[f"{PREFIX}knn_accuracy@{k}"] = knn_transfer_accuracy(
                Y_train, labels_train, Y_test, labels_test, k
            )
    return out
