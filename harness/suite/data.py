"""The checks of a suite that need its data: sizes against k, perplexity, neighbours, dimensions."""

from __future__ import annotations

from pathlib import Path

from ..datasets import Dataset, load_dataset
from ..errors import InputError
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
        try:
            data[entry.name] = load_dataset(entry.use, dict(entry.params), label=entry.name)
        except InputError as err:
            raise InputError(err.where or f"{label}: datasets[{i}]", err.expected) from None
    for i, entry in enumerate(suite.datasets):
        _check_against(suite, data[entry.name], f"datasets[{i}] ('{entry.name}')", label)
    return data


def _check_against(suite: Suite, ds: Dataset, which: str, label: str) -> None:
    n = ds.n
    for j, k in enumerate(suite.scoring.ks):
        if k >= n - 1:
            raise InputError(
                f"{label}: measures.k[{j}]", f"expected k < n - 1 = {n - 1} for {which} with n={n}, got {k}"
            )
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
