"""Seed aggregation: the one place where a configuration's seeds become a mean, a spread and an interval.

The terminal table, ``summary.csv``, ``ranking.md`` and the report all read
the frame :func:`aggregate` returns, so they cannot disagree.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

from ..config import CellStatus, is_failure
from ..metrics import MEASURES, measure_stem
from ..run.folder import CI_HIGH, CI_LOW, ID_COLUMNS, INFO_COLUMNS
from ..run.integrity import measure_range
from .stats import t_interval

#: A configuration: one dataset x method x parameter point (its seeds are pooled).
CONFIG = ["dataset", "method", "params"]
#: Measure columns that describe cost, not quality.
COST_COLUMNS = ("fit_seconds", "fit_peak_mb")


def measure_columns(scores: pd.DataFrame) -> list[str]:
    """Measure columns of a scores table (values, not interval bounds), cost columns included."""
    skip = set(ID_COLUMNS) | set(INFO_COLUMNS) - set(COST_COLUMNS)
    return [
        c
        for c in scores.columns
        if c not in skip and not c.endswith((CI_LOW, CI_HIGH)) and measure_stem(c) in MEASURES
    ]


def _one_fit(ok: pd.DataFrame) -> bool:
    """The ok seeds are one fit and its copies (a seed-free method fitted once)."""
    if len(ok) < 2 or "copy_of" not in ok:
        return False
    copies = ok["copy_of"].fillna("").astype(str)
    fitted = set(ok.loc[copies == "", "key"].astype(str)) if "key" in ok else set()
    return len(fitted) == 1 and set(copies[copies != ""]) <= fitted


def aggregate(scores: pd.DataFrame, *, level: float = 0.95) -> pd.DataFrame:
    """Mean, spread and interval of every measure over the seeds of each configuration.

    Parameters
    ----------
    scores : DataFrame
        A row per cell (``RunFolder.scores``).
    level : float
        Coverage of the interval of the mean.

    Returns
    -------
    DataFrame
        One row per ``dataset, method, params`` in order of first appearance, with
        ``seeds_ok`` and ``seeds_failed`` (cells meant to run that did not
        finish ok), then per measure ``m``: ``m`` (mean over the ok seeds),
        ``m_sd`` (sample standard deviation, ddof = 1), ``m_lo`` and ``m_hi``
        (the Student t interval of the mean over the seeds, Student 1908; NaN
        with fewer than two seeds).  A percentile bootstrap of 3 to 10 seed
        values covers the true mean far less often than it claims (about 74%
        at 3 seeds for a "95%" interval); the t interval holds its level for
        normal seed scores at any number of seeds.  It is clipped to the
        measure's range (``fit_seconds`` >= 0, trustworthiness <= 1, ...),
        which cannot lower its coverage since the mean lies in that range.  ``deterministic`` is true
        when the method was fitted once and its other seeds are copies of that
        fit (``copy_of`` in the scores); its quality measures then have no seed
        spread or interval (NaN), not a spread of 0 over copies.
    """
    cols = measure_columns(scores)
    rows = []
    for key, group in scores.groupby(CONFIG, sort=False):
        row: dict[str, object] = dict(zip(CONFIG, key))
        ok = group[group["status"] == CellStatus.OK]
        row["seeds_ok"] = len(ok)
        row["seeds_failed"] = int(group["status"].map(is_failure).sum())
        row["deterministic"] = deterministic = _one_fit(ok)
        for m in cols:
            values = pd.to_numeric(ok[m], errors="coerce").to_numpy(dtype=float)
            finite = values[np.isfinite(values)]
            row[m] = float(finite.mean()) if finite.size else math.nan
            spread = finite.size > 1 and not (deterministic and m not in COST_COLUMNS)
            row[f"{m}_sd"] = float(finite.std(ddof=1)) if spread else math.nan
            lo, hi = t_interval(finite, level=level) if spread else (math.nan, math.nan)
            # the mean cannot lie outside the measure's range (e.g. no negative seconds), so
            # clipping the interval there never lowers its coverage
            floor, ceiling = measure_range(m)
            row[f"{m}_lo"], row[f"{m}_hi"] = max(lo, floor), min(hi, ceiling)
        rows.append(row)
    columns = [*CONFIG, "seeds_ok", "seeds_failed", "deterministic"] + [
        f"{m}{s}" for m in cols for s in ("", "_sd", "_lo", "_hi")
    ]
    return pd.DataFrame(rows, columns=columns)
