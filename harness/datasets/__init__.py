"""Datasets: a registry of loaders returning :class:`Dataset` values.

Importing this package registers the built-in loaders.
"""

from . import annotated, bundled, scenario, synthetic, tables  # noqa: F401  (registration)
from ._registry import DATASETS, DatasetSpec, get_dataset_spec, load_dataset, register_dataset
from ._types import Dataset

__all__ = ["DATASETS", "Dataset", "DatasetSpec", "get_dataset_spec", "load_dataset", "register_dataset"]
