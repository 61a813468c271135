"""What a suite promises: the ``expect`` block of bounds a run must meet.

::

    expect:
      - {dataset: roll, method: isomap, measure: trustworthiness@10, at_least: 0.9}
      - {method: [pca, isomap], measure: stress, at_most: 0.4}
      - {measure: continuity, at_least: 0.8}           # every dataset and method

Bounds are parsed here, against the suite's already validated names; they are
judged against a run's scores in :mod:`harness.compare.expectations`.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

from ..config import MAX_EXPECT
from ..errors import InputError, suggest
from ..text import format_value, key_text, show
from ._read import is_number, measure_key, with_k

_EXPECT_KEYS = ("dataset", "method", "params", "measure", "at_least", "at_most")


@dataclass(frozen=True)
class Expectation:
    """One bound of a suite's ``expect`` block.

    Attributes
    ----------
    measure : str
        Score column, ``@k`` filled in for per-k measures (``trustworthiness@10``).
    at_least, at_most : float or None
        Bounds on the mean over seeds (inclusive).
    datasets, methods : tuple of str
        Names the bound applies to; empty means every one.
    params : tuple of (str, str)
        Parameter values a configuration must have (``("perplexity", "30")``).
    where : str
        Place in the suite (``expect[2]``).
    """

    measure: str
    at_least: float | None = None
    at_most: float | None = None
    datasets: tuple[str, ...] = ()
    methods: tuple[str, ...] = ()
    params: tuple[tuple[str, str], ...] = ()
    where: str = "expect"

    def bounds(self) -> str:
        """``>= 0.9``, ``<= 0.4`` or ``>= 0.2 and <= 0.4``."""
        parts = []
        if self.at_least is not None:
            parts.append(f">= {self.at_least:g}")
        if self.at_most is not None:
            parts.append(f"<= {self.at_most:g}")
        return " and ".join(parts)

    def describe(self) -> str:
        """``trustworthiness@10 >= 0.9 for isomap on roll``."""
        scope = []
        if self.methods:
            scope.append(f"for {', '.join(self.methods)}")
        if self.params:
            scope.append("with " + ",".join(f"{k}={v}" for k, v in self.params))
        if self.datasets:
            scope.append(f"on {', '.join(self.datasets)}")
        return " ".join([self.measure, self.bounds(), *scope])

    def holds(self, value: float) -> bool:
        """Whether a mean value meets the bounds (NaN never does)."""
        if not math.isfinite(value):
            return False
        return (self.at_least is None or value >= self.at_least) and (
            self.at_most is None or value <= self.at_most
        )


def parse_expectations(
    raw: Any,
    where: str = "expect",
    *,
    datasets: list[str] | None = None,
    methods: list[str] | None = None,
    ks: tuple[int, ...] = (),
) -> tuple[Expectation, ...]:
    """Validate an ``expect`` block.

    Parameters
    ----------
    raw : list or None
        The block: a list of mappings with ``measure`` and at least one of
        ``at_least`` / ``at_most``, optionally ``dataset``, ``method`` (a name
        or a list of names) and ``params`` (a mapping of parameter values).
    where : str
        Path of the block for messages.
    datasets, methods : list of str, optional
        Names of the suite's (already validated) datasets and methods; when
        given, names in the block are checked against them.
    ks : tuple of int
        The suite's neighbourhood sizes: ``@k`` must be one of them, and a
        per-k measure without ``@k`` means the first.

    Returns
    -------
    tuple of Expectation

    Raises
    ------
    InputError
        Naming the entry (``expect[2].at_least``) and what was expected.
    """
    if raw is None:
        return ()
    if not isinstance(raw, list):
        raise InputError(where, f"expected a list of bounds, got {show(raw)}")
    if len(raw) > MAX_EXPECT:
        raise InputError(where, f"expected at most {MAX_EXPECT:,} bounds, got {len(raw):,}")
    out = []
    for i, item in enumerate(raw):
        at = f"{where}[{i}]"
        if not isinstance(item, Mapping):
            raise InputError(
                at,
                "expected a mapping such as {dataset: roll, method: isomap, "
                f"measure: trustworthiness@10, at_least: 0.9}}, got {show(item)}",
            )
        for key in item:
            if key not in _EXPECT_KEYS:
                raise InputError(
                    f"{at}.{key_text(key)}",
                    f"unknown key{suggest(str(key), _EXPECT_KEYS)}; "
                    f"expected one of {', '.join(_EXPECT_KEYS)}",
                )
        if "measure" not in item:
            raise InputError(f"{at}.measure", "missing: the measure to bound, e.g. trustworthiness@10")
        measure = _measure_column(item["measure"], f"{at}.measure", ks)
        bounds = {}
        for key in ("at_least", "at_most"):
            value = item.get(key)
            if value is not None and (not is_number(value) or not math.isfinite(value)):
                raise InputError(f"{at}.{key}", f"expected a number, got {show(value)}")
            bounds[key] = None if value is None else float(value)
        if bounds["at_least"] is None and bounds["at_most"] is None:
            raise InputError(at, "expected at_least, at_most or both")
        if (
            bounds["at_least"] is not None
            and bounds["at_most"] is not None
            and bounds["at_least"] > bounds["at_most"]
        ):
            raise InputError(
                f"{at}.at_most",
                f"expected at_most >= at_least ({bounds['at_least']:g}), got {bounds['at_most']:g}",
            )
        out.append(
            Expectation(
                measure=measure,
                at_least=bounds["at_least"],
                at_most=bounds["at_most"],
                datasets=_names(item.get("dataset"), f"{at}.dataset", datasets, "dataset"),
                methods=_names(item.get("method"), f"{at}.method", methods, "method"),
                params=_param_selector(item.get("params"), f"{at}.params"),
                where=at,
            )
        )
    return tuple(out)


def _measure_column(value: Any, where: str, ks: tuple[int, ...]) -> str:
    if not isinstance(value, str):
        raise InputError(where, f"expected a measure name such as trustworthiness@10, got {show(value)}")
    return with_k(measure_key(value, where, ks), ks)


def _names(value: Any, where: str, known: list[str] | None, what: str) -> tuple[str, ...]:
    if value is None:
        return ()
    items = value if isinstance(value, list) else [value]
    if not items:
        raise InputError(where, f"expected a {what} name or a list of them (leave out for all)")
    for j, name in enumerate(items):
        at = f"{where}[{j}]" if isinstance(value, list) else where
        if not isinstance(name, str):
            raise InputError(at, f"expected a {what} name, got {show(name)}")
        if known is not None and name not in known:
            raise InputError(
                at,
                f"unknown {what} {name!r}{suggest(name, known)}; the suite's {what}s are {', '.join(known)}",
            )
    return tuple(items)


def _param_selector(value: Any, where: str) -> tuple[tuple[str, str], ...]:
    if value is None:
        return ()
    if not isinstance(value, Mapping) or not value:
        raise InputError(
            where, f"expected a mapping of parameter values such as {{perplexity: 30}}, got {show(value)}"
        )
    out = []
    for key, v in value.items():
        if not isinstance(key, str) or isinstance(v, (list, dict)):
            raise InputError(f"{where}.{key_text(key)}", f"expected one value, got {show(v)}")
        out.append((key, format_value(v)))
    return tuple(out)
