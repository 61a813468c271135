"""Held-out cells: split the rows, fit on the training part, place and score the held-out part.

The split is a pure function of the dataset, the holdout setting and the seed
(scikit-learn's ``train_test_split``, stratified by label where there are
labels), so every method of a seed sees the same training and held-out rows.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd
from sklearn.model_selection import train_test_split

from ..config import Scoring
from ..datasets import Dataset
from ..methods import MethodSpec, place_points
from ..metrics import HELDOUT_PREFIX as PREFIX
from ..metrics import placement_measures, score

#: In-sample measures whose held-out twin is left out: they need a label split of their own.
_NOT_AMONG_HELDOUT = ("knn_accuracy", "silhouette")


def split_rows(dataset: Dataset, holdout: float | int, seed: int) -> tuple[np.ndarray, np.ndarray]:
    """Sorted training and held-out row indices of one seed's split.

    Parameters
    ----------
    dataset : Dataset
        Feature coordinates, with labels to stratify by when it has them.
    holdout : float or int
        Share (in (0, 1)) or count of held-out rows.
    seed : int
        The cell's seed (``random_state`` of the split).
    """
    rows = np.arange(dataset.n)
    train, test = train_test_split(rows, test_size=holdout, stratify=dataset.labels, random_state=seed)
    return np.sort(train), np.sort(test)


def subset(dataset: Dataset, rows: np.ndarray) -> Dataset:
    """The dataset restricted to ``rows`` (features, labels and latent coordinates)."""
    assert dataset.X is not None  # the suite refuses a holdout on a distance matrix

    def take(a: np.ndarray | None) -> np.ndarray | None:
        return None if a is None else np.asarray(a)[rows]

    return Dataset(dataset.name, X=dataset.X[rows], labels=take(dataset.labels), latent=take(dataset.latent))


def heldout_values(
    spec: MethodSpec,
    estimator: Any,
    cell_map: str,
    dataset: Dataset,
    rows: tuple[np.ndarray, np.ndarray],
    Y_train: np.ndarray,
    scoring: Scoring,
) -> tuple[dict[str, float], np.ndarray | None, dict[str, Any]]:
    """Held-out measures of a fitted cell, the held-out embedding and the record of the split.

    Returns
    -------
    values : dict
        ``heldout_*`` measures; empty when the method has no out-of-sample map.
    Y_test : ndarray or None
        Where the map put the held-out points.
    record : dict
        ``rows`` (held-out row indices), ``n_train``, ``n_heldout``, ``map``
        (``transform``, ``knn_interpolation`` or ``""``) and ``reason`` (why
        there are no held-out values, ``""`` when there are).
    """
    train_rows, test_rows = rows
    assert dataset.X is not None
    X_train, X_test = dataset.X[train_rows], dataset.X[test_rows]
    Y_test, used, reason = place_points(spec, estimator, cell_map, X_train, Y_train, X_test, dataset.name)
    record: dict[str, Any] = {
        "rows": test_rows.tolist(),
        "n_train": int(train_rows.size),
        "n_heldout": int(test_rows.size),
        "map": used,
        "reason": reason,
    }
    if Y_test is None:
        return {}, None, record
    test = subset(dataset, test_rows)
    among = score(X_test, Y_test, ks=list(scoring.ks), latent=test.latent, **scoring.engine_options())
    values = {PREFIX + k: v for k, v in among.values.items() if k.split("@", 1)[0] not in _NOT_AMONG_HELDOUT}
    labels = dataset.labels
    values.update(
        placement_measures(
            X_train,
            Y_train,
            X_test,
            Y_test,
            scoring.ks,
            None if labels is None else np.asarray(labels)[train_rows],
            None if labels is None else np.asarray(labels)[test_rows],
        )
    )
    return values, Y_test, record


def full_embedding(
    n: int, rows: tuple[np.ndarray, np.ndarray], Y_train: np.ndarray, Y_test: np.ndarray
) -> np.ndarray:
    """Training and held-out coordinates together, in the dataset's row order."""
    Y = np.empty((n, Y_train.shape[1]))
    Y[rows[0]], Y[rows[1]] = Y_train, Y_test
    return Y


def points_in_rows(points: pd.DataFrame | None, train_rows: np.ndarray) -> pd.DataFrame | None:
    """Per-point terms of the training points, indexed by their rows in the whole dataset."""
    if points is None:
        return None
    out = points.copy()
    out["point"] = train_rows[out["point"].to_numpy(int)]
    return out
