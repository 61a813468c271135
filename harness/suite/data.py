"""The checks of a suite that need its data: sizes against k, perplexity, neighbours, dimensions."""

from __future__ import annotations

from collections.abc import Mapping
from pathlib import Path
from typing import Any

import numpy as np

from ..config import DATASET_MEMORY_SHARE, usable_memory_bytes
from ..datasets import Dataset, get_dataset_spec, load_dataset
from ..errors import InputError
from ..text import show
from .model import Suite


def load_datasets(suite: Suite) -> dict[str, Dataset]:
    """Load every dataset of a suite and check the suite against their sizes.

    Checks that need the data: k < n - 1 for every k, perplexity < n / 3,
    n_neighbors < n, dimensions <= n_features.

    Returns
    -------
    dict
        Dataset name to :class:`Dataset`, in suite order.
    """
    label = Path(suite.path).name
    data: dict[str, Dataset] = {}
    for i, entry in enumerate(suite.datasets):
        _check_footprint(entry.use, entry.params, f"{label}: datasets[{i}].params")
    for i, entry in enumerate(suite.datasets):
        try:
            data[entry.name] = load_dataset(entry.use, dict(entry.params), label=entry.name)
        except InputError as err:
            raise InputError(err.where or f"{label}: datasets[{i}]", err.expected) from None
    for i, entry in enumerate(suite.datasets):
        _check_against(suite, data[entry.name], f"datasets[{i}] ('{entry.name}')", label)
        if entry.holdout is not None:
            _check_holdout(suite, entry.holdout, data[entry.name], f"datasets[{i}] ('{entry.name}')", label)
    return data


def heldout_count(holdout: float | int, n: int) -> int:
    """Points a holdout setting takes out of n (a fraction rounds up, as scikit-learn's split does)."""
    return int(holdout) if isinstance(holdout, int) else int(np.ceil(holdout * n))


def _check_holdout(suite: Suite, holdout: float | int, ds: Dataset, which: str, label: str) -> None:
    """Refuse a split that leaves either side too small for the largest k (k < n/2 on each side)."""
    where = f"{label}: {which} holdout"
    if ds.is_precomputed:
        raise InputError(
            where, "expected a dataset of feature coordinates; a distance matrix has no rows to hold out"
        )
    n_test = heldout_count(holdout, ds.n)
    n_train = ds.n - n_test
    k = max(suite.scoring.ks)
    if min(n_train, n_test) <= 2 * k:
        raise InputError(
            where,
            f"expected more than 2k = {2 * k} training and held-out points (k < n/2 on each side); "
            f"holdout {holdout} of n={ds.n} leaves {n_train} training and {n_test} held-out",
        )
    if ds.labels is not None:
        classes = np.unique(np.asarray(ds.labels)).size
        if min(n_train, n_test) < classes:
            raise InputError(
                where,
                f"expected at least one point of each of the {classes} classes on each side of the "
                f"stratified split; holdout {holdout} of n={ds.n} leaves {n_train} training "
                f"and {n_test} held-out",
            )


def _check_labels(labels: Any, which: str, label: str) -> None:
    """Refuse labels no label measure can use: a class of one member, or one class per row (an id)."""
    classes, counts = np.unique(np.asarray(labels), return_counts=True)
    n = len(labels)
    if classes.size == n:
        raise InputError(
            f"{label}: {which} labels",
            f"expected class labels shared by several rows; all {n} rows have different labels "
            "(an id column?); name a column of classes, or none",
        )
    if counts.min() < 2:
        lonely = classes[counts < 2]
        raise InputError(
            f"{label}: {which} labels",
            "expected at least 2 rows in every class (k-NN accuracy is cross-validated); "
            f"{lonely.size} class{'es' * (lonely.size != 1)} with a single row, "
            f"first {show(lonely[0].item())}",
        )


def _check_footprint(use: str, params: Mapping[str, Any], where: str) -> None:
    """Refuse a generated dataset whose construction would not fit in memory, before it is built."""
    spec = get_dataset_spec(use)
    if spec.footprint is None:
        return
    need = spec.footprint(params)
    usable = usable_memory_bytes()
    if usable is None:
        return
    budget = int(usable * DATASET_MEMORY_SHARE)
    if need > budget:
        sizes = ", ".join(f"{k}={params[k]:,}" for k in ("n", "n_features") if isinstance(params.get(k), int))
        raise InputError(
            where,
            f"expected a dataset that fits in memory: {sizes} needs about {_gib(need)} while it is "
            f"built, {_gib(budget)} allowed ({DATASET_MEMORY_SHARE:.0%} of the {_gib(usable)} this "
            "process may use); choose a smaller n",
        )


def _gib(size: float) -> str:
    return f"{size / 2**30:,.1f} GiB" if size >= 2**27 else f"{size / 2**20:,.0f} MiB"


def _check_against(suite: Suite, ds: Dataset, which: str, label: str) -> None:
    n = ds.n
    for j, k in enumerate(suite.scoring.ks):
        # the trustworthiness normaliser 2 / (n k (2n - 3k - 1)) keeps values in [0, 1] only for k < n/2
        if k >= n / 2:
            raise InputError(
                f"{label}: measures.k[{j}]", f"expected k < n/2 = {n / 2:g} for {which} with n={n}, got {k}"
            )
    if ds.labels is not None:
        _check_labels(ds.labels, which, label)
    if ds.n_features is not None and suite.dimensions > ds.n_features:
        raise InputError(
            f"{label}: dimensions",
            f"expected at most {ds.n_features} (the number of features of {which}), got {suite.dimensions}",
        )
    if suite.dimensions >= n:
        raise InputError(
            f"{label}: dimensions", f"expected fewer than n={n} for {which}, got {suite.dimensions}"
        )
    limits = {"perplexity": (n / 3, "n/3"), "n_neighbors": (n - 1, "n - 1")}
    for mi, m in enumerate(suite.methods):
        for key, (bound, text) in limits.items():
            places = [(f"methods[{mi}].params.{key}", m.params[key])] if key in m.params else []
            places += [(f"methods[{mi}].grid.{key}[{j}]", v) for j, v in enumerate(m.grid.get(key, ()))]
            for at, value in places:
                if isinstance(value, (int, float)) and value >= bound:
                    raise InputError(
                        f"{label}: {at}",
                        f"expected {key} < {text} = {bound:g} for {which} with n={n}, got {value}",
                    )
