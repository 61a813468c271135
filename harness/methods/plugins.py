"""Plug-in methods: any estimator with ``fit_transform``, found by path or by entry point.

A suite names a plug-in as ``package.module:Name``, or by a short name that a
distribution registers in the entry-point group ``foldbench.methods``
(``[project.entry-points."foldbench.methods"] autoencoder = "mylab.embed:Autoencoder"``).
This module is the only place that resolves them, and the only place in the
package that touches ``sys.path``: the folders given as ``roots`` (the working
folder and the suite's folder) are importable for the duration of one import
and removed again, so reading a suite leaves the interpreter as it found it.

The small protocol a plug-in may follow:

- ``n_components`` and ``random_state`` are passed to the constructor when it
  has parameters of those names; other suite parameters are passed by name.
- A class attribute ``accepts_distances = True`` says the estimator can embed a
  square distance matrix; it must then have a ``metric`` constructor parameter,
  which is set to ``"precomputed"`` for distance-only datasets.
- A class attribute ``quadratic_memory = True`` marks memory growing as n squared.

:func:`check_method` tells a plug-in author whether a class satisfies it.
"""

from __future__ import annotations

import importlib
import importlib.metadata as md
import inspect
import re
import sys
from collections.abc import Callable, Iterator, Sequence
from contextlib import contextmanager
from types import ModuleType
from typing import Any

import numpy as np

from ..errors import InputError, suggest
from ..params import Param
from ..text import exception_line
from ._registry import MethodSpec

#: Entry-point group through which installed distributions offer methods.
ENTRY_POINT_GROUP = "foldbench.methods"

_PATH = re.compile(r"^[A-Za-z_][\w]*(\.[A-Za-z_][\w]*)*:[A-Za-z_][\w]*$")
_MANAGED = ("n_components", "random_state", "metric")


@contextmanager
def _importable_from(roots: Sequence[str]) -> Iterator[None]:
    """Put ``roots`` at the end of the import path for one import, then take them away."""
    added = [r for r in dict.fromkeys(roots) if r not in sys.path]
    sys.path.extend(added)
    try:
        yield
    finally:
        for root in added:
            if root in sys.path:
                sys.path.remove(root)


def import_plugin_module(module_name: str, roots: Sequence[str] = (), where: str = "") -> ModuleType:
    """Import a plug-in's module, also looking in ``roots``; errors become one line."""
    try:
        with _importable_from(roots):
            return importlib.import_module(module_name)
    except ImportError as exc:
        raise InputError(where, f"cannot import module '{module_name}' ({exc})") from None
    except SystemExit as exc:
        raise InputError(where, f"importing '{module_name}' called sys.exit({exc.code})") from None
    except Exception as exc:  # a plug-in module that fails while importing is still a user error
        raise InputError(where, f"importing '{module_name}' failed with {exception_line(exc)}") from None


def entry_point_target(name: str) -> str | None:
    """The ``package.module:Name`` an installed distribution registers under ``name``, if any."""
    for ep in md.entry_points(group=ENTRY_POINT_GROUP):
        if ep.name == name:
            return str(ep.value).replace(" ", "")
    return None


def entry_point_names() -> list[str]:
    """Method names offered through the ``foldbench.methods`` entry-point group."""
    return sorted(ep.name for ep in md.entry_points(group=ENTRY_POINT_GROUP))


def plugin_spec(path: str, where: str = "", roots: Sequence[str] = ()) -> MethodSpec:
    """Resolve ``package.module:Name`` to a :class:`MethodSpec`.

    Parameters
    ----------
    path : str
        Module path and attribute name; the attribute is a class with
        ``fit_transform`` or a callable returning such an object.
    where : str
        Location for error messages (file and field of the suite).
    roots : sequence of str
        Extra folders to import the module from (for this import only).

    Returns
    -------
    MethodSpec
        With ``family="other"``; ``params`` mirror the constructor's
        parameters (any type) except ``n_components``, ``random_state`` and
        ``metric``, which the harness sets.

    Raises
    ------
    InputError
        Malformed path, module that cannot be imported, missing attribute, or
        something that is not an estimator.
    """
    if not _PATH.match(path):
        raise InputError(where, f"a plug-in named 'package.module:Name', got '{path}'")
    module_name, attr = path.split(":")
    try:
        module = import_plugin_module(module_name, roots, where)
    except InputError as err:
        raise InputError(err.where, f"plug-in '{path}': {err.expected}") from None
    if not hasattr(module, attr):
        public = [n for n in dir(module) if not n.startswith("_")]
        raise InputError(
            where, f"plug-in '{path}': module '{module_name}' has no '{attr}'{suggest(attr, public)}"
        )
    target = getattr(module, attr)
    named = _constructor_parameters(path, target, where)
    accepts_distances = bool(getattr(target, "accepts_distances", False))
    if accepts_distances and "metric" not in named:
        raise InputError(
            where,
            f"plug-in '{path}': declares accepts_distances but its constructor has no 'metric' parameter",
        )
    params = tuple(
        Param(name, object, None if p.default is p.empty else p.default, "plug-in constructor parameter")
        for name, p in named.items()
        if name not in _MANAGED
    )
    doc = inspect.getdoc(target) or ""
    return MethodSpec(
        name=path,
        build=_builder(path, target, named, where),
        params=params,
        description=doc.splitlines()[0] if doc else f"plug-in {path}",
        family="other",
        accepts_distances=accepts_distances,
        randomized="random_state" in named,
        quadratic_memory=bool(getattr(target, "quadratic_memory", False)),
        source=path,
        places_new_points=inspect.isclass(target) and callable(getattr(target, "transform", None)),
    )


def _constructor_parameters(path: str, target: Any, where: str) -> dict[str, inspect.Parameter]:
    if inspect.isclass(target):
        if not callable(getattr(target, "fit_transform", None)):
            raise InputError(
                where, f"plug-in '{path}': class '{target.__name__}' has no fit_transform method"
            )
    elif not callable(target):
        raise InputError(
            where,
            f"plug-in '{path}': '{path.split(':')[1]}' is a {type(target).__name__}, "
            "expected an estimator class or a factory",
        )
    try:
        signature = inspect.signature(target)
    except (TypeError, ValueError):
        raise InputError(
            where, f"plug-in '{path}': cannot read the parameters of '{path.split(':')[1]}'"
        ) from None
    return {
        name: p for name, p in signature.parameters.items() if p.kind not in (p.VAR_POSITIONAL, p.VAR_KEYWORD)
    }


def _builder(path: str, target: Any, named: dict[str, inspect.Parameter], where: str) -> Callable[..., Any]:
    """Return ``build(n_components, seed, precomputed, **params)`` for a plug-in."""

    def build(n_components: int, seed: int, precomputed: bool, **params: Any) -> Any:
        kwargs: dict[str, Any] = {}
        for name, value in params.items():
            # None stands for "not set": leave the constructor's own default.
            if value is None and name in named and named[name].default is not named[name].empty:
                continue
            kwargs[name] = value
        if "n_components" in named:
            kwargs["n_components"] = n_components
        if "random_state" in named:
            kwargs["random_state"] = seed
        if precomputed and "metric" in named:
            kwargs["metric"] = "precomputed"
        estimator = target(**kwargs)
        if not callable(getattr(estimator, "fit_transform", None)):
            raise InputError(
                where,
                f"plug-in '{path}' returned a {type(estimator).__name__}, which has no fit_transform method",
            )
        return estimator

    return build


def check_method(obj: Any, *, n: int = 60, n_components: int = 2, seed: int = 0) -> list[str]:
    """Tell a plug-in author whether ``obj`` satisfies foldbench's method contract.

    Checks, in order: ``obj`` is a class with ``fit_transform`` or a factory;
    its constructor's parameters can be read; ``accepts_distances`` comes with
    a ``metric`` parameter; it can be built with its defaults; ``fit_transform``
    on a small seeded Gaussian table returns a finite ``(n, n_components)``
    array whose points do not all coincide; with ``random_state``, the same
    seed gives the same embedding twice.

    Parameters
    ----------
    obj : class or callable
        The plug-in, as a suite would name it.
    n : int
        Rows of the test table.
    n_components : int
        Output dimension asked for.
    seed : int
        Seed of the test table and of ``random_state``.

    Returns
    -------
    list of str
        Problems found, each one line; empty when the contract is met.

    Examples
    --------
    >>> from sklearn.decomposition import PCA
    >>> check_method(PCA)
    []
    """
    from ._fit import DegenerateEmbedding, check_embedding

    path = f"{getattr(obj, '__module__', '?')}:{getattr(obj, '__name__', type(obj).__name__)}"
    try:
        named = _constructor_parameters(path, obj, "")
    except InputError as err:
        return [err.expected]
    problems = []
    if getattr(obj, "accepts_distances", False) and "metric" not in named:
        problems.append("declares accepts_distances but its constructor has no 'metric' parameter")
    X = np.random.default_rng(seed).normal(size=(n, max(4, n_components + 2)))
    build = _builder(path, obj, named, "")
    outputs = []
    for _ in range(2 if "random_state" in named else 1):
        try:
            raw = build(n_components, seed, False).fit_transform(X)
            outputs.append(check_embedding(raw, n, n_components, path))
        except DegenerateEmbedding as exc:
            return [*problems, f"fit_transform output is not usable: {exc.reason}"]
        except Exception as exc:  # whatever a plug-in raises is the finding
            return [*problems, f"building or fitting with defaults raised {exception_line(exc)}"]
    if len(outputs) == 2 and not np.array_equal(outputs[0], outputs[1]):
        problems.append(
            "the same random_state gave different embeddings (the seed does not fix its randomness)"
        )
    return problems
