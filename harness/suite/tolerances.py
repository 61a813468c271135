"""How far a later run may drift: the suite's ``tolerances`` block.

::

    tolerances:
      alpha: 0.05               # one-sided Welch test over seeds
      default: 0.01             # every quality measure: 0.01 absolute
      stress: {abs: 0.02}
      trustworthiness@30: 0.005
      fit_seconds: 0.1 + 50%    # naming a cost measure puts it into the verdict
      silhouette: off           # listed, never fails the check
"""

from __future__ import annotations

import math
import re
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

from ..errors import InputError, suggest
from ..text import is_number_text, key_text, show
from ._read import is_number, measure_key

_TOLERANCE_KEYS = ("abs", "rel", "gate")
_DEFAULT_ALPHA = 0.05


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

    def over(self, fallback: Tolerance) -> Tolerance:
        """Fill the fields left ``None`` from ``fallback``."""
        return Tolerance(
            abs=fallback.abs if self.abs is None else self.abs,
            rel=fallback.rel if self.rel is None else self.rel,
            gate=fallback.gate if self.gate is None else self.gate,
        )

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
        raise InputError(where, f"expected a mapping of measure names to tolerances, got {show(raw)}")
    out: dict[str, Any] = {}
    for key, value in raw.items():
        if not isinstance(key, str):
            raise InputError(where, f"expected measure names as keys, got {key!r}")
        at = f"{where}.{key_text(key)}"
        if key == "alpha":
            if not is_number(value) or not 0 < value < 1:
                raise InputError(at, f"expected a significance level between 0 and 1, got {show(value)}")
            out[key] = float(value)
            continue
        if key != "default":
            measure_key(key, at, any_k=True)
        # Entries parsed once already (``parse_tolerance_flags``) pass as they are.
        out[key] = value if isinstance(value, Tolerance) else _tolerance(value, at)
    return out


def _tolerance(value: Any, where: str) -> Tolerance:
    if isinstance(value, bool):
        # YAML reads a bare off / on as false / true.
        return Tolerance(gate=value)
    if is_number(value):
        return Tolerance(abs=_allowance(value, where))
    if isinstance(value, str):
        return _tolerance_text(value, where)
    if isinstance(value, Mapping):
        for key in value:
            if key not in _TOLERANCE_KEYS:
                raise InputError(
                    f"{where}.{key_text(key)}",
                    f"unknown key{suggest(str(key), _TOLERANCE_KEYS)}; "
                    f"expected one of {', '.join(_TOLERANCE_KEYS)}",
                )
        if not value:
            raise InputError(where, "expected at least one of abs, rel, gate")
        gate = value.get("gate")
        if gate is not None and not isinstance(gate, bool):
            raise InputError(f"{where}.gate", f"expected true or false, got {show(gate)}")
        return Tolerance(
            abs=None if value.get("abs") is None else _allowance(value["abs"], f"{where}.abs"),
            rel=None if value.get("rel") is None else _allowance(value["rel"], f"{where}.rel"),
            gate=gate,
        )
    raise InputError(
        where,
        "expected a number (absolute), text like '25%' or '0.1 + 25%', off, on, "
        f"or a mapping with abs, rel, gate; got {show(value)}",
    )


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
            raise InputError(
                where,
                "expected a number (absolute), a percentage like 25%, both joined "
                f"by '+' (0.1 + 25%), 'off' or 'on'; got {text!r}",
            )
    return Tolerance(abs=abs_, rel=rel, gate=gate)


def _allowance(value: Any, where: str) -> float:
    if not is_number(value) or value < 0 or not math.isfinite(value):
        raise InputError(where, f"expected a number >= 0, got {show(value)}")
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
            raise InputError(
                "--tolerance",
                f"expected MEASURE=VALUE such as stress=0.02 or fit_seconds=0.1+25%, got {flag!r}",
            )
        value = value.strip()
        raw[name.strip()] = float(value) if is_number_text(value) else value
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
