"""Successive halving: the rung plan, the suite of each rung, and the ranking that decides who is kept.

Rung ``r`` fits the survivors on a subsample, ranks them by the ``--care``
weights, and keeps the best ``ceil(count / eta)`` (Jamieson and Talwalkar
2016); each next rung multiplies the subsample by ``eta`` until the last one
runs on all the data with every seed.  When the data are too small to shrink
(below :data:`SMALLEST_RUNG` rows), the missing rungs are at full size with
one seed, so the halving is over seeds instead of rows.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import pandas as pd
import yaml

from ..suite import DatasetEntry, Suite, parse_suite
from .pool import Candidate

#: Fewest rows of a subsampled rung (below this, scores say little about the full data).
SMALLEST_RUNG = 50
#: Largest first rung on big data: more rungs are added below until the first is at most this.
LARGEST_FIRST_RUNG = 2000
#: Candidates in the last rung (at least this many are kept, so there is a runner-up).
FINALISTS = 3
#: Default factor between rung sizes and between survivors.
ETA = 3

#: Measure weights per ``--care``: names of the measure catalogue, equal weights within a group.
CARE_WEIGHTS: dict[str, dict[str, float]] = {
    "local": {"trustworthiness": 1.0, "continuity": 1.0, "knn_recall": 1.0},
    "global": {"shepard_spearman": 1.0, "stress": 1.0},
    "balanced": {"trustworthiness": 1.0, "continuity": 1.0, "shepard_spearman": 1.0, "stress": 1.0},
    "labels": {"knn_accuracy": 1.0},
}

#: The global group when every dataset carries its true latent chart (synthetic data): the
#: chart itself is the large-scale layout to keep.  Straight-line distances of a curved
#: manifold (a rolled sheet's) are not its layout, so stress and Shepard's rho would reward
#: keeping the roll instead of unrolling it.
CHARTED_GLOBAL: dict[str, float] = {"latent_spearman": 2.0}


def care_weights(care: str, charted: bool) -> dict[str, float]:
    """The measure weights of ``care``; with a latent chart the global group is the chart's rho.

    The group keeps its total weight (2), so ``balanced`` stays half local, half global.
    """
    weights = dict(CARE_WEIGHTS[care])
    if charted and care in ("global", "balanced"):
        for name in CARE_WEIGHTS["global"]:
            weights.pop(name, None)
        weights.update(CHARTED_GLOBAL)
    return weights


@dataclass(frozen=True)
class Rung:
    """One rung: the share of the rows it uses (1 = all), its row count (largest dataset) and seeds."""

    index: int
    fraction: float
    size: int
    seeds: tuple[int, ...]

    @property
    def full(self) -> bool:
        """Runs on all the data."""
        return self.fraction >= 1.0


def plan_rungs(
    n_full: int,
    n_candidates: int,
    seeds: Sequence[int],
    *,
    eta: int = ETA,
    subsample: bool = True,
    before_last_rows: int = 0,
) -> list[Rung]:
    """The rungs for ``n_candidates`` on data of ``n_full`` rows (the largest dataset).

    Halvings are counted until at most :data:`FINALISTS` candidates are left;
    the sizes below the full data are ``n_full / eta**j`` down to
    :data:`SMALLEST_RUNG` (more are added while the first is above
    :data:`LARGEST_FIRST_RUNG`); without ``subsample`` every rung is at full size.
    The rung before the last has at least ``before_last_rows`` rows (all of them, one seed,
    when the data have fewer), so that candidates which cannot be judged on fewer rows
    (neighbour graphs) meet the others there rather than all at the costliest rung.
    """
    halvings, count = 0, n_candidates
    while count > FINALISTS:
        count = math.ceil(count / eta)
        halvings += 1
    fractions: list[float] = []
    j = 1
    while (
        subsample
        and n_full / eta**j >= SMALLEST_RUNG
        and (len(fractions) < halvings or n_full / eta ** (j - 1) > LARGEST_FIRST_RUNG)
    ):
        fractions.insert(0, 1.0 / eta**j)
        j += 1
    plan: list[tuple[float, tuple[int, ...]]] = [(f, (seeds[0],)) for f in fractions]
    if len(plan) < halvings:  # too small to shrink further: one seed on all rows, then every seed
        plan.append((1.0, (seeds[0],)))
    if plan and n_full * plan[-1][0] < before_last_rows:
        raised = min(1.0, before_last_rows / n_full)
        plan = [p for p in plan[:-1] if p[0] < raised] + [(raised, (seeds[0],))]
    plan.append((1.0, tuple(seeds)))
    if len(plan) > 1 and plan[-1] == plan[-2]:
        plan.pop(-2)
    return [Rung(i, f, max(1, round(n_full * f)), s) for i, (f, s) in enumerate(plan)]


def kept_count(count: int, eta: int, last: bool, before_last: bool = False) -> int:
    """Survivors of a rung of ``count`` candidates: the best ``ceil(count / eta)``, at least two.

    The rung before the last keeps at most :data:`FINALISTS`, so that the costliest rung (all
    rows, every seed) holds the planned finalists even when candidates carried unjudged
    through the small rungs made the pool larger than planned.
    """
    if last:
        return count
    keep = min(count, max(2, math.ceil(count / eta)))
    return min(keep, FINALISTS) if before_last else keep


def rung_suite(
    name: str,
    datasets: Sequence[tuple[DatasetEntry, int, bool]],
    candidates: Sequence[Candidate],
    rung: Rung,
    *,
    dimensions: int,
    ks: Sequence[int],
    rank_by: Mapping[str, float],
    time_limit: float | None,
    quadratic_limit: int,
    jobs: int | None,
    extra_scoring: Mapping[str, Any] | None = None,
) -> Suite:
    """The suite of one rung: each dataset at the rung's share of its rows, each candidate as a method.

    ``datasets`` holds ``(entry, full rows, can subsample)`` per dataset.
    """
    data = []
    for entry, n, can_subsample in datasets:
        params = dict(entry.params)
        if not rung.full and can_subsample:
            params["n"] = max(min(n, SMALLEST_RUNG), round(n * rung.fraction))
        item: dict[str, Any] = {"use": entry.use, "name": entry.name, "params": params}
        if entry.holdout is not None:
            item["holdout"] = entry.holdout
        data.append(item)
    run: dict[str, Any] = {"quadratic_limit": int(quadratic_limit)}
    if time_limit is not None:
        run["time_limit"] = float(time_limit)
    if jobs is not None:
        run["jobs"] = int(jobs)
    doc = {
        "name": name,
        "description": f"choose rung {rung.index}: {rung.fraction:.3g} of the rows, {len(rung.seeds)} seeds",
        "seeds": list(rung.seeds),
        "dimensions": int(dimensions),
        "datasets": data,
        "methods": [{"use": c.use, "name": c.name, "params": dict(c.params)} for c in candidates],
        "measures": {"k": list(ks), "rank_by": dict(rank_by), **(extra_scoring or {})},
        "run": run,
    }
    return parse_suite(yaml.safe_dump(_plain(doc), sort_keys=False), f"<{name}>")


def _plain(value: Any) -> Any:
    """YAML-safe copies of NumPy scalars and tuples."""
    if isinstance(value, Mapping):
        return {str(k): _plain(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_plain(v) for v in value]
    if hasattr(value, "item") and not isinstance(value, str):
        return value.item()
    return value


@dataclass
class Standing:
    """One candidate's result in one rung."""

    name: str
    mean_rank: float
    place: int
    measures: dict[str, float] = field(default_factory=dict)
    fit_seconds: float = math.nan
    status: str = "ok"


def standings(
    ranked: pd.DataFrame,
    rank_by: Mapping[str, float],
    names: Sequence[str],
    before: Mapping[str, int] | None = None,
) -> list[Standing]:
    """Candidates of a rung best first: the mean over datasets of their weighted mean rank.

    Equal mean ranks go to the better place at the rung before (``before``: name -> place
    where the candidate was last judged, among more candidates; few finalists tie often),
    then to the cheaper fit, then to the name.  A candidate with no ranked result (every
    cell failed or timed out) comes last.
    """
    before = before or {}
    out = []
    for name in names:
        rows = ranked[ranked["method"] == name]
        mean_rank = (
            float(rows["mean_rank"].mean()) if len(rows) and rows["mean_rank"].notna().any() else math.nan
        )
        measures = {c: float(rows[c].mean()) for c in rank_by if c in rows and rows[c].notna().any()}
        fit = (
            float(rows["fit_seconds"].mean())
            if "fit_seconds" in rows and rows["fit_seconds"].notna().any()
            else math.nan
        )
        failed = int(rows["seeds_failed"].sum()) if "seeds_failed" in rows else 0
        status = "ok" if not math.isnan(mean_rank) else "failed"
        if failed and status == "ok":
            status = f"ok ({failed} cell(s) failed)"
        out.append(Standing(name, mean_rank, 0, measures, fit, status))
    out.sort(
        key=lambda s: (
            math.isnan(s.mean_rank),
            0.0 if math.isnan(s.mean_rank) else s.mean_rank,
            before.get(s.name, len(before) + 1),
            math.inf if math.isnan(s.fit_seconds) else s.fit_seconds,
            s.name,
        )
    )
    for i, s in enumerate(out, 1):
        s.place = i
    return out
