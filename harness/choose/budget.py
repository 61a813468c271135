"""The time budget: reading ``90s`` / ``10m`` / ``1.5h``, and a per-candidate model of fit time in n.

The model is a power law ``t = a * n**b`` fitted by least squares on
``log t`` against ``log n`` over the rung timings seen so far.  With timings
at one size only, the exponent is :data:`FALLBACK_EXPONENT` (between the
linear cost of PCA and the quadratic cost of exact pairwise methods); the
fitted exponent is kept within :data:`EXPONENT_RANGE` so that two noisy
timings of a fast method cannot predict a cost that shrinks or explodes.
"""

from __future__ import annotations

import math
import re
from collections.abc import Sequence
from dataclasses import dataclass

from ..errors import InputError

#: Exponent of n assumed while a candidate has been timed at one size only.
FALLBACK_EXPONENT = 1.5
#: Fitted exponents are clipped to this range.
EXPONENT_RANGE = (0.5, 2.5)
#: Shortest time counted for one cell (process start, scoring), in seconds.
MIN_CELL_SECONDS = 0.5

_UNITS = {"s": 1.0, "m": 60.0, "h": 3600.0}
_BUDGET = re.compile(r"^\s*(\d+(?:\.\d+)?)\s*([smh]?)\s*$", re.IGNORECASE)


def parse_budget(text: str | float | int, where: str = "--budget") -> float:
    """Seconds in a budget written as ``90s``, ``10m``, ``1.5h`` or a plain number of seconds.

    Raises
    ------
    InputError
        Anything else, or a budget of zero.
    """
    if isinstance(text, int | float) and not isinstance(text, bool):
        seconds = float(text)
    else:
        match = _BUDGET.match(str(text))
        if not match:
            raise InputError(where, f"expected a duration such as 90s, 10m or 1.5h, got {str(text)!r}")
        seconds = float(match.group(1)) * _UNITS[(match.group(2) or "s").lower()]
    if not 0 < seconds < math.inf:
        raise InputError(where, f"expected a duration > 0 such as 90s, 10m or 1.5h, got {text!r}")
    return seconds


def show_seconds(seconds: float) -> str:
    """``42 s``, ``3.5 min`` or ``1.25 h``."""
    if seconds < 120:
        return (
            f"{seconds:.0f} s"
            if seconds >= 10
            else f"{seconds:.1f} s"
            if seconds >= 1
            else f"{seconds:.2g} s"
        )
    if seconds < 7200:
        return f"{seconds / 60:.1f} min"
    return f"{seconds / 3600:.2f} h"


@dataclass(frozen=True)
class TimeModel:
    """``seconds(n) = a * n**b`` for one candidate, fitted on its rung timings.

    Attributes
    ----------
    a, b : float
        Scale and exponent.
    points : int
        Distinct sizes the fit used (1: ``b`` is the fallback exponent).
    """

    a: float
    b: float
    points: int

    def predict(self, n: int) -> float:
        """Predicted seconds of one cell on ``n`` points."""
        return self.a * float(n) ** self.b


def fit_time_model(sizes: Sequence[int], seconds: Sequence[float]) -> TimeModel:
    """Fit the power law to ``(size, seconds)`` timings (each second at least a millisecond)."""
    if not sizes:
        raise ValueError("a time model needs at least one timing")
    logs_n = [math.log(float(n)) for n in sizes]
    logs_t = [math.log(max(float(t), 1e-3)) for t in seconds]
    distinct = len(set(sizes))
    if distinct < 2:
        b = FALLBACK_EXPONENT
    else:
        mean_n = sum(logs_n) / len(logs_n)
        mean_t = sum(logs_t) / len(logs_t)
        sxx = sum((x - mean_n) ** 2 for x in logs_n)
        sxy = sum((x - mean_n) * (y - mean_t) for x, y in zip(logs_n, logs_t))
        b = min(max(sxy / sxx, EXPONENT_RANGE[0]), EXPONENT_RANGE[1])
    # the scale through the mean point with the chosen exponent
    log_a = sum(y - b * x for x, y in zip(logs_n, logs_t)) / len(logs_n)
    return TimeModel(math.exp(log_a), b, distinct)
