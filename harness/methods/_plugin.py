"""Plug-in methods: any estimator with ``fit_transform``, named ``package.module:Name``.

The small protocol a plug-in may follow:

- ``n_components`` and ``random_state`` are passed to the constructor when it
  has parameters of those names; other suite parameters are passed by name.
- A class attribute ``accepts_distances = True`` says the estimator can embed a
  square distance matrix; it must then have a ``metric`` constructor parameter,
  which is set to ``"precomputed"`` for distance-only datasets.
- A class attribute ``quadratic_memory = True`` marks memory growing as n squared.
"""
from __future__ import annotations

import importlib
import inspect
import re
from typing import Any

from .._params import Param
from ..errors import InputError, suggest
from ._registry import MethodSpec

_PATH = re.compile(r"^[A-Za-z_][\w]*(\.[A-Za-z_][\w]*)*:[A-Za-z_][\w]*$")
_MANAGED = ("n_components", "random_state", "metric")


def plugin_spec(path: str, where: str = "") -> MethodSpec:
    """Resolve ``package.module:Name`` to a :class:`MethodSpec`.

    Parameters
    ----------
    path : str
        Module path and attribute name; the attribute is a class with
        ``fit_transform`` or a callable returning such an object.
    where : str
        Location for error messages (file and field of the suite).

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
        module = importlib.import_module(module_name)
    except ImportError as exc:
        raise InputError(where, f"plug-in '{path}': cannot import module '{module_name}' ({exc})") from None
    except Exception as exc:  # a plug-in module that fails while importing is still a user error
        raise InputError(where, f"plug-in '{path}': importing '{module_name}' failed with "
                                f"{type(exc).__name__}: {exc}") from None
    if not hasattr(module, attr):
        public = [n for n in dir(module) if not n.startswith("_")]
        raise InputError(where, f"plug-in '{path}': module '{module_name}' has no '{attr}'"
                                f"{suggest(attr, public)}")
    target = getattr(module, attr)
    if inspect.isclass(target):
        if not callable(getattr(target, "fit_transform", None)):
            raise InputError(where, f"plug-in '{path}': class '{attr}' has no fit_transform method")
    elif not callable(target):
        raise InputError(where, f"plug-in '{path}': '{attr}' is a {type(target).__name__}, "
                                f"expected an estimator class or a factory")
    try:
        signature = inspect.signature(target)
    except (TypeError, ValueError):
        raise InputError(where, f"plug-in '{path}': cannot read the parameters of '{attr}'") from None
    named = {name: p for name, p in signature.parameters.items()
             if p.kind not in (p.VAR_POSITIONAL, p.VAR_KEYWORD)}
    accepts_distances = bool(getattr(target, "accepts_distances", False))
    if accepts_distances and "metric" not in named:
        raise InputError(where, f"plug-in '{path}': declares accepts_distances but its "
                                f"constructor has no 'metric' parameter")
    params = tuple(Param(name, object, None if p.default is p.empty else p.default,
                         "plug-in constructor parameter")
                   for name, p in named.items() if name not in _MANAGED)
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
    )


def _builder(path: str, target: Any, named: dict[str, inspect.Parameter], where: str):
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
            raise InputError(where, f"plug-in '{path}' returned a {type(estimator).__name__}, "
                                    f"which has no fit_transform method")
        return estimator
    return build
