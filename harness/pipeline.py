"""One run from suite to ranked tables: load, plan, execute, store, rank."""
from __future__ import annotations

import logging
import os
import signal
import threading
import time
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from dataclasses import dataclass, field, replace
from datetime import datetime, timezone
from pathlib import Path

import pandas as pd

from . import store
from .cache import EmbeddingCache
from .cells import CellResult, plan
from .errors import InputError
from .manifest import environment
from .methods import get_method_spec
from .rank import overall_ranking, rank_within_datasets, resolve_rank_by, summarise
from .report.tables import ranking_markdown
from .runner import Execution, execute
from .suite import BACKENDS, Suite, load_datasets, load_suite

log = logging.getLogger(__name__)

ProgressHook = Callable[[CellResult, int, int], None]

NEIGHBOUR_CAUTION = ("In neighbour-based embeddings ({names}) the sizes of clusters and the gaps "
                     "between them carry little meaning; judge them by the neighbourhood measures, "
                     "not by the picture.")


@dataclass
class RunOutcome:
    """What a finished run produced (all of it is also in ``run_dir``).

    Attributes
    ----------
    run_dir : Path
        The run folder.
    suite : Suite
        The suite that was run.
    scores : DataFrame
        A row per cell.
    summary : DataFrame
        Mean and sd per dataset x method x params, with ranks.
    overall : DataFrame
        Ranking across datasets.
    counts : dict
        Number of cells per status.
    notes : list of str
        Plain sentences worth reading next to the numbers.
    """

    run_dir: Path
    suite: Suite
    scores: pd.DataFrame
    summary: pd.DataFrame
    overall: pd.DataFrame
    counts: dict[str, int] = field(default_factory=dict)
    notes: list[str] = field(default_factory=list)
    rank_by: dict[str, float] = field(default_factory=dict)
    seconds: float = 0.0

    @property
    def failed(self) -> int:
        """Cells that did not finish ok (skipped cells not counted)."""
        return sum(v for k, v in self.counts.items() if k not in ("ok", "skipped"))


class RunInterrupted(Exception):
    """The run was stopped by Ctrl-C; every finished cell is stored.

    Attributes
    ----------
    run_dir : Path
        The run folder to resume.
    finished, total : int
        Cells stored so far, and cells in the suite.
    """

    def __init__(self, run_dir: Path, finished: int, total: int) -> None:
        self.run_dir, self.finished, self.total = run_dir, finished, total
        super().__init__(f"interrupted: {finished} of {total} cells are stored in {run_dir}")


def run_suite(suite: Suite | str | Path, out: str | Path = "results", *, jobs: int | None = None,
              time_limit: float | None = None, quadratic_limit: int | None = None,
              resume: str | Path | None = None, cache: EmbeddingCache | str | Path | None = None,
              backend: str | None = None, scheduler: str | None = None,
              isolate: bool = True, progress: ProgressHook | None = None) -> RunOutcome:
    """Fit every method on every dataset for every seed, score, rank and write the run folder.

    Parameters
    ----------
    suite : Suite or path
        A suite value or the path of a suite file.
    out : path
        Root folder of runs; the run lands in ``<out>/<suite name>/<run id>/``.
    jobs : int, optional
        Cells computed at once (default: the suite's ``run.jobs``, else all cores).
    time_limit : float, optional
        Seconds per cell (default: the suite's ``run.time_limit``, else none).
    quadratic_limit : int, optional
        Largest n for methods whose memory grows as n squared (default: the suite's).
    resume : path, optional
        A run folder of the same suite to continue: its finished cells are kept.
    cache : EmbeddingCache or path, optional
        Embedding cache to read and fill (``None``: no cache).
    backend : {"local", "dask"}, optional
        Where cells run (default: the suite's ``run.backend``, else local).
    scheduler : str, optional
        Address of a Dask scheduler (with the dask backend; none starts a local cluster).
    isolate : bool
        Run each cell in its own child process (time limits and crash isolation).
    progress : callable, optional
        ``progress(result, done, total)`` after each cell.

    Returns
    -------
    RunOutcome

    Raises
    ------
    RunInterrupted
        On Ctrl-C, after storing every finished cell and the tables so far.
    """
    t_start = time.perf_counter()
    if not isinstance(suite, Suite):
        suite = load_suite(suite)
    if quadratic_limit is not None:
        suite = replace(suite, run=replace(suite.run, quadratic_limit=quadratic_limit))
    backend = backend or suite.run.backend
    scheduler = scheduler or suite.run.scheduler
    if backend not in BACKENDS:
        raise InputError("--backend", f"expected one of {', '.join(BACKENDS)}, got {backend!r}")
    if scheduler and backend != "dask":
        raise InputError("--scheduler", "expected only together with --backend dask")
    if cache is not None and not isinstance(cache, EmbeddingCache):
        cache = EmbeddingCache(Path(cache))
    datasets = load_datasets(suite)
    cells, refused = plan(suite, datasets)
    order = cells + [r.cell for r in refused]
    if resume is not None:
        run_dir = _resumable(Path(resume), suite)
        manifest = store.read_manifest(run_dir)
        manifest.setdefault("resumed", []).append(_now())
        done_keys = store.finished_keys(run_dir)
    else:
        run_dir = store.new_run_dir(out, suite.name)
        manifest = _manifest(suite, datasets, len(order))
        manifest["backend"] = {"name": backend, "scheduler": scheduler}
        store.write_text(run_dir / "suite.yaml", suite.text)
        done_keys = set()
    store.write_manifest(run_dir, manifest)
    todo = [c for c in cells if c.key not in done_keys]
    total, done = len(order), len(done_keys & {c.key for c in order})
    for result in refused:
        if result.cell.key not in done_keys:
            store.write_cell(run_dir, result)
            done += 1
            if progress:
                progress(result, done, total)
    execution = Execution(jobs=jobs or suite.run.jobs or os.cpu_count() or 1,
                          time_limit=time_limit if time_limit is not None else suite.run.time_limit,
                          isolate=isolate)
    log.info("running %d cells (%d already done) with %d jobs into %s", len(todo), done, execution.jobs, run_dir)
    stop = threading.Event()
    if cache is not None:
        finished = {c.key: cache.get_result(c, suite.scoring) for c in todo}
        for result in filter(None, finished.values()):
            store.write_cell(run_dir, result)
            done += 1
            if progress:
                progress(result, done, total)
        todo = [c for c in todo if finished[c.key] is None]
    if backend == "dask":
        from .distributed import execute_on_dask
        results = execute_on_dask(todo, datasets, suite.scoring, execution, cache, stop, scheduler=scheduler)
    else:
        results = execute(todo, datasets, suite.scoring, execution, cache, stop)
    with _stop_on_ctrl_c(stop):
        for result in results:
            if result.status == "interrupted":
                continue
            store.write_cell(run_dir, result)
            if cache is not None and result.status == "ok":
                cache.put_result(result, suite.scoring)
            done += 1
            if progress:
                progress(result, done, total)
    outcome = summarise_run(run_dir, suite, order)
    if stop.is_set():
        raise RunInterrupted(run_dir, done, total)
    manifest["finished"] = _now()
    manifest["counts"] = outcome.counts
    store.write_manifest(run_dir, manifest)
    outcome.seconds = time.perf_counter() - t_start
    return outcome


def _manifest(suite: Suite, datasets: dict, cells: int) -> dict:
    plugin_modules = tuple(m.use.split(":", 1)[0] for m in suite.methods if ":" in m.use)
    return {
        "suite": {"name": suite.name, "path": str(Path(suite.path).resolve()), "hash": suite.digest},
        "seeds": list(suite.seeds),
        "started": _now(),
        "environment": environment(plugin_modules),
        "datasets": {name: {"fingerprint": ds.fingerprint(), "n": ds.n, "n_features": ds.n_features}
                     for name, ds in datasets.items()},
        "cells": cells,
    }


def _resumable(run_dir: Path, suite: Suite) -> Path:
    manifest = store.read_manifest(run_dir)
    if manifest.get("suite", {}).get("hash") != suite.digest:
        raise InputError(str(run_dir), f"expected a run of this suite ({suite.path}); the folder holds a "
                                       f"run of '{manifest.get('suite', {}).get('name')}' made from "
                                       "different suite text")
    return run_dir


@contextmanager
def _stop_on_ctrl_c(stop: threading.Event) -> Iterator[None]:
    """First Ctrl-C sets ``stop`` (cells end cleanly); a second one raises as usual."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return

    def handler(signum: int, frame: object) -> None:
        stop.set()
        signal.signal(signal.SIGINT, previous)
        log.warning("stopping: finishing the bookkeeping of running cells")

    previous = signal.signal(signal.SIGINT, handler)
    try:
        yield
    finally:
        signal.signal(signal.SIGINT, previous)


def summarise_run(run_dir: Path, suite: Suite, order: list | None = None) -> RunOutcome:
    """Rebuild scores, summary and rankings of a run folder from its cell records and write them."""
    scores = store.scores_frame(store.read_cell_records(run_dir), order)
    rank_by = resolve_rank_by(suite.scoring.rank_by, suite.scoring.ks)
    summary = summarise(scores)
    ranked = rank_within_datasets(summary, rank_by)
    overall = overall_ranking(ranked)
    notes = run_notes(suite, scores)
    store.write_csv(run_dir / "scores.csv", scores)
    store.write_csv(run_dir / "summary.csv", ranked)
    store.write_text(run_dir / "ranking.md", ranking_markdown(suite.name, ranked, overall, rank_by, notes))
    counts = {str(k): int(v) for k, v in scores["status"].value_counts().items()}
    return RunOutcome(run_dir, suite, scores, ranked, overall, counts, notes, rank_by)


def run_notes(suite: Suite, scores: pd.DataFrame) -> list[str]:
    """Plain sentences that keep a reader from being misled by the tables."""
    notes = []
    neighbour = sorted({m.name for m in suite.methods if get_method_spec(m.use).family == "neighbour"})
    if neighbour:
        notes.append(NEIGHBOUR_CAUTION.format(names=", ".join(neighbour)))
    if "estimated" in scores and scores["estimated"].fillna("").str.len().gt(0).any():
        notes.append("Some values are estimates from sampled pairs or query points; their 95% "
                     "interval half-widths are in the *_ci95 columns of scores.csv.")
    skipped = scores[scores["status"] == "skipped"]
    for (_, method), group in skipped.groupby(["dataset", "method"], sort=False):
        notes.append(f"Skipped {method} on {group['dataset'].iloc[0]}: {group['error'].iloc[0]}")
    return notes


def _now() -> str:
    return datetime.now(timezone.utc).isoformat(timespec="seconds")
