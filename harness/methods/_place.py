"""Place points a method was not fitted on: its own ``transform``, or k-NN interpolation."""

from __future__ import annotations

import logging
import warnings
from typing import Any

import numpy as np
from sklearn.neighbors import NearestNeighbors

from ._fit import check_embedding
from ._registry import MethodSpec

logger = logging.getLogger(__name__)

#: Out-of-sample maps a method entry may ask for with ``out_of_sample``.
OUT_OF_SAMPLE_MAPS = ("transform", "knn_interpolation")
#: Training points whose embeddings a new point's interpolated position averages.
INTERPOLATION_K = 10
#: Reason recorded when a method has no way to place new points.
NO_MAP = "no out-of-sample map"


def knn_interpolation(
    X_train: np.ndarray, Y_train: np.ndarray, X_new: np.ndarray, k: int = INTERPOLATION_K
) -> np.ndarray:
    """Each new point at the inverse-distance-weighted mean of its k nearest training points' embeddings.

    Weights are ``1 / d`` over the k nearest training points in data space
    (Euclidean ``d``); a new point that coincides with training points takes
    the mean of their embeddings.
    """
    k = min(k, X_train.shape[0])
    dist, idx = NearestNeighbors(n_neighbors=k).fit(X_train).kneighbors(X_new)
    exact = dist <= 0.0
    with np.errstate(divide="ignore"):
        w = np.where(exact.any(axis=1, keepdims=True), exact.astype(float), 1.0 / dist)
    w /= w.sum(axis=1, keepdims=True)
    return np.einsum("ij,ijd->id", w, Y_train[idx])


def place_points(
    spec: MethodSpec,
    estimator: Any,
    chosen: str,
    X_train: np.ndarray,
    Y_train: np.ndarray,
    X_new: np.ndarray,
    dataset: str = "",
) -> tuple[np.ndarray | None, str, str]:
    """Embed new points with the map a cell asks for.

    Parameters
    ----------
    spec : MethodSpec
        The method.
    estimator : object
        The estimator fitted on the training points.
    chosen : str
        ``""`` (the method's own ``transform``, when it has one) or ``"knn_interpolation"``.
    X_train, Y_train : ndarray
        Training points and their embedding.
    X_new : ndarray
        Points to place.
    dataset : str
        Name for messages.

    Returns
    -------
    embedding : ndarray or None
        Checked coordinates of the new points, ``None`` when there is no map.
    used : str
        ``"transform"``, ``"knn_interpolation"`` or ``""``.
    reason : str
        Why there is no embedding (``""`` when there is one).
    """
    d = Y_train.shape[1]
    if chosen == "knn_interpolation":
        Y = knn_interpolation(X_train, Y_train, X_new)
        return check_embedding(Y, X_new.shape[0], d, spec.name, dataset), "knn_interpolation", ""
    if not (spec.places_new_points and callable(getattr(estimator, "transform", None))):
        return None, "", NO_MAP
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        raw = estimator.transform(X_new)
    for w in caught:
        logger.warning("%s on %s (held-out): %s: %s", spec.name, dataset, w.category.__name__, w.message)
    return check_embedding(raw, X_new.shape[0], d, spec.name, dataset), "transform", ""
