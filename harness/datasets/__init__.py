"""Datasets: a registry of loaders returning :class:`Dataset` values.

Importing this package registers the built-in loaders.
"""
from ._registry import DATASETS, DatasetSpec, get_dataset_spec, load_dataset, register_dataset
from ._types import Dataset
from . import synthetic, scenario, bundled, tables  # noqa: F401  (registration)

__all__ = ["DATASETS", "Dataset", "DatasetSpec", "get_dataset_spec", "load_dataset",
           "register_dataset"]
