"""Declared parameters of registry entries (datasets and methods).

A registry entry lists its parameters as :class:`Param` values.  The suite
loader checks user values against them once, at the edge, and everything
downstream trusts the result.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from typing import Any

from .errors import InputError, suggest

_TYPE_NAMES = {
    bool: "true/false",
    int: "an integer",
    float: "a number",
    str: "text",
    list: "a list",
    dict: "a mapping",
}


@dataclass(frozen=True)
class Param:
    """One parameter of a dataset or method.

    Parameters
    ----------
    name : str
        Key as written in a suite.
    kind : type or tuple of types
        Accepted Python type(s) after YAML parsing (``float`` also accepts ints).
    default : Any
        Value used when the suite does not give one (``None`` means "not set").
    doc : str
        One line for ``foldbench list``.
    check : callable, optional
        ``check(value) -> str | None``; returns what was expected when the value
        is impossible (e.g. ``"a number >= 0"``), ``None`` when it is fine.
    choices : tuple, optional
        Allowed values (for text options).
    """

    name: str
    kind: type | tuple[type, ...]
    default: Any = None
    doc: str = ""
    check: Callable[[Any], str | None] | None = None
    choices: tuple | None = None

    def type_name(self) -> str:
        kinds = self.kind if isinstance(self.kind, tuple) else (self.kind,)
        return " or ".join(_TYPE_NAMES.get(k, k.__name__) for k in kinds)

    def validate(self, value: Any, where: str) -> Any:
        """Return the value (ints widened to float where a float is declared)."""
        kinds = self.kind if isinstance(self.kind, tuple) else (self.kind,)
        if value is None and self.default is None:
            return None
        ok = False
        for k in kinds:
            if isinstance(value, bool) and k is not bool:
                continue
            if k is float and isinstance(value, int) and int not in kinds:
                value = float(value)
            if isinstance(value, k):
                ok = True
                break
        if not ok:
            raise InputError(where, f"expected {self.type_name()}, got {value!r}")
        if isinstance(value, float) and not math.isfinite(value):
            raise InputError(where, f"expected a finite number, got {value!r}")
        if self.choices is not None and value not in self.choices:
            allowed = ", ".join(map(str, self.choices))
            raise InputError(
                where, f"expected one of {allowed}, got {value!r}{suggest(value, map(str, self.choices))}"
            )
        if self.check is not None:
            problem = self.check(value)
            if problem:
                raise InputError(where, f"expected {problem}, got {value!r}")
        return value


def at_least(low: float) -> Callable[[Any], str | None]:
    """Check ``value >= low``."""
    return lambda v: None if v >= low else f"a value >= {low}"


def between(low: float, high: float, *, open_low: bool = False) -> Callable[[Any], str | None]:
    """Check ``low <= value <= high`` (or ``low < value`` with ``open_low``)."""

    def check(v: Any) -> str | None:
        ok = (v > low if open_low else v >= low) and v <= high
        return None if ok else f"a value in {'(' if open_low else '['}{low}, {high}]"

    return check


def validate_params(
    given: Mapping[str, Any] | None, params: tuple[Param, ...], where: str, *, fill_defaults: bool = True
) -> dict[str, Any]:
    """Check a mapping of user values against declared parameters.

    Parameters
    ----------
    given : mapping or None
        Values from the suite.
    params : tuple of Param
        Declared parameters.
    where : str
        Location prefix for messages, e.g. ``"suite.yaml: datasets[0].params"``.
    fill_defaults : bool
        Add defaults for parameters that are not given.

    Returns
    -------
    dict
        Validated values.
    """
    given = {} if given is None else given
    if not isinstance(given, Mapping):
        raise InputError(where, f"expected a mapping of parameters, got {given!r}")
    known = {p.name: p for p in params}
    out: dict[str, Any] = {}
    for key, value in given.items():
        if key not in known:
            names = ", ".join(known) or "none"
            raise InputError(f"{where}.{key}", f"unknown parameter{suggest(key, known)}; known: {names}")
        out[key] = known[key].validate(value, f"{where}.{key}")
    if fill_defaults:
        for p in params:
            out.setdefault(p.name, p.default)
    return out
