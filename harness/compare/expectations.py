"""Judging a run against its suite's ``expect`` block: one verdict per bound and configuration."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..config import CellStatus
from ..suite import Expectation, Suite


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


def evaluate_expectations(suite: Suite, scores: pd.DataFrame) -> list[ExpectationResult]:
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
        for key, group in chosen.groupby(["dataset", "method", "params"], sort=False):
            dataset, method, params = (str(part) for part in key)
            ok = group[group["status"] == CellStatus.OK]
            values = (ok[exp.measure] if exp.measure in ok else pd.Series(dtype=float)).dropna()
            cell = f"{method} [{params}] on {dataset}"
            if len(ok) and values.empty and not exp.datasets:
                continue
            judged += 1
            if ok.empty:
                results.append(
                    ExpectationResult(
                        exp,
                        dataset,
                        method,
                        params,
                        float("nan"),
                        0,
                        False,
                        f"{exp.where}: {cell}: {exp.measure}: no finished seed "
                        f"({', '.join(sorted(set(group['status'])))}); expected {exp.bounds()} -> NOT met",
                    )
                )
                continue
            mean = float(np.mean(values)) if len(values) else float("nan")
            passed = exp.holds(mean)
            shown = "no value" if values.empty else f"mean {mean:.4g} over {len(values)} seeds"
            results.append(
                ExpectationResult(
                    exp,
                    dataset,
                    method,
                    params,
                    mean,
                    len(values),
                    passed,
                    f"{exp.where}: {cell}: {exp.measure} {shown}, expected {exp.bounds()} -> "
                    f"{'met' if passed else 'NOT met'}",
                )
            )
        if not judged:
            results.append(
                ExpectationResult(
                    exp,
                    "",
                    "",
                    "",
                    float("nan"),
                    0,
                    False,
                    f"{exp.where}: {exp.describe()}: no configuration of the run matched",
                )
            )
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
