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
    places_new_points : bool
        The fitted estimator has ``transform`` for points it was not fitted on.
    requires : tuple of str, optional
        ``(module, distribution)`` of an optional package the method needs
        (imported only when it is fitted); empty for methods of the base install.
    content_identity : callable, optional
        ``content_identity(params, seed) -> str`` for methods whose output depends on
        something outside their parameters (a file's bytes); the cache key
        includes it.
    check_dataset : callable, optional
        ``check_dataset(params, dataset, dimensions, seeds) -> str``: a reason the
        method cannot run on that dataset ("" when it can), found when planning.
        A method refused this way on every dataset of a suite stops the suite
        with that reason (it is bound to data, like a stored embedding).
    seed_free : callable, optional
        ``seed_free(params, precomputed) -> bool``: the output does not depend on the
        seed for these parameters, on coordinates or (``precomputed``) on a distance
        matrix (checked by fitting two seeds and comparing bytes).  When not given,
        a method that is not ``randomized`` is seed-free.
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
    places_new_points: bool = False
    requires: tuple[str, ...] = ()
    content_identity: Callable[[dict[str, Any], int], str] | None = None
    check_dataset: Callable[..., str] | None = None
    seed_free: Callable[[dict[str, Any], bool], bool] | None = None

    def ignores_seed(self, params: dict[str, Any], precomputed: bool = False) -> bool:
        """Whether a fit with ``params`` gives the same bytes for every seed (fit once, copy the rest).

        ``precomputed`` says the data are a distance matrix (some starts need coordinates).
        """
        if self.seed_free is not None:
            return bool(self.seed_free(params, precomputed))
        return not self.randomized

    def missing_package(self) -> str | None:
        """The distribution to install when the method's package is absent, else ``None``."""
        if not self.requires:
            return None
        import importlib.util

        try:
            found = importlib.util.find_spec(self.requires[0]) is not None
        except (ImportError, ValueError):
            found = False
        return None if found else self.requires[1]

    def package_version(self) -> str | None:
        """Installed version of the method's optional package (``None`` for base methods)."""
        if not self.requires:
            return None
        from importlib import metadata

        try:
            return metadata.version(self.requires[1])
        except metadata.PackageNotFoundError:
            return None


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
    places_new_points: bool = False,
    requires: tuple[str, ...] = (),
    content_identity: Callable[[dict[str, Any], int], str] | None = None,
    check_dataset: Callable[..., str] | None = None,
    seed_free: Callable[[dict[str, Any], bool], bool] | None = None,
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
            places_new_points,
            requires,
            content_identity,
            check_dataset,
            seed_free,
        )
        return fn

    return wrap
