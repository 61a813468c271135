"""Where each embedding fails: per-point trustworthiness and continuity defects.

A point's trustworthiness defect is ``1 - t_i``, where ``t_i`` is its own term of
trustworthiness (Venna and Kaski 2001): how far its embedding neighbours come from
outside its data neighbourhood.  The continuity defect does the same for data
neighbours pushed away in the embedding.  The mean of the terms is the measure,
so these maps show how the aggregate is made, point by point.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..datasets import Dataset
from .analysis import Analysis

#: Share of the worst points whose part of the total defect the summary sentence reports.
WORST_SHARE = 0.05


@dataclass(frozen=True)
class PointDefects:
    """Per-point defects of one configuration (first ok seed) on one dataset."""

    dataset: str
    method: str
    key: str
    k: int
    points: np.ndarray
    trust: np.ndarray
    cont: np.ndarray

    def worst_share(self, which: str = "trust") -> float:
        """Fraction of the total defect carried by the worst ``WORST_SHARE`` of points."""
        d = np.sort(self.trust if which == "trust" else self.cont)[::-1]
        total = d.sum()
        if total <= 0:
            return 0.0
        top = max(1, int(np.ceil(WORST_SHARE * len(d))))
        return float(d[:top].sum() / total)


def point_defects(analysis: Analysis) -> dict[str, list[PointDefects]]:
    """Per dataset, the defects of each method's shown configuration at the suite's first k."""
    k = analysis.run.suite.scoring.ks[0]
    out: dict[str, list[PointDefects]] = {}
    for d in analysis.run.suite.datasets:
        for method in dict.fromkeys(m.name for m in analysis.run.suite.methods):
            rows = analysis.tuned[(analysis.tuned.dataset == d.name) & (analysis.tuned.method == method)]
            if rows.empty:
                continue
            key = analysis.first_ok_key(d.name, method, rows.iloc[0]["params"])
            table = None if key is None else analysis.run.points(key)
            if key is None or table is None or f"trustworthiness@{k}" not in table:
                continue
            out.setdefault(d.name, []).append(
                PointDefects(
                    d.name,
                    method,
                    key,
                    k,
                    table["point"].to_numpy(),
                    1.0 - table[f"trustworthiness@{k}"].to_numpy(dtype=np.float64),
                    1.0 - table[f"continuity@{k}"].to_numpy(dtype=np.float64),
                )
            )
    return out


def concentration_sentence(defects: list[PointDefects]) -> str:
    """One sentence naming the method whose worst points carry the largest share of its defect."""
    if not defects:
        return ""
    worst = max(defects, key=lambda p: p.worst_share("trust"))
    share = worst.worst_share("trust")
    return (
        f"{worst.method}'s worst {WORST_SHARE:.0%} of points carry {share:.0%} of its trustworthiness "
        f"defect at k = {worst.k} (mean defect {worst.trust.mean():.3f}), the most concentrated of the "
        "methods here: its errors sit in a few places rather than everywhere."
    )


def defect_by_class(defects: list[PointDefects], ds: Dataset | None) -> pd.DataFrame | None:
    """Mean trustworthiness defect per class (rows) and method (columns), or ``None`` without labels."""
    if ds is None or ds.labels is None or not defects:
        return None
    labels = np.asarray(ds.labels).astype(str)
    columns = {}
    for p in defects:
        if p.points.max(initial=-1) >= len(labels):
            return None
        frame = pd.DataFrame({"class": labels[p.points], "defect": p.trust})
        columns[p.method] = frame.groupby("class")["defect"].mean()
    return pd.DataFrame(columns)
