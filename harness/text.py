"""Small text helpers shared by every layer: one-line messages, parameter text, numbers, tables.

Everything that turns a value into text for a person (a message, a table
cell, a label) is written once, here, so the terminal, the run folder and the
report say the same thing the same way.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Sequence
from pathlib import PurePath
from typing import Any

#: Longest exception text kept in a one-line message (a cell's ``error``, an input error).
MESSAGE_LIMIT = 300
#: Suffix of a method shown at its best grid point (chosen after seeing the scores).
TUNED = " (tuned)"
#: What a missing number prints as.
MISSING = "–"


def squeeze(text: object) -> str:
    """Collapse all white space (line breaks included) into single spaces."""
    return " ".join(str(text).split())


def exception_line(exc: BaseException, limit: int = MESSAGE_LIMIT) -> str:
    """``TypeName: message`` on one line, cut to ``limit`` characters."""
    text = squeeze(exc) or "(no message)"
    line = f"{type(exc).__name__}: {text}"
    return line if len(line) <= limit else line[: limit - 3] + "..."


def show(value: Any, limit: int = 60) -> str:
    """``repr(value)`` for a message, cut to ``limit`` characters.

    Builds the text piece by piece for containers, so a huge value (a YAML
    alias bomb, say) is never turned into text whole.
    """
    text = _bounded_repr(value, limit + 1)
    return text if len(text) <= limit else text[: limit - 3] + "..."


def _bounded_repr(value: Any, limit: int) -> str:
    if isinstance(value, (list, tuple, dict)):
        items = value.items() if isinstance(value, dict) else value
        brackets = "{}" if isinstance(value, dict) else "()" if isinstance(value, tuple) else "[]"
        out, closer = brackets[0], brackets[1]
        for item in items:
            part = (
                f"{_bounded_repr(item[0], limit)}: {_bounded_repr(item[1], limit)}"
                if isinstance(value, dict)
                else _bounded_repr(item, limit)
            )
            out += ("" if len(out) == 1 else ", ") + part
            if len(out) > limit:
                return out
        return out + closer
    text = repr(value)
    return text[: limit + 1]


def is_number_text(text: str) -> bool:
    """Whether ``float(text)`` reads the text as a number."""
    try:
        float(text)
    except ValueError:
        return False
    return True


def key_text(key: Any) -> str:
    """A mapping key as it may appear in a one-line message (quoted when odd)."""
    text = str(key)
    return text if text and text.isprintable() and text.strip() == text else repr(key)


def format_value(value: Any) -> str:
    """A parameter value as the scores table writes it (``30``, ``0.5``, ``pca``)."""
    return f"{value:g}" if isinstance(value, float) else str(value)


def params_text(params: Iterable[tuple[str, Any]]) -> str:
    """``perplexity=30,init=pca``; ``-`` when there are no parameters.

    A ``path`` shows its file name only, so that tables stay short and a gate
    compares an embedding file with its namesake from another folder.
    """
    return ",".join(f"{k}={PurePath(v).name if k == 'path' else format_value(v)}" for k, v in params) or "-"


def method_label(method: str, tuned: bool) -> str:
    """A method's name, with ``(tuned)`` when it is shown at its best grid point."""
    return f"{method}{TUNED}" if tuned else method


def number(value: Any, digits: int = 3) -> str:
    """A float with ``digits`` decimals; anything else as text; missing values as ``–``."""
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return MISSING
    if isinstance(value, float):
        return f"{value:.{digits}f}"
    return str(value)


def mean_sd(mean: Any, sd: Any, digits: int = 3) -> str:
    """``0.912 ± 0.004``; the ``±`` part is left out when the spread is unknown.

    A spread that would print as zero is never written ``± 0.000``: it reads
    ``(sd < 0.001)``, or ``(seeds agree)`` when it is exactly 0.
    """
    if mean is None or (isinstance(mean, float) and math.isnan(mean)):
        return MISSING
    if sd is None or (isinstance(sd, float) and math.isnan(sd)):
        return f"{mean:.{digits}f}"
    if sd == 0:
        return f"{mean:.{digits}f} (seeds agree)"
    if round(float(sd), digits) == 0:
        return f"{mean:.{digits}f} (sd < {10.0**-digits:.{digits}f})"
    return f"{mean:.{digits}f} ± {sd:.{digits}f}"


def seeds_text(row: Any) -> str:
    """``3/3`` (ok seeds of those meant to run), or ``3/3 deterministic`` when one fit served every seed."""
    ok, failed = int(row["seeds_ok"]), int(row["seeds_failed"])
    return f"{ok}/{ok + failed}" + (" deterministic" if bool(row.get("deterministic", False)) else "")


def interval_text(low: Any, high: Any, digits: int = 3) -> str | None:
    """``[0.905, 0.919]``; ``None`` when unknown or when its ends would print alike.

    The ends get more digits (up to 5) until they differ; an interval narrower
    than that, or of zero width (seeds in full agreement), is not printed: the
    value's own text says so (:func:`mean_sd`).
    """
    if low is None or high is None or not (math.isfinite(float(low)) and math.isfinite(float(high))):
        return None
    d = digits
    while d < 5 and f"{low:.{d}f}" == f"{high:.{d}f}":
        d += 1
    if f"{low:.{d}f}" == f"{high:.{d}f}":
        return None
    return f"[{low:.{d}f}, {high:.{d}f}]"


def pvalue_text(p: float, floor: float = 1e-4) -> str:
    """``p = 0.032``, ``p = 0.41``; below ``floor`` ``p < 1e-4`` (a p-value is never printed as 0)."""
    if not math.isfinite(p):
        return "p = ?"
    if p < floor:
        return f"p < {floor:.0e}".replace("e-0", "e-")
    return f"p = {p:.2g}" if p >= 0.01 else f"p = {p:.1e}".replace("e-0", "e-")


def seconds(value: float | None) -> str:
    """A duration for a sentence: ``0.012 s``, ``3.4 s``, ``120 s``."""
    if value is None or not math.isfinite(value):
        return "?"
    return f"{value:.2g} s" if value < 100 else f"{value:.0f} s"


def seed_range(seeds: Sequence[int] | None) -> str | None:
    """``0-4`` for a run of three or more consecutive seeds, else ``0,7,42``."""
    if not seeds:
        return None
    seeds = list(seeds)
    if len(seeds) > 2 and seeds == list(range(seeds[0], seeds[0] + len(seeds))):
        return f"{seeds[0]}-{seeds[-1]}"
    return ",".join(map(str, seeds))


def markdown_table(
    rows: Sequence[Sequence[str]], headers: Sequence[str], right: Sequence[bool] | None = None
) -> str:
    """A pipe table with columns padded so that it also reads as plain text."""
    align = list(right or [False] * len(headers))
    cells = [list(map(str, headers))] + [list(map(str, r)) for r in rows]
    widths = [max(len(r[i]) for r in cells) for i in range(len(headers))]

    def line(r: Sequence[str]) -> str:
        return "| " + " | ".join(c.rjust(w) if a else c.ljust(w) for c, w, a in zip(r, widths, align)) + " |"

    rule = (
        "|" + "|".join(("-" * (w + 1) + ":") if a else ("-" * (w + 2)) for w, a in zip(widths, align)) + "|"
    )
    return "\n".join([line(cells[0]), rule] + [line(r) for r in cells[1:]])
