"""One run of a suite into a run folder: load, plan, skip what is done or cached, execute, store.

:func:`execute_suite` leaves a folder with every cell's record, ``scores.csv``
and the manifest; ranking it is the next stage's job
(:func:`harness.compare.summarise`).
"""

from __future__ import annotations

import logging
import os
import signal
import threading
import time
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from dataclasses import dataclass, replace
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

from ..config import BACKEND_NAMES, CellStatus
from ..datasets import Dataset
from ..errors import InputError
from ..suite import Suite, load_datasets, load_suite
from .backends import Execution, execute
from .cache import EmbeddingCache
from .cells import Cell, CellResult, plan
from .folder import RunFolder
from .manifest import environment

log = logging.getLogger(__name__)

ProgressHook = Callable[[CellResult, int, int], None]


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


@dataclass
class ExecutedRun:
    """What :func:`execute_suite` leaves behind.

    Attributes
    ----------
    folder : RunFolder
        The run folder, with a record per finished cell and ``scores.csv``.
    suite : Suite
        The suite as run (command-line overrides applied).
    order : list of Cell
        Every cell of the plan, in suite order (tables follow it).
    done, total : int
        Cells stored, and cells planned.
    interrupted : bool
        The run was stopped before every cell finished.
    seconds : float
        Wall time from start to the last stored cell.
    """

    folder: RunFolder
    suite: Suite
    order: list[Cell]
    done: int
    total: int
    interrupted: bool
    seconds: float


@dataclass
class _Progress:
    """Counts stored cells and tells the caller's hook."""

    done: int
    total: int
    hook: ProgressHook | None

    def stored(self, result: CellResult) -> None:
        self.done += 1
        if self.hook:
            self.hook(result, self.done, self.total)


def execute_suite(
    suite: Suite | str | Path,
    out: str | Path = "results",
    *,
    jobs: int | None = None,
    time_limit: float | None = None,
    quadratic_limit: int | None = None,
    resume: str | Path | None = None,
    cache: EmbeddingCache | str | Path | None = None,
    backend: str | None = None,
    scheduler: str | None = None,
    isolate: bool = True,
    progress: ProgressHook | None = None,
) -> ExecutedRun:
    """Fit and score every cell of a suite that is not already done, into a run folder.

    The parameters are those of :func:`harness.run_suite`; see there.

    Returns
    -------
    ExecutedRun
    """
    t_start = time.perf_counter()
    suite = _with_overrides(load_suite(suite) if not isinstance(suite, Suite) else suite, quadratic_limit)
    execution, backend_name = _execution(suite, jobs, time_limit, backend, scheduler, isolate)
    cache = (
        EmbeddingCache(Path(cache)) if cache is not None and not isinstance(cache, EmbeddingCache) else cache
    )
    datasets = load_datasets(suite)
    cells, refused = plan(suite, datasets)
    order = cells + [r.cell for r in refused]
    folder, manifest, done_keys = _open_folder(
        suite, datasets, out, resume, len(order), backend_name, scheduler
    )
    counter = _Progress(len(done_keys & {c.key for c in order}), len(order), progress)
    for result in refused:
        if result.cell.key not in done_keys:
            folder.write_cell(result)
            counter.stored(result)
    todo = [c for c in cells if c.key not in done_keys]
    log.info(
        "running %d cells (%d already done) with %d jobs into %s",
        len(todo),
        counter.done,
        execution.jobs,
        folder.path,
    )
    todo = _from_cache(todo, suite, folder, cache, counter, {n: d.n for n, d in datasets.items()})
    stop = threading.Event()
    results = execute(todo, datasets, suite.scoring, execution, backend=backend_name, cache=cache, stop=stop)
    with _stop_on_ctrl_c(stop):
        for result in results:
            if result.status == CellStatus.INTERRUPTED:
                continue
            folder.write_cell(result)
            if cache is not None and result.status == CellStatus.OK:
                cache.put_result(result, suite.scoring)
            counter.stored(result)
    folder.write_table("scores.csv", folder.scores)
    if not stop.is_set():
        manifest["finished"] = _now()
        manifest["counts"] = {str(k): int(v) for k, v in folder.scores["status"].value_counts().items()}
        folder.write_manifest(manifest)
    return ExecutedRun(
        folder, suite, order, counter.done, counter.total, stop.is_set(), time.perf_counter() - t_start
    )


def _with_overrides(suite: Suite, quadratic_limit: int | None) -> Suite:
    if quadratic_limit is None:
        return suite
    return replace(suite, run=replace(suite.run, quadratic_limit=quadratic_limit))


def _execution(
    suite: Suite,
    jobs: int | None,
    time_limit: float | None,
    backend: str | None,
    scheduler: str | None,
    isolate: bool,
) -> tuple[Execution, str]:
    name = backend or suite.run.backend
    scheduler = scheduler or suite.run.scheduler
    if name not in BACKEND_NAMES:
        raise InputError("--backend", f"expected one of {', '.join(BACKEND_NAMES)}, got {name!r}")
    if scheduler and name != "dask":
        raise InputError("--scheduler", "expected only together with --backend dask")
    execution = Execution(
        jobs=jobs or suite.run.jobs or os.cpu_count() or 1,
        time_limit=time_limit if time_limit is not None else suite.run.time_limit,
        isolate=isolate,
        scheduler=scheduler,
        plugin_roots=suite.plugin_roots,
    )
    return execution, name


def _open_folder(
    suite: Suite,
    datasets: dict[str, Dataset],
    out: str | Path,
    resume: str | Path | None,
    cells: int,
    backend: str,
    scheduler: str | None,
) -> tuple[RunFolder, dict[str, Any], set[str]]:
    """A new run folder, or the folder to resume (checked to hold a run of this suite)."""
    if resume is not None:
        folder = RunFolder.open(resume)
        manifest = dict(folder.manifest)
        if (manifest.get("suite") or {}).get("hash") != suite.digest:
            raise InputError(
                str(folder.path),
                f"expected a run of this suite ({suite.path}); the folder holds a "
                f"run of '{(manifest.get('suite') or {}).get('name')}' made from "
                "different suite text",
            )
        manifest.setdefault("resumed", []).append(_now())
        folder.write_manifest(manifest)
        return folder, manifest, folder.finished_keys()
    folder = RunFolder.create(out, suite.name)
    manifest = _manifest(suite, datasets, cells)
    manifest["backend"] = {"name": backend, "scheduler": scheduler}
    folder.write_suite(suite.text)
    folder.write_manifest(manifest)
    return folder, manifest, set()


def _from_cache(
    todo: list[Cell],
    suite: Suite,
    folder: RunFolder,
    cache: EmbeddingCache | None,
    counter: _Progress,
    rows: dict[str, int],
) -> list[Cell]:
    """Store the cells the cache has verified finished results for; return the rest."""
    if cache is None:
        return todo
    left = []
    for cell in todo:
        result = cache.get_result(cell, suite.scoring, rows.get(cell.dataset))
        if result is None:
            left.append(cell)
            continue
        folder.write_cell(result)
        counter.stored(result)
    return left


def _manifest(suite: Suite, datasets: dict[str, Dataset], cells: int) -> dict[str, Any]:
    plugin_modules = tuple(m.use.split(":", 1)[0] for m in suite.methods if m.is_plugin)
    return {
        "suite": {"name": suite.name, "path": str(Path(suite.path).resolve()), "hash": suite.digest},
        "seeds": list(suite.seeds),
        "started": _now(),
        "environment": environment(plugin_modules),
        "datasets": {
            name: {"fingerprint": ds.fingerprint(), "n": ds.n, "n_features": ds.n_features}
            for name, ds in datasets.items()
        },
        "cells": cells,
    }


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


def _now() -> str:
    return datetime.now(UTC).isoformat(timespec="seconds")
