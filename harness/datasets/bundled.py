"""Small open data sets that ship inside scikit-learn (no download).

Each loader can standardise the columns and draw a seeded, class-stratified
subsample of ``n`` rows.
"""

from __future__ import annotations

import importlib
from collections.abc import Callable
from typing import Any

import numpy as np

from ..params import Param, at_least
from ._common import seed_param, standardise, standardise_param, stratified_rows
from ._registry import register_dataset
from ._types import Dataset


def _subsample_param() -> Param:
    return Param(
        "n",
        int,
        None,
        "keep a random class-stratified subsample of this many rows (default: all rows)",
        check=at_least(2),
    )


def _from_bunch(
    name: str, bunch: Any, *, class_names: bool, standardise_: bool, n: int | None, seed: int, source: str
) -> Dataset:
    """Turn a scikit-learn data bunch into a :class:`Dataset`."""
    X = np.asarray(bunch.data, dtype=np.float64)
    target = np.asarray(bunch.target)
    labels = np.asarray(bunch.target_names)[target] if class_names else target.astype(np.int64)
    if n is not None:
        rows = stratified_rows(labels, X.shape[0], n, seed, f"{name}.n")
        X, labels = X[rows], labels[rows]
    if standardise_:
        X = standardise(X)
    return Dataset(
        name=name,
        X=X,
        labels=labels,
        info={
            "source": source,
            "feature_names": [str(f) for f in bunch.feature_names],
            "label_names": [str(c) for c in bunch.target_names],
            "standardised": bool(standardise_),
            "subsample": None if n is None else int(n),
            "seed": int(seed),
        },
    )


def _bundled(
    name: str, loader: str, *, class_names: bool, standardise_default: bool, description: str, source: str
) -> Callable[..., Dataset]:
    """Register ``sklearn.datasets.<loader>`` under ``name``."""

    @register_dataset(
        name,
        params=(standardise_param(standardise_default), _subsample_param(), seed_param()),
        description=description,
        source=source,
    )
    def load(standardise: bool = standardise_default, n: int | None = None, seed: int = 0) -> Dataset:
        # imported on first use so listing datasets stays quick
        bunch = getattr(importlib.import_module("sklearn.datasets"), loader)()
        return _from_bunch(
            name, bunch, class_names=class_names, standardise_=standardise, n=n, seed=seed, source=source
        )

    load.__name__ = name
    load.__doc__ = f"""Load {description} (shipped with scikit-learn).

    Parameters
    ----------
    standardise : bool, default {standardise_default}
        Scale every column to mean 0 and standard deviation 1 (after subsampling).
    n : int, optional
        Keep a random class-stratified subsample of ``n`` rows (sorted in the
        original order); all rows by default.
    seed : int
        Seed of the subsample (ignored without ``n``).

    Returns
    -------
    Dataset
        ``X`` in float64 and class ``labels``; ``info["feature_names"]``.
    """
    return load


# Standardise by default only where columns have different units or scales:
# digit pixels share one 0..16 scale and iris measurements are all centimetres,
# while wine and breast-cancer columns span several orders of magnitude.
digits = _bundled(
    "digits",
    "load_digits",
    class_names=False,
    standardise_default=False,
    description="8x8 images of handwritten digits, 1797 x 64, 10 classes",
    source="UCI Optical Recognition of Handwritten Digits, via sklearn.datasets.load_digits",
)
iris = _bundled(
    "iris",
    "load_iris",
    class_names=True,
    standardise_default=False,
    description="iris flower measurements, 150 x 4, 3 species",
    source="Fisher (1936) iris data, via sklearn.datasets.load_iris",
)
wine = _bundled(
    "wine",
    "load_wine",
    class_names=True,
    standardise_default=True,
    description="chemical analysis of wines, 178 x 13, 3 cultivars",
    source="UCI Wine recognition data, via sklearn.datasets.load_wine",
)
breast_cancer = _bundled(
    "breast_cancer",
    "load_breast_cancer",
    class_names=True,
    standardise_default=True,
    description="cell-nucleus features of breast masses, 569 x 30, malignant or benign",
    source="UCI Breast Cancer Wisconsin (Diagnostic), via sklearn.datasets.load_breast_cancer",
)
