"""What a suite promises: bounds a run must meet and how far a later run may drift.

Two blocks of a suite file are read here:

``expect``
    A list of bounds on mean scores (over seeds), checked at the end of every
    run::

        expect:
          - {dataset: roll, method: isomap, measure: trustworthiness@10, at_least: 0.9}
          - {method: [pca, isomap], measure: stress, at_most: 0.4}
          - {measure: continuity, at_least: 0.8}           # every dataset and method

``tolerances``
    How much worse a measure may get before ``foldbench check`` calls it a
    regression::

        tolerances:
          alpha: 0.05               # one-sided Welch test over seeds
          default: 0.01             # every quality measure: 0.01 absolute
          stress: {abs: 0.02}
          trustworthiness@30: 0.005
          fit_seconds: 0.1 + 50%    # naming a cost measure puts it into the verdict
          silhouette: off           # listed, never fails the check

This module depends only on the measure catalogue, so the suite loader can use
it without import cycles.
"""
from __future__ import annotations

import math
import re
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from .errors import InputError, suggest
from .metrics import MEASURES

_EXPECT_KEYS = ("dataset", "method", "params", "measure", "at_least", "at_most")
_TOLERANCE_KEYS = ("abs", "rel", "gate")
_DEFAULT_ALPHA = 0.05


# ---------------------------------------------------------------- tolerances

@dataclass(frozen=True)
class Tolerance:
    """How much worse a measure may get before it counts as a regression.

    The allowance is ``max(abs, rel * |baseline mean|)``: ``abs`` guards values
    near zero (a fit time of 0.01 s doubling is not news), ``rel`` scales with
    the value.  A field left ``None`` is inherited (see :func:`resolve_tolerance`).

    Attributes
    ----------
    abs : float or None
        Absolute allowance, in the measure's units.
    rel : float or None
        Relative allowance, a fraction of the baseline mean (0.25 = 25%).
    gate : bool or None
        Whether a regression of this measure fails the check.
    """

    abs: float | None = None
    rel: float | None = None
    gate: bool | None = None

    def over(self, fallback: "Tolerance") -> "Tolerance":
        """Fill the fields left ``None`` from ``fallback``."""
        return Tolerance(*(fallback_value if mine is None else mine for mine, fallback_value in
                           ((self.abs, fallback.abs), (self.rel, fallback.rel), (self.gate, fallback.gate))))

    def allowance(self, baseline: float) -> float:
        """The largest change towards worse that still counts as unchanged."""
        return max(self.abs or 0.0, (self.rel or 0.0) * abs(baseline))

    def describe(self) -> str:
        """``0.01``, ``25%``, ``0.05 + 25%`` (``off`` appended when not gated)."""
        parts = [f"{self.abs:g}"] if self.abs else []
        parts += [f"{self.rel * 100:g}%"] if self.rel else []
        text = " + ".join(parts) or "0"
        return text if self.gate is not False else f"{text} (off)"


#: Quality measures: 0.01 absolute on scores that mostly live in [0, 1].
QUALITY_DEFAULT = Tolerance(abs=0.01, rel=0.0, gate=True)
#: Cost measures move with the machine and its load, so they are listed but not
#: gated until a suite or a flag names them; 25% with a floor for tiny values.
COST_DEFAULTS = {
    "fit_seconds": Tolerance(abs=0.05, rel=0.25, gate=False),
    "fit_peak_mb": Tolerance(abs=5.0, rel=0.25, gate=False),
}


def parse_tolerances(raw: Any, where: str = "tolerances") -> dict[str, Any]:
    """Validate a ``tolerances`` block (suite file, Python mapping or parsed flags).

    Parameters
    ----------
    raw : mapping or None
        Keys are ``alpha``, ``default`` or measure names (``stress``,
        ``trustworthiness@30``).  A value is a number (absolute allowance),
        text such as ``"25%"`` or ``"0.1 + 25%"``, ``off`` / ``on`` (leave out
        of / put into the verdict, keeping the allowance), or a mapping with
        ``abs``, ``rel`` and ``gate``.
    where : str
        Path of the block for messages.

    Returns
    -------
    dict
        ``alpha`` (a float, when given) and a :class:`Tolerance` per other key.

    Raises
    ------
    InputError
        Naming the entry (``tolerances.stress.abs``) and what was expected.
    """
    if raw is None:
        return {}
    if not isinstance(raw, Mapping):
        raise InputError(where, f"expected a mapping of measure names to tolerances, got {_show(raw)}")
    out: dict[str, Any] = {}
    for key, value in raw.items():
        if not isinstance(key, str):
            raise InputError(where, f"expected measure names as keys, got {key!r}")
        at = f"{where}.{_key(key)}"
        if key == "alpha":
            if not _is_number(value) or not 0 < value < 1:
                raise InputError(at, f"expected a significance level between 0 and 1, got {_show(value)}")
            out[key] = float(value)
            continue
        if key != "default":
            _measure_key(key, at, allow_k_any=True)
        out[key] = _tolerance(value, at)
    return out


def _tolerance(value: Any, where: str) -> Tolerance:
    if isinstance(value, bool):
        # YAML reads a bare off / on as false / true.
        return Tolerance(gate=value)
    if _is_number(value):
        return Tolerance(abs=_allowance(value, where))
    if isinstance(value, str):
        return _tolerance_text(value, where)
    if isinstance(value, Mapping):
        for key in value:
            if key not in _TOLERANCE_KEYS:
                raise InputError(f"{where}.{_key(key)}", f"unknown key{suggest(str(key), _TOLERANCE_KEYS)}; "
                                                   f"expected one of {', '.join(_TOLERANCE_KEYS)}")
        if not value:
            raise InputError(where, "expected at least one of abs, rel, gate")
        gate = value.get("gate")
        if gate is not None and not isinstance(gate, bool):
            raise InputError(f"{where}.gate", f"expected true or false, got {_show(gate)}")
        return Tolerance(
            abs=None if value.get("abs") is None else _allowance(value["abs"], f"{where}.abs"),
            rel=None if value.get("rel") is None else _allowance(value["rel"], f"{where}.rel"),
            gate=gate)
    raise InputError(where, "expected a number (absolute), text like '25%' or '0.1 + 25%', off, on, "
                            f"or a mapping with abs, rel, gate; got {_show(value)}")


def _tolerance_text(text: str, where: str) -> Tolerance:
    abs_, rel, gate = None, None, None
    for part in (p.strip() for p in text.split("+")):
        if part.lower() == "off":
            gate = False
        elif part.lower() == "on":
            gate = True
        elif re.fullmatch(r"[0-9]*\.?[0-9]+(e-?[0-9]+)?%", part, re.IGNORECASE):
            rel = float(part[:-1]) / 100
        elif re.fullmatch(r"[0-9]*\.?[0-9]+(e-?[0-9]+)?", part, re.IGNORECASE):
            abs_ = float(part)
        else:
            raise InputError(where, "expected a number (absolute), a percentage like 25%, both joined "
                                    f"by '+' (0.1 + 25%), 'off' or 'on'; got {text!r}")
    return Tolerance(abs=abs_, rel=rel, gate=gate)


def _allowance(value: Any, where: str) -> float:
    if not _is_number(value) or value < 0 or not math.isfinite(value):
        raise InputError(where, f"expected a number >= 0, got {_show(value)}")
    return float(value)


def parse_tolerance_flags(flags: list[str] | tuple[str, ...]) -> dict[str, Any]:
    """Turn ``--tolerance MEASURE=VALUE`` flags into a validated tolerance mapping.

    ``VALUE`` uses the text form of the suite block: ``0.02``, ``25%``,
    ``0.1+25%`` or ``off``.  ``alpha=0.01`` sets the significance level.

    Parameters
    ----------
    flags : list of str
        The flag values in the order given (later ones win).

    Returns
    -------
    dict
        As :func:`parse_tolerances`.
    """
    raw: dict[str, Any] = {}
    for flag in flags:
        name, sep, value = flag.partition("=")
        if not sep or not name.strip() or not value.strip():
            raise InputError("--tolerance", f"expected MEASURE=VALUE such as stress=0.02 or "
                                            f"fit_seconds=0.1+25%, got {flag!r}")
        value = value.strip()
        raw[name.strip()] = float(value) if _looks_numeric(value) else value
    return parse_tolerances(raw, "--tolerance")


def resolve_tolerance(column: str, entries: Mapping[str, Any]) -> Tolerance:
    """The tolerance of one measure column, every field filled.

    Lookup, field by field: the column itself (``trustworthiness@30``), its
    measure (``trustworthiness``), then ``default`` for quality measures or the
    built-in defaults.  Naming a cost measure puts it into the verdict unless
    its entry says ``off``.
    """
    stem = column.split("@", 1)[0]
    built_in = COST_DEFAULTS.get(stem)
    chain = [entries.get(column), entries.get(stem) if stem != column else None]
    named = any(t is not None for t in chain)
    if built_in is None:
        chain.append(entries.get("default"))
        built_in = QUALITY_DEFAULT
    elif named:
        built_in = Tolerance(built_in.abs, built_in.rel, True)
    tolerance = Tolerance()
    for entry in chain:
        if entry is not None:
            tolerance = tolerance.over(entry)
    return tolerance.over(built_in)


def alpha_of(entries: Mapping[str, Any]) -> float:
    """The significance level of a tolerance mapping (0.05 when not set)."""
    return float(entries.get("alpha", _DEFAULT_ALPHA))


# ---------------------------------------------------------------- expectations

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
        return ((self.at_least is None or value >= self.at_least)
                and (self.at_most is None or value <= self.at_most))


@dataclass(frozen=True)
class ExpectationResult:
    """The verdict of one expectation on one configuration (or on none, when nothing matched).

    Attributes
    ----------
    expectation : Expectation
    dataset, method, params : str
        The configuration judged (empty when nothing matched).
    value : float
        Mean over the seeds that finished.
    seeds : int
        Seeds that finished with a value.
    passed : bool
    message : str
        One line naming the cell and the numbers.
    """

    expectation: Expectation
    dataset: str
    method: str
    params: str
    value: float
    seeds: int
    passed: bool
    message: str


def parse_expectations(raw: Any, where: str = "expect", doc: Mapping[str, Any] | None = None
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
    doc : mapping, optional
        The whole suite document, whose ``datasets``, ``methods`` and
        ``measures.k`` have already been validated; with it, names and ``@k``
        are checked against the suite.

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
        raise InputError(where, f"expected a list of bounds, got {_show(raw)}")
    datasets, methods, ks = _declared(doc)
    out = []
    for i, item in enumerate(raw):
        at = f"{where}[{i}]"
        if not isinstance(item, Mapping):
            raise InputError(at, "expected a mapping such as {dataset: roll, method: isomap, "
                                 f"measure: trustworthiness@10, at_least: 0.9}}, got {_show(item)}")
        for key in item:
            if key not in _EXPECT_KEYS:
                raise InputError(f"{at}.{_key(key)}", f"unknown key{suggest(str(key), _EXPECT_KEYS)}; "
                                                f"expected one of {', '.join(_EXPECT_KEYS)}")
        if "measure" not in item:
            raise InputError(f"{at}.measure", "missing: the measure to bound, e.g. trustworthiness@10")
        measure = _measure_column(item["measure"], f"{at}.measure", ks)
        bounds = {}
        for key in ("at_least", "at_most"):
            value = item.get(key)
            if value is not None and (not _is_number(value) or not math.isfinite(value)):
                raise InputError(f"{at}.{key}", f"expected a number, got {_show(value)}")
            bounds[key] = None if value is None else float(value)
        if bounds["at_least"] is None and bounds["at_most"] is None:
            raise InputError(at, "expected at_least, at_most or both")
        if bounds["at_least"] is not None and bounds["at_most"] is not None \
                and bounds["at_least"] > bounds["at_most"]:
            raise InputError(f"{at}.at_most", f"expected at_most >= at_least ({bounds['at_least']:g}), "
                                              f"got {bounds['at_most']:g}")
        out.append(Expectation(
            measure=measure, at_least=bounds["at_least"], at_most=bounds["at_most"],
            datasets=_names(item.get("dataset"), f"{at}.dataset", datasets, "dataset"),
            methods=_names(item.get("method"), f"{at}.method", methods, "method"),
            params=_param_selector(item.get("params"), f"{at}.params"),
            where=at))
    return tuple(out)


def _declared(doc: Mapping[str, Any] | None) -> tuple[list[str] | None, list[str] | None, tuple[int, ...]]:
    """Dataset names, method names and ks of an already validated suite document."""
    if doc is None:
        return None, None, ()
    # The suite module imports this one; its helpers are needed only here, once validated.
    from pathlib import Path

    from .suite import _dataset_entries, _method_entries, _scoring

    datasets = [d.name for d in _dataset_entries(doc["datasets"], "datasets", Path.cwd())]
    methods = [m.name for m in _method_entries(doc["methods"], "methods")]
    return datasets, methods, _scoring(doc.get("measures"), "measures").ks


def _measure_key(name: str, where: str, allow_k_any: bool = False, ks: tuple[int, ...] = ()) -> str:
    stem, at_sign, k = name.partition("@")
    if stem not in MEASURES:
        raise InputError(where, f"unknown measure {stem!r}{suggest(stem, MEASURES)}; "
                                "see 'foldbench list measures'")
    if at_sign:
        if not MEASURES[stem].per_k:
            raise InputError(where, f"expected '{stem}' without '@k' ({stem} does not depend on k)")
        if not k.isdigit() or (not allow_k_any and ks and int(k) not in ks):
            allowed = f" with k one of measures.k {list(ks)}" if ks else ""
            raise InputError(where, f"expected '{stem}' or '{stem}@k'{allowed}, got {name!r}")
    return name


def _measure_column(value: Any, where: str, ks: tuple[int, ...]) -> str:
    if not isinstance(value, str):
        raise InputError(where, f"expected a measure name such as trustworthiness@10, got {_show(value)}")
    name = _measure_key(value, where, ks=ks)
    if "@" not in name and MEASURES[name].per_k:
        # Without @k a per-k measure means the first k of the suite, as in rank_by.
        name = f"{name}@{ks[0] if ks else 10}"
    return name


def _names(value: Any, where: str, known: list[str] | None, what: str) -> tuple[str, ...]:
    if value is None:
        return ()
    items = value if isinstance(value, list) else [value]
    if not items:
        raise InputError(where, f"expected a {what} name or a list of them (leave out for all)")
    for j, name in enumerate(items):
        at = f"{where}[{j}]" if isinstance(value, list) else where
        if not isinstance(name, str):
            raise InputError(at, f"expected a {what} name, got {_show(name)}")
        if known is not None and name not in known:
            raise InputError(at, f"unknown {what} {name!r}{suggest(name, known)}; "
                                 f"the suite's {what}s are {', '.join(known)}")
    return tuple(items)


def _param_selector(value: Any, where: str) -> tuple[tuple[str, str], ...]:
    if value is None:
        return ()
    if not isinstance(value, Mapping) or not value:
        raise InputError(where, f"expected a mapping of parameter values such as {{perplexity: 30}}, "
                                f"got {_show(value)}")
    out = []
    for key, v in value.items():
        if not isinstance(key, str) or isinstance(v, (list, dict)):
            raise InputError(f"{where}.{_key(key)}", f"expected one value, got {_show(v)}")
        out.append((key, _param_text(v)))
    return tuple(out)


def _param_text(value: Any) -> str:
    # The same text as the scores table's params column (store.scores_frame).
    return f"{value:g}" if isinstance(value, float) else str(value)


def evaluate_expectations(suite: Any, scores: pd.DataFrame) -> list[ExpectationResult]:
    """Check a run's scores against its suite's ``expect`` block.

    Parameters
    ----------
    suite : Suite
        The suite (its ``expect`` holds :class:`Expectation` values).
    scores : DataFrame
        A row per cell (``RunOutcome.scores`` or ``load_run(...).scores``).

    Returns
    -------
    list of ExpectationResult
        One per expectation and matching configuration, in suite order.  A
        configuration whose seeds all failed fails the bound; a dataset that
        lacks the measure (label measures on unlabelled data) is passed over
        unless the expectation names it.  An expectation that matches no
        configuration fails, so a typo cannot pass silently.
    """
    results: list[ExpectationResult] = []
    for exp in suite.expect:
        chosen = _matching(scores, exp)
        judged = 0
        for (dataset, method, params), group in chosen.groupby(["dataset", "method", "params"], sort=False):
            ok = group[group["status"] == "ok"]
            values = (ok[exp.measure] if exp.measure in ok else pd.Series(dtype=float)).dropna()
            cell = f"{method} [{params}] on {dataset}"
            if len(ok) and values.empty and not exp.datasets:
                continue
            judged += 1
            if ok.empty:
                results.append(ExpectationResult(
                    exp, dataset, method, params, float("nan"), 0, False,
                    f"{exp.where}: {cell}: {exp.measure}: no finished seed "
                    f"({', '.join(sorted(set(group['status'])))}); expected {exp.bounds()} -> NOT met"))
                continue
            mean = float(np.mean(values)) if len(values) else float("nan")
            passed = exp.holds(mean)
            shown = "no value" if values.empty else f"mean {mean:.4g} over {len(values)} seeds"
            results.append(ExpectationResult(
                exp, dataset, method, params, mean, len(values), passed,
                f"{exp.where}: {cell}: {exp.measure} {shown}, expected {exp.bounds()} -> "
                f"{'met' if passed else 'NOT met'}"))
        if not judged:
            results.append(ExpectationResult(
                exp, "", "", "", float("nan"), 0, False,
                f"{exp.where}: {exp.describe()}: no configuration of the run matched"))
    return results


def _matching(scores: pd.DataFrame, exp: Expectation) -> pd.DataFrame:
    mask = pd.Series(True, index=scores.index)
    if exp.datasets:
        mask &= scores["dataset"].isin(exp.datasets)
    if exp.methods:
        mask &= scores["method"].isin(exp.methods)
    for key, value in exp.params:
        mask &= scores["params"].astype(str).str.split(",").map(lambda parts, t=f"{key}={value}": t in parts)
    return scores[mask]


def expectations_text(results: list[ExpectationResult]) -> str:
    """Lines for the terminal: failures first, then a count of the bounds met."""
    failed = [r for r in results if not r.passed]
    lines = [f"FAILED {r.message}" for r in failed]
    lines.append(f"expectations: {len(results) - len(failed)} met, {len(failed)} not met")
    return "\n".join(lines)


# ---------------------------------------------------------------- helpers

def _is_number(value: Any) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool)


def _looks_numeric(text: str) -> bool:
    try:
        float(text)
    except ValueError:
        return False
    return True


def _key(key: Any) -> str:
    """A mapping key as it may appear in a one-line message."""
    text = str(key)
    return text if text.isprintable() and text.strip() == text and text else repr(key)


def _show(value: Any) -> str:
    text = repr(value)
    return text if len(text) <= 60 else text[:57] + "..."

