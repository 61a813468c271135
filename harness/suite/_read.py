"""Reading a suite document: typed access to its YAML values, each failure one :class:`InputError`."""

from __future__ import annotations

import re
from collections.abc import Mapping
from typing import Any

from ..errors import InputError, suggest
from ..metrics import MEASURES
from ..text import key_text, show

_SAFE_NAME = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_.-]{0,63}$")
_SIZE_UNITS = {"": 1, "b": 1, "kb": 10**3, "mb": 10**6, "gb": 10**9, "kib": 2**10, "mib": 2**20, "gib": 2**30}


def mapping(value: Any, where: str, what: str) -> Mapping[str, Any]:
    """``value`` as a mapping with text keys, or an error naming ``what`` was expected."""
    if not isinstance(value, Mapping):
        raise InputError(where, f"expected {what} (a mapping of keys to values), got {show(value)}")
    for key in value:
        if not isinstance(key, str):
            raise InputError(where, f"expected text keys, got {show(key)}")
    return value


def listed(value: Any, where: str, what: str) -> list[Any]:
    """``value`` as a list, or an error naming ``what`` was expected."""
    if not isinstance(value, list):
        raise InputError(where, f"expected {what} (a list), got {show(value)}")
    return value


def no_unknown(given: Mapping[str, Any], known: tuple[str, ...], where: str) -> None:
    """Refuse keys outside ``known``, suggesting the closest one."""
    for key in given:
        if key not in known:
            prefix = f"{where}." if where else ""
            raise InputError(
                f"{prefix}{key_text(key)}",
                f"unknown key{suggest(key, known)}; expected one of {', '.join(known)}",
            )


def integer(value: Any, where: str, low: int | None = None) -> int:
    """An integer (not a bool), at least ``low`` when given."""
    if isinstance(value, bool) or not isinstance(value, int):
        raise InputError(where, f"expected an integer, got {show(value)}")
    if low is not None and value < low:
        raise InputError(where, f"expected an integer >= {low}, got {value}")
    return value


def plain_name(value: Any, where: str) -> str:
    """A name safe as a folder name: letters, digits, ``_ - .``, no ``..``."""
    if not isinstance(value, str) or not _SAFE_NAME.match(value) or ".." in value:
        raise InputError(
            where,
            "expected a name of letters, digits, '_', '-' or '.' (at most 64, "
            f"starting with a letter or digit, no '..'), got {show(value)}",
        )
    return value


def unique_names(names: list[str], where: str) -> None:
    """Refuse a name used twice in one list of entries."""
    seen: set[str] = set()
    for i, name in enumerate(names):
        if name in seen:
            raise InputError(
                f"{where}[{i}].name",
                f"expected a unique name, '{name}' is used twice; give each entry its own 'name'",
            )
        seen.add(name)


def parse_size(value: Any, where: str) -> int:
    """Parse a memory size such as ``2GB``, ``512MiB`` or a number of bytes."""
    if isinstance(value, int) and not isinstance(value, bool) and value > 0:
        return value
    if isinstance(value, str):
        m = re.fullmatch(r"\s*([0-9]+(?:\.[0-9]+)?)\s*([A-Za-z]*)\s*", value)
        if m and m.group(2).lower() in _SIZE_UNITS:
            size = int(float(m.group(1)) * _SIZE_UNITS[m.group(2).lower()])
            if size > 0:
                return size
    raise InputError(where, f"expected a memory size such as 2GB or 512MiB, got {show(value)}")


def is_number(value: Any) -> bool:
    """An int or float that is not a bool."""
    return isinstance(value, (int, float)) and not isinstance(value, bool)


def measure_key(name: str, where: str, ks: tuple[int, ...] = (), *, any_k: bool = False) -> str:
    """Check a measure name (``stress``, ``trustworthiness`` or ``trustworthiness@10``).

    ``@k`` must name a k of ``ks`` unless ``any_k`` (tolerances may name any k).
    """
    stem, at_sign, k = name.partition("@")
    if stem not in MEASURES:
        raise InputError(
            where, f"unknown measure {stem!r}{suggest(stem, MEASURES)}; see 'foldbench list measures'"
        )
    if at_sign:
        if not (MEASURES[stem].per_k or MEASURES[stem].at_k_too):
            raise InputError(where, f"expected '{stem}' without '@k' ({stem} does not depend on k)")
        if not k.isdigit() or (not any_k and ks and int(k) not in ks):
            allowed = f" with k one of measures.k {list(ks)}" if ks else ""
            raise InputError(where, f"expected '{stem}' or '{stem}@k'{allowed}, got {name!r}")
    return name


def with_k(name: str, ks: tuple[int, ...]) -> str:
    """A per-k measure named without ``@k`` means the first k of the suite (``trustworthiness@10``)."""
    if "@" not in name and MEASURES[name].per_k:
        return f"{name}@{ks[0] if ks else 10}"
    return name
