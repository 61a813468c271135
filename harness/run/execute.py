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
from contextlib import ExitStack, contextmanager
from dataclasses import dataclass, replace
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

from ..config import BACKEND_NAMES, CellStatus
from ..datasets import Dataset
from ..errors import InputError
from ..methods import METHODS
from ..suite import Suite, load_datasets, load_suite
from .backends import Execution, execute
from .cache import EmbeddingCache
from .cells import Cell, CellResult, plan, seed_copies
from .folder import RunFolder, scores_frame
from .lock import folder_lock
from .manifest import environment

log = logging.getLogger(__name__)

ProgressHook = Callable[[CellResult, int, int], None]


class RunInterrupted(Exception):
    """The run was stopped by Ctrl-C or SIGTERM; every finished cell is stored.

    Attributes
    ----------
    run_dir : Path
        The run folder to resume.
    finished, total : int
        Cells stored so far, and cells in the suite.
    signum : int
        The signal that stopped it (``signal.SIGINT`` for Ctrl-C, ``signal.SIGTERM``).
    """

    def __init__(self, run_dir: Path, finished: int, total: int, signum: int = signal.SIGINT) -> None:
        self.run_dir, self.finished, self.total, self.signum = run_dir, finished, total, int(signum)
        super().__init__(f"interrupted: {finished} of {total} cells are stored in {run_dir}")


class _Stop(threading.Event):
    """The stop request of a run, with the signal that made it."""

    signum: int = signal.SIGINT


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
    signum : int
        With ``interrupted``: the signal that stopped the run.
    """

    folder: RunFolder
    suite: Suite
    order: list[Cell]
    done: int
    total: int
    interrupted: bool
    seconds: float
    signum: int = signal.SIGINT


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
    hold: ExitStack | None = None,
    share_seed_free: bool = True,
) -> ExecutedRun:
    """Fit and score every cell of a suite that is not already done, into a run folder.

    The parameters are those of :func:`harness.run_suite`; see there.  The run
    folder is locked (:func:`~harness.run.lock.folder_lock`) while cells run;
    with ``hold`` the lock is entered into that stack instead and outlives the
    call (the command line keeps it while it writes the report).  Ctrl-C and
    SIGTERM stop the run cleanly: running cells are stopped, finished ones and
    the tables are stored.  With ``share_seed_free`` (the default) a method
    whose output does not depend on the seed is fitted once per dataset and
    parameter point; its other seeds are stored as verified copies
    (:func:`~harness.run.cells.seed_copies`, :meth:`RunFolder.write_copy`).

    Returns
    -------
    ExecutedRun

    Raises
    ------
    FolderBusy
        When another process holds the folder to resume.
    """
    t_start = time.perf_counter()
    suite = _with_overrides(load_suite(suite) if not isinstance(suite, Suite) else suite, quadratic_limit)
    execution, backend_name = _execution(suite, jobs, time_limit, backend, scheduler, isolate)
    if suite.scoring.backend == "dask" and backend_name != "dask":
        raise InputError(
            "measures.backend",
            "dask expected together with run.backend: dask (or --backend dask): "
            f"the measures use the run's cluster, and this run's backend is {backend_name}",
        )
    cache = (
        EmbeddingCache(Path(cache)) if cache is not None and not isinstance(cache, EmbeddingCache) else cache
    )
    datasets = load_datasets(suite)
    cells, refused = plan(suite, datasets)
    order = cells + [r.cell for r in refused]
    if backend_name == "dask":
        from .backends.dask import probe

        probe(execution)  # before any folder is made: an unreachable scheduler leaves nothing behind
    with ExitStack() as own:
        stack = hold if hold is not None else own
        folder, manifest, done_keys = _open_folder(
            suite, datasets, out, resume, len(order), backend_name, scheduler, stack
        )
        stop = _Stop()
        with _stop_on_signals(stop):
            counter = _Progress(len(done_keys & {c.key for c in order}), len(order), progress)
            rows = {name: d.n for name, d in datasets.items()}
            copies = seed_copies(cells, suite, datasets) if share_seed_free else {}
            todo = _store_known(suite, folder, cells, refused, done_keys, cache, counter, rows, copies)
            todo = _copy_finished(todo, copies, folder, counter, _cache_writer(cache, suite))
            deferred = [c for c in todo if c.key in copies]
            for batch in ([c for c in todo if c.key not in copies], deferred):
                if stop.is_set():
                    break
                if batch is deferred:  # copies of cells computed just now; those that failed run themselves
                    batch = _copy_finished(batch, copies, folder, counter, _cache_writer(cache, suite))
                if not batch:
                    continue
                results = execute(
                    batch,
                    datasets,
                    suite.scoring,
                    replace(execution, log_dir=str(folder.path / "cells")),
                    backend=backend_name,
                    cache=cache,
                    stop=stop,
                )
                _store_results(results, suite, folder, cache, counter)
            # Stopped before the first cell was stored, a folder still gets its (empty) table.
            folder.write_table("scores.csv", folder.scores if counter.done else scores_frame([]))
        if not stop.is_set():
            manifest["finished"] = _now()
            manifest["counts"] = {str(k): int(v) for k, v in folder.scores["status"].value_counts().items()}
            folder.write_manifest(manifest)
    return ExecutedRun(
        folder,
        suite,
        order,
        counter.done,
        counter.total,
        stop.is_set(),
        time.perf_counter() - t_start,
        stop.signum,
    )


def _store_known(
    suite: Suite,
    folder: RunFolder,
    cells: list[Cell],
    refused: list[CellResult],
    done_keys: set[str],
    cache: EmbeddingCache | None,
    counter: _Progress,
    rows: dict[str, int],
    copies: dict[str, Cell],
) -> list[Cell]:
    """Store the refused cells and those the cache has finished; return the cells left to compute.

    ``rows`` gives each dataset's size, so that a cached embedding of another size is not used.
    Cells in ``copies`` are not looked up: they are copied from their source, and so marked.
    """
    for result in refused:
        if result.cell.key not in done_keys:
            folder.write_cell(result)
            counter.stored(result)
    todo = [c for c in cells if c.key not in done_keys]
    log.info("running %d cells (%d already done) into %s", len(todo), counter.done, folder.path)
    left = _from_cache([c for c in todo if c.key not in copies], suite, folder, cache, counter, rows)
    return left + [c for c in todo if c.key in copies]


def _cache_writer(cache: EmbeddingCache | None, suite: Suite) -> Callable[[CellResult], None]:
    """Put an ok result into the cache (nothing without one)."""

    def put(result: CellResult) -> None:
        if cache is not None and result.status == CellStatus.OK:
            cache.put_result(result, suite.scoring)

    return put


def _copy_finished(
    todo: list[Cell],
    copies: dict[str, Cell],
    folder: RunFolder,
    counter: _Progress,
    keep: Callable[[CellResult], None],
) -> list[Cell]:
    """Store as copies the cells whose seed-free source is finished ok (``keep`` gets each, for the
    cache); return the cells left."""
    left = []
    for cell in todo:
        source = copies.get(cell.key)
        result = folder.write_copy(source.key, cell) if source is not None else None
        if result is None:
            left.append(cell)
        else:
            keep(result)
            counter.stored(result)
    return left


def _store_results(
    results: Iterator[CellResult],
    suite: Suite,
    folder: RunFolder,
    cache: EmbeddingCache | None,
    counter: _Progress,
) -> None:
    """Store each computed cell as it arrives (interrupted ones are left to compute on resume)."""
    try:
        for result in results:
            if result.status == CellStatus.INTERRUPTED:
                continue
            folder.write_cell(result)
            if cache is not None and result.status == CellStatus.OK:
                cache.put_result(result, suite.scoring)
            counter.stored(result)
    finally:
        # Stops and reaps every cell process and removes staged data, whatever ended the loop.
        close = getattr(results, "close", None)
        if close is not None:
            close()


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
    stack: ExitStack,
) -> tuple[RunFolder, dict[str, Any], set[str]]:
    """A new run folder, or the folder to resume (checked to hold a run of this suite), locked in ``stack``.

    The lock is taken before anything is written, so a second process is refused untouched.
    """
    if resume is not None:
        RunFolder.open(resume)  # a one-line error for a folder that is not a run, before locking it
        stack.enter_context(folder_lock(resume))
        folder = RunFolder.open(resume)  # read again under the lock
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
    stack.enter_context(folder_lock(folder.path))
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
    # Optional method packages (umap-learn, openTSNE, ...) are recorded like plug-ins' packages.
    method_modules = tuple(
        METHODS[m.use].requires[0] for m in suite.methods if m.use in METHODS and METHODS[m.use].requires
    )
    return {
        "suite": {"name": suite.name, "path": str(Path(suite.path).resolve()), "hash": suite.digest},
        "seeds": list(suite.seeds),
        "started": _now(),
        "environment": environment(plugin_modules, method_modules),
        "datasets": {
            name: {"fingerprint": ds.fingerprint(), "n": ds.n, "n_features": ds.n_features}
            for name, ds in datasets.items()
        },
        "cells": cells,
    }


@contextmanager
def _stop_on_signals(stop: _Stop) -> Iterator[None]:
    """Ctrl-C or SIGTERM sets ``stop`` (cells end cleanly, tables are written); a second one acts as usual."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    previous: dict[int, Any] = {
        int(sig): signal.getsignal(sig) or signal.SIG_DFL for sig in (signal.SIGINT, signal.SIGTERM)
    }

    def handler(signum: int, frame: object) -> None:
        if not stop.is_set():
            stop.signum = signum
        stop.set()
        signal.signal(signum, previous[signum])
        log.warning("stopping (%s): finishing the bookkeeping of running cells", signal.Signals(signum).name)

    for sig in previous:
        signal.signal(sig, handler)
    try:
        yield
    finally:
        for sig, before in previous.items():
            signal.signal(sig, before)


def _now() -> str:
    return datetime.now(UTC).isoformat(timespec="seconds")
