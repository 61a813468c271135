"""Registry of dataset loaders, filled by the :func:`register_dataset` decorator."""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass
from typing import Any

from ..errors import InputError, suggest
from ..params import Param
from ._types import Dataset


@dataclass(frozen=True)
class DatasetSpec:
    """A registered dataset loader.

    Parameters
    ----------
    name : str
        Registry name used in suites (``use: rolled_sheet``).
    load : callable
        ``load(**params) -> Dataset``; pure: the same parameters give the same data.
    params : tuple of Param
        Declared parameters (validated before anything runs).
    description : str
        One line for ``foldbench list datasets``.
    source : str
        Where the data or its construction comes from.
    footprint : callable, optional
        ``footprint(params) -> bytes``: memory the loader needs at its peak
        while it builds the data, so a size too large for the machine is
        refused before anything is allocated (generated datasets give one).
    """

    name: str
    load: Callable[..., Dataset]
    params: tuple[Param, ...]
    description: str
    source: str = ""
    footprint: Callable[[Mapping[str, Any]], int] | None = None


DATASETS: dict[str, DatasetSpec] = {}


def register_dataset(
    name: str,
    *,
    params: tuple[Param, ...] = (),
    description: str,
    source: str = "",
    footprint: Callable[[Mapping[str, Any]], int] | None = None,
) -> Callable[[Callable[..., Dataset]], Callable[..., Dataset]]:
    """Decorator that adds a loader to :data:`DATASETS`."""

    def wrap(fn: Callable[..., Dataset]) -> Callable[..., Dataset]:
        DATASETS[name] = DatasetSpec(name, fn, tuple(params), description, source, footprint)
        return fn

    return wrap


def get_dataset_spec(name: str, where: str = "") -> DatasetSpec:
    """Look up a dataset by registry name, or raise a one-line :class:`InputError`."""
    try:
        return DATASETS[name]
    except KeyError:
        raise InputError(
            where, f"unknown dataset '{name}'{suggest(name, DATASETS)}; see 'foldbench list datasets'"
        ) from None


def load_dataset(name: str, params: dict[str, Any] | None = None, *, label: str | None = None) -> Dataset:
    """Load a registered dataset with already-validated parameters."""
    spec = get_dataset_spec(name)
    ds = spec.load(**(params or {}))
    if label and label != ds.name:
        ds = Dataset(label, ds.X, ds.distances, ds.labels, ds.latent, dict(ds.info))
    return ds
