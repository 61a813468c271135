"""Measures that use class labels: k-NN accuracy and silhouette in the embedding."""

from __future__ import annotations

import logging

import numpy as np
from sklearn.metrics import silhouette_score
from sklearn.model_selection import StratifiedKFold, cross_val_score
from sklearn.neighbors import KNeighborsClassifier

log = logging.getLogger(__name__)

#: Silhouette is computed on a seeded sample of this many points above it.
SILHOUETTE_SAMPLE = 5000
#: Folds of the cross-validation (fewer when the smallest class is smaller).
FOLDS = 5


def knn_accuracy(y: np.ndarray, labels: np.ndarray, k: int, seed: int) -> float:
    """Accuracy of a k-NN classifier in the embedding, stratified cross-validation.

    scikit-learn's ``KNeighborsClassifier(n_neighbors=k)`` scored by stratified
    k-fold cross-validation (5 folds, shuffled with ``seed``; as many folds as
    the smallest class has members when that is fewer, at least 2).

    Raises
    ------
    ValueError
        When a class has a single member or a training fold has fewer than k points.
    """
    _, counts = np.unique(labels, return_counts=True)
    folds = int(min(FOLDS, counts.min()))
    if folds < 2:
        raise ValueError("knn_accuracy needs at least 2 members in every class")
    if len(labels) - int(np.ceil(len(labels) / folds)) < k:
        raise ValueError(f"knn_accuracy@{k}: a training fold has fewer than {k} points")
    cv = StratifiedKFold(n_splits=folds, shuffle=True, random_state=seed)
    scores = cross_val_score(KNeighborsClassifier(n_neighbors=k), y, labels, cv=cv)
    return float(np.mean(scores))


def silhouette(y: np.ndarray, labels: np.ndarray, seed: int) -> float:
    """Mean silhouette width of the labels in the embedding (Rousseeuw 1987, scikit-learn).

    Above :data:`SILHOUETTE_SAMPLE` points, a seeded sample of that size is used.
    """
    n = len(labels)
    size = SILHOUETTE_SAMPLE if n > SILHOUETTE_SAMPLE else None
    return float(silhouette_score(y, labels, sample_size=size, random_state=seed))
