"""Measures that use class labels: k-NN accuracy and silhouette in the embedding."""

from __future__ import annotations

import logging

import numpy as np
from sklearn.metrics import silhouette_score
from sklearn.model_selection import StratifiedKFold

from ._neighbours import nearest_neighbours

log = logging.getLogger(__name__)

#: Silhouette is computed on a seeded sample of this many points above it.
SILHOUETTE_SAMPLE = 5000
#: Folds of the cross-validation (fewer when the smallest class is smaller).
FOLDS = 5


def _dropped(measure: str, reason: str) -> float:
    """Log why a label measure is left out of this cell (it becomes NaN) and return NaN."""
    log.warning("%s left out: %s", measure, reason)
    return float("nan")


def knn_accuracy(y: np.ndarray, labels: np.ndarray, k: int, seed: int) -> float:
    """Accuracy of a k-NN classifier in the embedding, stratified cross-validation.

    The classifier of scikit-learn's ``KNeighborsClassifier(n_neighbors=k)``
    (uniform weights: the most frequent class among the k nearest training
    points, a tie in votes going to the first class in sorted order), scored by
    stratified k-fold cross-validation (5 folds, shuffled with ``seed``; as many
    folds as the smallest class has members when that is fewer, at least 2).
    Neighbours follow the engine's rule, ties in distance broken by index (see
    :mod:`._neighbours`), so the value does not depend on the column order or
    offset of the embedding.

    Returns NaN, with the reason logged as a warning (so it lands in the cell's
    record), when the labels cannot support it: a class with a single member
    or a training fold with fewer than k points.  The other measures of the
    cell are kept.
    """
    classes, codes = np.unique(labels, return_inverse=True)
    counts = np.bincount(codes)
    folds = int(min(FOLDS, counts.min()))
    if folds < 2:
        return _dropped(f"knn_accuracy@{k}", f"a class has {int(counts.min())} member; every class needs 2")
    if len(labels) - int(np.ceil(len(labels) / folds)) < k:
        return _dropped(f"knn_accuracy@{k}", f"a training fold has fewer than k={k} points")
    cv = StratifiedKFold(n_splits=folds, shuffle=True, random_state=seed)
    scores = []
    for train, test in cv.split(y, codes):
        among = np.zeros(len(codes), dtype=bool)
        among[train] = True
        votes = codes[nearest_neighbours(y, k, test, among)]
        offset = (np.arange(len(test)) * len(classes))[:, None]
        tally = np.bincount((votes + offset).ravel(), minlength=len(test) * len(classes))
        predicted = tally.reshape(len(test), len(classes)).argmax(axis=1)  # first maximum on ties
        scores.append(np.mean(predicted == codes[test]))
    return float(np.mean(scores))


def silhouette(y: np.ndarray, labels: np.ndarray, seed: int) -> float:
    """Mean silhouette width of the labels in the embedding (Rousseeuw 1987, scikit-learn).

    Above :data:`SILHOUETTE_SAMPLE` points, a seeded sample of that size is used.
    NaN, with the reason logged, unless there are 2 to n - 1 distinct labels
    (every point its own class, as for an id column, leaves it undefined).
    """
    n = len(labels)
    n_classes = len(np.unique(labels))
    if not 2 <= n_classes <= n - 1:
        return _dropped("silhouette", f"needs 2 to n-1 = {n - 1} distinct labels, got {n_classes}")
    size = SILHOUETTE_SAMPLE if n > SILHOUETTE_SAMPLE else None
    return float(silhouette_score(y, labels, sample_size=size, random_state=seed))
