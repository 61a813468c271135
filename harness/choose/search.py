"""``choose()``: the pool, the rungs run by the ordinary runner under a time budget, the recommendation."""

from __future__ import annotations

import dataclasses
import hashlib
import json
import logging
import math
import os
import time
from collections.abc import Callable, Mapping, Sequence
from pathlib import Path
from typing import Any

import pandas as pd

from ..compare.check import welch_test
from ..compare.rank import resolve_rank_by
from ..datasets import get_dataset_spec
from ..errors import InputError
from ..metrics import higher_is_better
from ..run import RunInterrupted
from ..run.atomic import write_json
from ..run.integrity import FORMAT, seal, seal_problem
from ..suite import DatasetEntry, Suite, load_suite, parse_suite
from ..suite.data import load_datasets
from .budget import MIN_CELL_SECONDS, fit_time_model, parse_budget, show_seconds
from .halving import (
    CARE_WEIGHTS,
    ETA,
    SMALLEST_RUNG,
    Rung,
    care_weights,
    kept_count,
    plan_rungs,
    rung_suite,
    standings,
)
from .pool import GRAPH_RUNG, Pool, builds_a_graph, default_pool, invalid_at, suite_pool, too_sparse_at
from .recommend import (
    Recommendation,
    RungRecord,
    Separation,
    chosen_suite,
    recommendation_text,
    write_text_file,
)

log = logging.getLogger(__name__)

#: Share of the remaining budget kept back for ranking and writing after each rung.
RESERVE = 0.08
STATE_FILE = "choose-state.json"


def _base_suite(data: str | Path | Suite, label: str | None) -> tuple[Suite, bool]:
    """The suite whose datasets are the data; true when its methods are the pool."""
    if isinstance(data, Suite):
        return data, True
    text = str(data)
    path = Path(text)
    if path.suffix.lower() in (".yaml", ".yml"):
        return load_suite(path), True
    if path.exists():
        if label is not None and not label:
            raise InputError("--label", "expected a column name")
        params: dict[str, Any] = {"path": str(path.resolve()), "standardise": True}
        if label:
            params["label"] = label
        name = "".join(ch if ch.isalnum() or ch in "_-" else "_" for ch in path.stem).strip("_-") or "table"
        datasets = [{"use": "table", "name": name[:64], "params": params}]
    else:
        try:
            get_dataset_spec(text)
        except InputError:
            raise InputError(
                text, "expected a table file (CSV, TSV, Parquet, NPY), a suite (.yaml) or a dataset name"
            ) from None
        if label:
            raise InputError("--label", "expected only with a table file")
        datasets = [{"use": text, "name": text}]
    doc = {"name": "choose", "seeds": 3, "datasets": datasets, "methods": [{"use": "pca"}]}
    return parse_suite(json.dumps(doc), str(data)), False


def _weights(care: str, ks: Sequence[int], labelled: bool, charted: bool) -> dict[str, float]:
    if care not in CARE_WEIGHTS:
        raise InputError("--care", f"expected one of {', '.join(CARE_WEIGHTS)}, got {care!r}")
    if care == "labels" and not labelled:
        raise InputError("--care", "labels needs class labels in every dataset; give --label COLUMN")
    return resolve_rank_by(care_weights(care, charted), tuple(ks))


def choose(
    data: str | Path | Suite,
    *,
    budget: str | float = "10m",
    care: str = "balanced",
    label: str | None = None,
    dimensions: int | None = None,
    out: str | Path | None = None,
    eta: int = ETA,
    jobs: int | None = None,
    audit: bool = False,
    progress: Callable[[str], None] | None = None,
) -> Recommendation:
    """Choose a method configuration for ``data`` within a time budget by successive halving.

    Parameters
    ----------
    data : path, dataset name or Suite
        A table file (as ``foldbench run --table``), a registry dataset name
        (``machine_fleet``), or a suite (file or value) whose datasets are the
        data and whose methods and grids are the candidate pool.
    budget : str or float
        ``90s``, ``10m``, ``1.5h`` or seconds.
    care : {"local", "global", "balanced", "labels"}
        Which measures rank the candidates (weights in :data:`~harness.choose.halving.CARE_WEIGHTS`;
        when every dataset carries a latent chart, the global group is the chart's
        Spearman rho, see :func:`~harness.choose.halving.care_weights`).
    label : str, optional
        With a table file: the column of class labels.
    dimensions : int, optional
        Size of the embeddings (default: the suite's, else 2).
    out : path
        Folder of this choose: its state, rung run folders, cache and recommendation
        (default ``results/choose/<data name>``).
        Run again with the same arguments and folder to continue an interrupted choose.
    eta : int
        Factor between rung sizes and between survivors (keep the best 1/eta).
    jobs : int, optional
        Cells computed at once (default: all cores).
    audit : bool
        Also run every candidate on all the data with every seed and report
        where the winner ranks there (costly; for tests and benchmarks).
    progress : callable, optional
        ``progress(line)`` for a line of news after each rung.

    Returns
    -------
    Recommendation

    Raises
    ------
    InputError
        Bad budget, care, label or data; an empty pool; a budget below what the first rung needs.
    """
    started = time.monotonic()  # reading the data counts against the budget too
    seconds_budget = parse_budget(budget)
    if eta < 2:
        raise InputError("eta", f"expected an integer >= 2, got {eta}")
    base, pool_from_suite = _base_suite(data, label)
    if dimensions is not None:
        base = dataclasses.replace(base, dimensions=int(dimensions))
    loaded = load_datasets(base)
    sizes = {name: ds.n for name, ds in loaded.items()}
    n_full = max(sizes.values())
    shrinkable = all(any(p.name == "n" for p in get_dataset_spec(e.use).params) for e in base.datasets)
    seeds = base.seeds if pool_from_suite else (0, 1, 2)
    pool = _pool(base, pool_from_suite, loaded, n_full, min(sizes.values()))
    if not pool.candidates:
        reasons = "; ".join(f"{n}: {r}" for n, r in pool.left_out) or "no methods"
        raise InputError("candidate pool", f"empty after the size guard ({reasons})")
    graphs = any(builds_a_graph(c.params) for c in pool.candidates)
    rungs = plan_rungs(
        n_full,
        len(pool.candidates),
        seeds,
        eta=eta,
        subsample=shrinkable,
        before_last_rows=GRAPH_RUNG if graphs else 0,
    )
    ks = list(base.scoring.ks) if pool_from_suite else [10]
    n0 = min(_rung_rows(sizes[e.name], rungs[0], shrinkable) for e in base.datasets)
    ks = [max(1, min(k, (n0 - 1) // 2 - 1)) for k in ks]
    labelled = all(ds.labels is not None for ds in loaded.values())
    charted = all(ds.latent is not None for ds in loaded.values())
    weights = _weights(care, ks, labelled, charted)
    cores = jobs or os.cpu_count() or 1
    need = math.ceil(len(pool.candidates) / cores) * MIN_CELL_SECONDS
    if seconds_budget < need:
        raise InputError(
            "--budget",
            f"expected at least {show_seconds(need)} for the first rung "
            f"({len(pool.candidates)} candidates on {rungs[0].size} rows), "
            f"got {show_seconds(seconds_budget)}",
        )
    folder = Path(out) if out is not None else default_out(base)
    folder.mkdir(parents=True, exist_ok=True)
    key = _key(base, pool, rungs, weights, seeds, eta, seconds_budget)
    state = _read_state(folder, key)
    session = _Session(
        base,
        pool,
        rungs,
        weights,
        ks,
        seconds_budget,
        folder,
        jobs,
        state,
        key,
        progress,
        sizes,
        shrinkable,
        eta,
        started,
    )
    rec = session.run(care)
    if audit:
        rec.audit = session.audit(rec.winner)
    write_text_file(folder / "recommendation.md", recommendation_text(rec))
    return rec


def default_out(base: Suite) -> Path:
    """``results/choose/<name>``: the suite's name, or the one dataset's name for a table or dataset."""
    name = base.name if base.name != "choose" else base.datasets[0].name
    return Path("results") / "choose" / name


def _rung_rows(n: int, rung: Rung, shrinkable: bool) -> int:
    """Rows of a dataset of ``n`` rows at ``rung`` (as :func:`.halving.rung_suite` sets them)."""
    if rung.full or not shrinkable:
        return n
    return max(min(n, SMALLEST_RUNG), round(n * rung.fraction))


def _pool(base: Suite, from_suite: bool, loaded: Mapping[str, Any], n_full: int, n0: int) -> Pool:
    if from_suite:
        return suite_pool(base, n_full, n0)
    n_features = min(ds.X.shape[1] for ds in loaded.values() if ds.X is not None)
    return default_pool(n_full, n0, n_features, base.run.quadratic_limit)


def _key(base: Suite, pool: Pool, rungs: list[Rung], weights: Mapping[str, float], *rest: Any) -> str:
    doc = {
        "datasets": [[e.use, e.name, dict(e.params)] for e in base.datasets],
        "pool": [[c.name, c.use, dict(c.params)] for c in pool.candidates],
        "rungs": [[r.fraction, list(r.seeds)] for r in rungs],
        "weights": dict(weights),
        "dimensions": base.dimensions,
        "rest": [list(r) if isinstance(r, tuple) else r for r in rest],
    }
    return hashlib.sha256(json.dumps(doc, sort_keys=True, default=str).encode()).hexdigest()[:16]


def _read_state(folder: Path, key: str) -> dict[str, Any]:
    """The finished rungs of an earlier choose with the same arguments in ``folder`` (verified)."""
    path = folder / STATE_FILE
    fresh: dict[str, Any] = {"format": FORMAT, "key": key, "rungs": [], "spent": 0.0, "partial": {}}
    if not path.exists():
        return fresh
    try:
        doc = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError) as exc:
        log.warning("%s unreadable (%s); starting over (finished cells come from the cache)", path, exc)
        return fresh
    problem = seal_problem(doc)
    if problem:
        log.warning("%s: %s; starting over (finished cells come from the cache)", path, problem)
        return fresh
    if doc.get("key") != key:
        raise InputError(
            str(folder), "holds a choose of other data or arguments; expected a new --out folder"
        )
    doc.pop("sha256", None)
    return doc


class _Session:
    """One choose: rungs in order, each with its budget check, state written after each."""

    def __init__(
        self,
        base: Suite,
        pool: Pool,
        rungs: list[Rung],
        weights: dict[str, float],
        ks: list[int],
        budget: float,
        folder: Path,
        jobs: int | None,
        state: dict[str, Any],
        key: str,
        progress: Callable[[str], None] | None,
        sizes: dict[str, int],
        shrinkable: bool,
        eta: int,
        started: float,
    ) -> None:
        self.base, self.pool, self.rungs, self.weights, self.ks = base, pool, rungs, weights, ks
        self.budget, self.folder, self.jobs, self.state, self.key = budget, folder, jobs, state, key
        self.progress = progress or (lambda line: None)
        self.sizes, self.shrinkable, self.eta = sizes, shrinkable, eta
        self.by_name = {c.name: c for c in pool.candidates}
        self.cores = jobs or os.cpu_count() or 1
        self.started = started
        self.timings: dict[str, list[tuple[int, float]]] = {}

    # ------------------------------------------------------------ time
    def spent(self) -> float:
        return float(self.state.get("spent", 0.0)) + time.monotonic() - self.started

    def _save(self) -> None:
        doc = {**self.state, "spent": self.spent()}
        write_json(self.folder / STATE_FILE, seal(doc))

    def _datasets(self) -> list[tuple[DatasetEntry, int, bool]]:
        return [(e, self.sizes[e.name], self.shrinkable) for e in self.base.datasets]

    # ------------------------------------------------------------ the rungs
    def run(self, care: str) -> Recommendation:
        alive = [c.name for c in self.pool.candidates]
        records: list[RungRecord] = []
        last_frame: list[dict[str, Any]] = []
        last_scores: pd.DataFrame | None = None
        complete = False
        notes: list[str] = []
        finalists: list[str] = []  # the survivors of the last completed rung
        done = {int(r["index"]): r for r in self.state.get("rungs", [])}
        for rung in self.rungs:
            last = rung is self.rungs[-1]
            if rung.index in done:
                record = RungRecord(
                    **{
                        **done[rung.index],
                        "dropped": [tuple(d) for d in done[rung.index]["dropped"]],
                        "budget_dropped": [tuple(d) for d in done[rung.index]["budget_dropped"]],
                    }
                )
                for row in record.ranking:
                    if not math.isnan(row.get("fit_seconds", math.nan) or math.nan):
                        self.timings.setdefault(row["name"], []).append((record.size, row["fit_seconds"]))
                self.progress(f"rung {rung.index}: read back ({len(record.kept)} kept)")
                records.append(record)
                alive, last_frame, finalists = record.kept, record.ranking, record.kept
                complete = last
                if last:
                    last_scores = self._scores(record.run_dir)
                continue
            alive, budget_dropped, cell_limit = self._fit_budget(alive, rung)
            if not alive:
                notes.append(
                    f"The budget ran out before rung {rung.index} ({rung.size} rows): "
                    "the answer is the best of the largest completed rung."
                )
                if records:
                    records[-1].budget_dropped += budget_dropped
                break
            try:
                record, frame, scores = self._run_rung(rung, alive, cell_limit, last, _places(records))
            except RunInterrupted:
                self._save()
                raise
            record.budget_dropped = budget_dropped
            records.append(record)
            self.state.setdefault("rungs", []).append(dataclasses.asdict(record))
            self._save()
            alive, last_frame, last_scores, finalists = record.kept, frame, scores, record.kept
            complete = last
            self.progress(
                f"rung {rung.index}: {rung.size} rows, {len(record.ranking)} ran, {len(record.kept)} kept, "
                f"{len(record.dropped) + len(budget_dropped)} dropped, {show_seconds(record.seconds)} "
                f"({show_seconds(self.spent())} of {show_seconds(self.budget)})"
            )
        final = [r for r in last_frame if r["name"] in finalists]
        winner = final[0]["name"] if final and not math.isnan(final[0]["mean_rank"]) else None
        separations = self._separations(final, last_scores) if complete and len(final) > 1 else []
        rec = Recommendation(
            winner,
            self.by_name,
            final,
            complete,
            separations,
            records,
            self.weights,
            care,
            self.budget,
            self.spent(),
            list(self.pool.left_out),
            notes,
            str(self.folder),
        )
        if winner is not None:
            self._write_chosen(final)
        return rec

    def _fit_budget(self, alive: list[str], rung: Rung) -> tuple[list[str], list[tuple[str, str]], float]:
        """Drop candidates predicted to overrun the remaining budget; the per-cell time limit."""
        remaining = (self.budget - self.spent()) * (1 - RESERVE)
        dropped: list[tuple[str, str]] = []
        datasets = len(self.base.datasets)
        cells_per = len(rung.seeds) * datasets
        predicted: dict[str, float] = {}
        for name in alive:
            seen = self.timings.get(name)
            if not seen:
                continue
            model = fit_time_model([n for n, _ in seen], [t for _, t in seen])
            predicted[name] = cells_per * (model.predict(rung.size) + MIN_CELL_SECONDS)
        kept = []
        for name in alive:
            alone = predicted.get(name, 0.0) / min(self.cores, cells_per)
            if alone > remaining:
                dropped.append(
                    (name, f"predicted {show_seconds(alone)} > remaining {show_seconds(max(remaining, 0))}")
                )
            else:
                kept.append(name)
        # the whole rung must fit too: drop the costliest of those ranked lowest until it does
        while kept and sum(predicted.get(n, 0.0) for n in kept) / self.cores > remaining and len(kept) > 1:
            costly = max(kept[len(kept) // 2 :], key=lambda n: predicted.get(n, 0.0))
            total = sum(predicted.get(n, 0.0) for n in kept) / self.cores
            kept.remove(costly)
            dropped.append(
                (
                    costly,
                    f"predicted {show_seconds(predicted.get(costly, 0.0))}; the rung would need "
                    f"{show_seconds(total)} > remaining {show_seconds(max(remaining, 0))}",
                )
            )
        cells = len(kept) * cells_per
        waves = max(1, math.ceil(cells / self.cores))
        return kept, dropped, max(1.0, remaining / waves)

    def _run_rung(
        self, rung: Rung, alive: list[str], cell_limit: float, last: bool, before: Mapping[str, int]
    ) -> tuple[RungRecord, list[dict[str, Any]], pd.DataFrame]:

        rows = min(_rung_rows(n, rung, self.shrinkable) for n in self.sizes.values())
        carried = [
            n
            for n in alive
            if invalid_at(self.by_name[n].params, rows)
            or (not rung.full and too_sparse_at(self.by_name[n].params, rows))
        ]
        runnable = [n for n in alive if n not in carried]
        partial = self.state.setdefault("partial", {}).get(str(rung.index)) or {}
        if partial.get("run_dir"):  # an interrupted rung: the same suite text, so its folder can resume
            cell_limit = float(partial.get("time_limit", cell_limit))
        suite = self._rung_suite(rung, runnable, cell_limit)
        t0 = time.monotonic()
        try:
            summary = self._execute(suite, partial.get("run_dir"))
        except RunInterrupted as stopped:
            self.state["partial"][str(rung.index)] = {
                "run_dir": str(stopped.run_dir),
                "time_limit": cell_limit,
            }
            raise
        seconds = time.monotonic() - t0
        ranked = summary.ranking.ranked
        order = standings(ranked, summary.rank_by, runnable, before)
        frame = [self._row(s, ranked) for s in order]
        for s in order:
            if not math.isnan(s.fit_seconds):
                self.timings.setdefault(s.name, []).append((rung.size, s.fit_seconds))
        keep = kept_count(len(order), self.eta, last, before_last=rung.index == len(self.rungs) - 2)
        kept = [s.name for s in order[:keep] if not math.isnan(s.mean_rank)] or [order[0].name]
        kept += carried
        cut = order[keep - 1].mean_rank if keep <= len(order) else math.nan
        dropped = [
            (
                s.name,
                f"place {s.place} of {len(order)} at {rung.size} rows: mean rank {s.mean_rank:.2f} "
                f"vs {cut:.2f} for the last kept"
                if not math.isnan(s.mean_rank)
                else f"no result ({s.status})",
            )
            for s in order
            if s.name not in kept
        ]
        record = RungRecord(
            rung.index,
            rung.size,
            len(rung.seeds),
            seconds,
            str(summary.run_dir),
            frame,
            kept,
            dropped,
            [],
            carried,
        )
        return record, frame, summary.scores

    def _rung_suite(self, rung: Rung, names: list[str], cell_limit: float) -> Suite:
        return rung_suite(
            f"{self.base.name}-rung{rung.index}",
            self._datasets(),
            [self.by_name[n] for n in names],
            rung,
            dimensions=self.base.dimensions,
            ks=self.ks,
            rank_by=self.weights,
            time_limit=cell_limit,
            quadratic_limit=self.base.run.quadratic_limit,
            jobs=self.jobs,
        )

    def _execute(self, suite: Suite, resume: str | None) -> Any:
        """One rung through the ordinary runner; an interrupted rung's folder is continued."""
        from ..api import run_suite

        cache = self.folder / "cache"
        if resume and Path(resume).is_dir():
            try:
                return run_suite(suite, self.folder / "rungs", resume=resume, cache=cache, jobs=self.jobs)
            except InputError as exc:  # not resumable: start the rung again (finished cells are cached)
                log.warning("rung folder %s not resumed (%s)", resume, exc)
        return run_suite(suite, self.folder / "rungs", cache=cache, jobs=self.jobs)

    def _row(self, s: Any, ranked: pd.DataFrame) -> dict[str, Any]:
        rows = ranked[ranked["method"] == s.name]
        low = {c: float(rows[f"{c}_lo"].mean()) for c in self.weights if f"{c}_lo" in rows}
        high = {c: float(rows[f"{c}_hi"].mean()) for c in self.weights if f"{c}_hi" in rows}
        return {
            "name": s.name,
            "place": s.place,
            "mean_rank": s.mean_rank,
            "measures": s.measures,
            "low": low,
            "high": high,
            "fit_seconds": s.fit_seconds,
            "status": s.status,
        }

    def _scores(self, run_dir: str) -> pd.DataFrame | None:
        from ..run import RunFolder

        try:
            return RunFolder.open(run_dir).scores
        except (InputError, OSError) as exc:
            log.warning("cannot read back %s (%s)", run_dir, exc)
            return None

    def _separations(self, final: list[dict[str, Any]], scores: pd.DataFrame | None) -> list[Separation]:
        """One-sided Welch test per ranked measure: runner-up worse than winner over seeds."""
        if scores is None:
            return []
        ok = scores[scores["status"] == "ok"]
        a, b = final[0]["name"], final[1]["name"]
        out = []
        for column in self.weights:
            if column not in ok:
                continue
            wa = ok.loc[ok["method"] == a, column].dropna().to_numpy(float)
            wb = ok.loc[ok["method"] == b, column].dropna().to_numpy(float)
            if len(wa) < 2 or len(wb) < 2:
                continue
            higher = higher_is_better(column)
            worse = welch_test(wb, wa, higher).p_worse
            better = welch_test(wa, wb, higher).p_worse
            exact = bool(wa.min() == wa.max() and wb.min() == wb.max())
            out.append(Separation(column, float(wa.mean()), float(wb.mean()), worse, better, exact))
        return out

    def _write_chosen(self, final: list[dict[str, Any]]) -> None:
        datasets = []
        for e in self.base.datasets:
            item: dict[str, Any] = {"use": e.use, "name": e.name, "params": dict(e.params)}
            if e.holdout is not None:
                item["holdout"] = e.holdout
            datasets.append(item)
        text = chosen_suite(
            f"{self.base.name}-chosen",
            datasets,
            [self.by_name[r["name"]] for r in final],
            seeds=self.rungs[-1].seeds,
            dimensions=self.base.dimensions,
            ks=self.ks,
            rank_by=self.weights,
        )
        parse_suite(text, str(self.folder / "chosen.yaml"))  # what we write must load
        write_text_file(self.folder / "chosen.yaml", text)

    # ------------------------------------------------------------ audit
    def audit(self, winner: str | None) -> dict[str, Any]:
        """Every candidate on all the data with every seed (no cache): the exhaustive ranking and its time."""
        from ..api import run_suite

        rung = self.rungs[-1]
        suite = rung_suite(
            f"{self.base.name}-audit",
            self._datasets(),
            list(self.pool.candidates),
            rung,
            dimensions=self.base.dimensions,
            ks=self.ks,
            rank_by=self.weights,
            time_limit=None,
            quadratic_limit=self.base.run.quadratic_limit,
            jobs=self.jobs,
        )
        t0 = time.monotonic()
        summary = run_suite(suite, self.folder / "audit", cache=None, jobs=self.jobs)
        seconds = time.monotonic() - t0
        order = standings(summary.ranking.ranked, summary.rank_by, [c.name for c in self.pool.candidates])
        names = [s.name for s in order]
        return {
            "ranking": [{"name": s.name, "place": s.place, "mean_rank": s.mean_rank} for s in order],
            "winner_rank": names.index(winner) + 1 if winner in names else None,
            "best": names[0] if names else None,
            "count": len(names),
            "seconds": seconds,
            "run_dir": str(summary.run_dir),
        }


def _places(records: Sequence[RungRecord]) -> dict[str, int]:
    """Each candidate's place at the latest rung where it was judged (the tie-break of the next)."""
    places: dict[str, int] = {}
    for record in records:
        for row in record.ranking:
            places[row["name"]] = int(row["place"])
    return places
