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

    Raises
    ------
    ValueError
        When a class has a single member or a training fold has fewer than k points.
    """
    classes, codes = np.unique(labels, return_inverse=True)
    counts = np.bincount(codes)
    folds = int(min(FOLDS, counts.min()))
    if folds < 2:
        raise ValueError("knn_accuracy needs at least 2 members in every class")
    if len(labels) - int(np.ceil(len(labels) / folds)) < k:
        raise ValueError(f"knn_accuracy@{k}: a training fold has fewer than {k} points")
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
    """
    n = len(labels)
    size = SILHOUETTE_SAMPLE if n > SILHOUETTE_SAMPLE else None
    return float(silhouette_score(y, labels, sample_size=size, random_state=seed))
