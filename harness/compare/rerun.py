"""Two runs of the same suite compared cell by cell: did it come out the same?

Every measure value and every stored embedding of a cell is compared:
``identical`` (bit for bit), ``equal within 1e-9`` (largest absolute
difference at most 1e-9) or ``different`` (with the largest difference and
where it is).  Fit time and peak memory measure the machine, not the method,
and are left out.  :func:`harness.rerun` runs a finished run again and uses this.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from ..metrics import MEASURES, measure_stem
from ..run.folder import RunFolder
from .aggregate import measure_columns

#: Largest absolute difference still reported as equal (floating-point round-off).
CLOSE = 1e-9
REPRODUCED = ("identical", "equal within 1e-9")
_CELL = ["dataset", "method", "params", "seed"]


@dataclass
class RerunOutcome:
    """How a re-run compares with the original, cell by cell.

    Attributes
    ----------
    original : Path
        The run folder that was re-run.
    run_dir : Path
        The new run folder.
    table : DataFrame
        One row per cell: ``dataset, method, params, seed, verdict``
        (``identical``, ``equal within 1e-9``, ``different``, ``missing`` from
        the re-run, ``new`` in the re-run), ``largest_difference`` and
        ``where`` (the measure or ``embedding`` it was found in, or what else
        differs).
    environment_changes : list of str
        Manifest differences between the original and the re-run.
    notes : list of str
    """

    original: Path
    run_dir: Path
    table: pd.DataFrame
    environment_changes: list[str] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)

    @property
    def reproduced(self) -> bool:
        """Every cell came out identical or equal within 1e-9."""
        return bool(self.table["verdict"].isin(REPRODUCED).all())

    def counts(self) -> dict[str, int]:
        """Cells per verdict."""
        return {str(k): int(v) for k, v in self.table["verdict"].value_counts().items()}


def compare_cells(old_run: RunFolder, new_run: RunFolder) -> pd.DataFrame:
    """Compare two runs cell by cell: measure values and stored embeddings.

    Parameters
    ----------
    old_run, new_run : RunFolder
        The two run folders.

    Returns
    -------
    DataFrame
        See :attr:`RerunOutcome.table`.
    """
    old, new = old_run.scores, new_run.scores
    columns = [
        c
        for c in dict.fromkeys([*measure_columns(old), *measure_columns(new)])
        if MEASURES[measure_stem(c)].scope != "cost"
    ]
    left = old.assign(_k=old[_CELL].astype(str).agg("|".join, axis=1)).set_index("_k")
    right = new.assign(_k=new[_CELL].astype(str).agg("|".join, axis=1)).set_index("_k")
    rows = []
    for key in dict.fromkeys([*left.index, *right.index]):
        a = left.loc[key] if key in left.index else None
        b = right.loc[key] if key in right.index else None
        ref = a if a is not None else b
        assert ref is not None  # every key comes from one side or the other
        row: dict[str, Any] = {c: ref[c] for c in _CELL}
        if a is None or b is None:
            row.update(
                verdict="new" if a is None else "missing",
                largest_difference=math.nan,
                where="only in the re-run" if a is None else "only in the original",
            )
        else:
            row.update(_compare_cell(a, b, columns, old_run, new_run))
        rows.append(row)
    return pd.DataFrame(rows, columns=[*_CELL, "verdict", "largest_difference", "where"])


def _compare_cell(
    a: pd.Series, b: pd.Series, columns: list[str], old_run: RunFolder, new_run: RunFolder
) -> dict[str, Any]:
    if a["status"] != b["status"]:
        return {
            "verdict": "different",
            "largest_difference": math.nan,
            "where": f"status {a['status']} → {b['status']}",
        }
    exact = True
    largest, where = 0.0, ""
    pairs: list[tuple[str, Any, Any]] = [(c, _number(a.get(c)), _number(b.get(c))) for c in columns]
    pairs.append(("embedding", old_run.embedding(a["key"]), new_run.embedding(b["key"])))
    for name, x, y in pairs:
        same, diff = _difference(x, y)
        exact &= same
        if diff > largest:
            largest, where = diff, name
    if exact:
        return {"verdict": "identical", "largest_difference": 0.0, "where": ""}
    verdict = "equal within 1e-9" if largest <= CLOSE else "different"
    return {"verdict": verdict, "largest_difference": largest, "where": where}


def _number(value: Any) -> float:
    try:
        return float(value)
    except (TypeError, ValueError):
        return math.nan


def _difference(x: Any, y: Any) -> tuple[bool, float]:
    """(bit-identical, largest absolute difference); NaN in the same places counts as equal."""
    if x is None or y is None:
        return (x is None and y is None), (0.0 if x is None and y is None else math.inf)
    x, y = np.asarray(x, dtype=float), np.asarray(y, dtype=float)
    if x.shape != y.shape:
        return False, math.inf
    nan_x, nan_y = np.isnan(x), np.isnan(y)
    if not np.array_equal(nan_x, nan_y):
        return False, math.inf
    if np.array_equal(x, y, equal_nan=True):
        return True, 0.0
    finite = ~nan_x
    with np.errstate(invalid="ignore"):
        gap = np.abs(x[finite] - y[finite])
    return False, float(np.nanmax(np.where(np.isnan(gap), math.inf, gap))) if gap.size else 0.0


def rerun_text(outcome: RerunOutcome) -> str:
    """The comparison for a terminal: environment differences, cells that differ, one line.

    Parameters
    ----------
    outcome : RerunOutcome

    Returns
    -------
    str
    """
    lines = [f"re-run of {outcome.original} -> {outcome.run_dir}", ""]
    if outcome.environment_changes:
        lines += ["Environment differences:"] + [f"  {c}" for c in outcome.environment_changes] + [""]
    off = outcome.table[~outcome.table["verdict"].isin(REPRODUCED)]
    for _, r in off.iterrows():
        gap = (
            "" if pd.isna(r["largest_difference"]) else f", largest difference {r['largest_difference']:.3g}"
        )
        lines.append(
            f"  {r['verdict']}: {r['method']} [{r['params']}] on {r['dataset']}, seed {r['seed']}"
            f" ({r['where']}{gap})"
        )
    if len(off):
        lines.append("")
    lines += [f"Note: {n}" for n in outcome.notes]
    counts = ", ".join(f"{n} {v}" for v, n in sorted(outcome.counts().items()))
    head = "REPRODUCED" if outcome.reproduced else "NOT REPRODUCED"
    lines += ["", f"{head}: {len(outcome.table)} cells ({counts})"]
    return "\n".join(lines)
