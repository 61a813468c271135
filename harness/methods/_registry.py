"""Registry of embedding methods, filled by the :func:`register_method` decorator."""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import Any, Literal

from ..params import Param

Family = Literal["linear", "distance", "neighbour", "spectral", "other"]


@dataclass(frozen=True)
class MethodSpec:
    """A registered embedding method.

    Parameters
    ----------
    name : str
        Registry name used in suites (``use: tsne``).
    build : callable
        ``build(n_components, seed, precomputed, **params) -> estimator`` with a
        ``fit_transform(X)`` method; when ``precomputed`` is true the estimator is
        configured to take a square distance matrix.
    params : tuple of Param
        Parameters a suite may set or put in a grid.
    description : str
        One line for ``foldbench list methods``.
    family : str
        ``linear``, ``distance`` (keeps pairwise distances), ``neighbour`` (keeps
        neighbourhoods; cluster sizes and gaps mean little), ``spectral`` or ``other``.
    accepts_distances : bool
        Works from a precomputed distance matrix.
    randomized : bool
        Uses its seed.
    quadratic_memory : bool
        Memory grows as n squared (dense pairwise matrices).
    source : str
        Publication or library behind it.
    """

    name: str
    build: Callable[..., Any]
    params: tuple[Param, ...]
    description: str
    family: Family = "other"
    accepts_distances: bool = False
    randomized: bool = True
    quadratic_memory: bool = False
    source: str = ""


METHODS: dict[str, MethodSpec] = {}


def register_method(
    name: str,
    *,
    params: tuple[Param, ...] = (),
    description: str,
    family: Family = "other",
    accepts_distances: bool = False,
    randomized: bool = True,
    quadratic_memory: bool = False,
    source: str = "",
) -> Callable[[Callable[..., Any]], Callable[..., Any]]:
    """Decorator that adds an estimator builder to :data:`METHODS`."""

    def wrap(fn: Callable[..., Any]) -> Callable[..., Any]:
        METHODS[name] = MethodSpec(
            name,
            fn,
            tuple(params),
            description,
            family,
            accepts_distances,
            randomized,
            quadratic_memory,
            source,
        )
        return fn

    return wrap
