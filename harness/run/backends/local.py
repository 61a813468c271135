"""The local backend: each cell in a child process of its own, supervised by a joblib thread pool.

A cell that overruns its time limit is stopped, a child that dies
(segmentation fault, out-of-memory kill, ``os._exit``) marks only its own cell
as crashed, and the run goes on.  Children come from a fork server that has
imported the package once, so a cell starts in milliseconds, and datasets
reach them as memory-mapped ``.npy`` files staged once per run in a temporary
folder (the only files this backend writes; they are removed at the end).
"""

from __future__ import annotations

import functools
import logging
import multiprocessing as mp
import os
import pickle
import shutil
import signal
import sys
import tempfile
import threading
import time
import types
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import replace
from multiprocessing.connection import Connection
from pathlib import Path

import numpy as np
from joblib import Parallel, delayed
from threadpoolctl import threadpool_limits

from ...config import CellStatus, Scoring
from ...datasets import Dataset
from ...methods import thread_budget
from ..cells import Cell, CellResult, KnownFit
from ..compute import compute_cell
from ._base import Execution

log = logging.getLogger(__name__)

#: Seconds between checks for a stop request or the time limit while a cell runs.
_POLL = 0.25
#: First message of a child: it is running (the time limit starts now).
_STARTED = "started"


# ---------------------------------------------------------------- datasets for children


def stage_datasets(datasets: dict[str, Dataset], folder: Path) -> dict[str, Path]:
    """Write each dataset once as ``.npy`` files that children memory-map."""
    places = {}
    for name, ds in datasets.items():
        where = folder / name
        where.mkdir(parents=True, exist_ok=True)
        array = ds.distances if ds.is_precomputed else ds.X
        np.save(where / "array.npy", np.ascontiguousarray(array, dtype=np.float64))
        meta = replace(ds, X=None, distances=None)
        (where / "meta.pkl").write_bytes(pickle.dumps((ds.is_precomputed, meta)))
        places[name] = where
    return places


def _unstage(where: Path) -> Dataset:
    precomputed, meta = pickle.loads((where / "meta.pkl").read_bytes())
    array = np.load(where / "array.npy", mmap_mode="r")
    return replace(meta, distances=array) if precomputed else replace(meta, X=array)


class _Collect(logging.Handler):
    """Keeps the warnings a child logs, to hand them back with its result."""

    def __init__(self) -> None:
        super().__init__(logging.WARNING)
        self.lines: list[str] = []

    def emit(self, record: logging.LogRecord) -> None:
        self.lines.append(" ".join(record.getMessage().split())[:300])


def _child(
    cell: Cell,
    where: Path,
    scoring: Scoring,
    threads: int,
    known: KnownFit | None,
    roots: tuple[str, ...],
    conn: Connection,
) -> None:
    # The parent handles Ctrl-C; a child only stops when told to.
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    conn.send(_STARTED)
    collect = _Collect()
    root = logging.getLogger()
    root.handlers[:] = [collect]
    root.setLevel(logging.WARNING)
    with threadpool_limits(limits=threads), thread_budget(threads):
        result = compute_cell(cell, _unstage(where), scoring, known, roots)
    result.warnings = tuple(dict.fromkeys(collect.lines))
    conn.send(result)
    conn.close()


@functools.cache
def _context() -> mp.context.ForkServerContext | mp.context.SpawnContext:
    """The start method of cell processes: a fork server that has imported this module once."""
    method = "forkserver" if "forkserver" in mp.get_all_start_methods() else "spawn"
    if method == "spawn":
        return mp.get_context("spawn")
    ctx = mp.get_context("forkserver")
    ctx.set_forkserver_preload(["harness.run.backends.local"])
    return ctx


_START_LOCK = threading.Lock()


@contextmanager
def _main_module_hidden() -> Iterator[None]:
    """Start children without the caller's ``__main__``.

    multiprocessing re-imports the parent's main script in every child it starts
    this way; a user's script without an ``if __name__ == "__main__"`` guard would
    then run again in each cell, and code piped to ``python -`` cannot be found at
    all.  Cells need nothing from ``__main__``, so children start from a blank one.
    The lock keeps concurrent starts from seeing each other's swap.
    """
    with _START_LOCK:
        main = sys.modules["__main__"]
        sys.modules["__main__"] = types.ModuleType("__main__")
        try:
            yield
        finally:
            sys.modules["__main__"] = main


def _supervise(
    cell: Cell,
    where: Path,
    scoring: Scoring,
    threads: int,
    execution: Execution,
    known: KnownFit | None,
    stop: threading.Event,
) -> CellResult:
    if stop.is_set():
        return CellResult(cell, CellStatus.INTERRUPTED, "not started: the run was interrupted")
    time_limit = execution.time_limit
    ctx = _context()
    receive, send = ctx.Pipe(duplex=False)
    proc = ctx.Process(
        target=_child, args=(cell, where, scoring, threads, known, execution.plugin_roots, send), daemon=True
    )
    with _main_module_hidden():
        proc.start()
    send.close()
    t0 = None  # the clock starts when the child is running, not while the fork server warms up
    try:
        while True:
            waited = 0.0 if t0 is None else time.perf_counter() - t0
            if time_limit is not None and waited >= time_limit:
                return CellResult(
                    cell, CellStatus.TIMEOUT, f"stopped after the time limit of {time_limit:g} s"
                )
            if stop.is_set():
                return CellResult(cell, CellStatus.INTERRUPTED, "stopped: the run was interrupted")
            step = _POLL if time_limit is None or t0 is None else min(_POLL, time_limit - waited)
            if receive.poll(step):
                try:
                    message = receive.recv()
                except (EOFError, OSError):
                    proc.join(5)
                    return CellResult(cell, CellStatus.CRASHED, _death(proc.exitcode))
                if isinstance(message, str) and message == _STARTED:
                    t0 = time.perf_counter()
                    continue
                return message
    finally:
        receive.close()
        if proc.is_alive():
            proc.kill()
        proc.join(5)


def _death(code: int | None) -> str:
    if code is None:
        return "the worker process vanished"
    if code < 0:
        try:
            name = signal.Signals(-code).name
        except ValueError:
            name = f"signal {-code}"
        hint = " (likely killed for using too much memory)" if name == "SIGKILL" else ""
        return f"the worker process died from {name}{hint}"
    return f"the worker process exited with code {code} before reporting a result"


class LocalBackend:
    """Cells in child processes on this machine (or in this process with ``isolate=False``)."""

    def execute(
        self,
        cells: list[Cell],
        datasets: dict[str, Dataset],
        scoring: Scoring,
        execution: Execution,
        known: dict[str, KnownFit],
        stop: threading.Event,
    ) -> Iterator[CellResult]:
        """Compute cells, yielding each result when ready (see :class:`~harness.run.backends.Backend`)."""
        if not cells:
            return
        if not execution.isolate:
            for cell in cells:
                if stop.is_set():
                    yield CellResult(cell, CellStatus.INTERRUPTED, "not started: the run was interrupted")
                    continue
                yield compute_cell(
                    cell, datasets[cell.dataset], scoring, known.get(cell.key), execution.plugin_roots
                )
            return
        jobs = max(1, min(execution.jobs, len(cells)))
        threads = max(1, (os.cpu_count() or 1) // jobs)
        folder = Path(tempfile.mkdtemp(prefix="foldbench-data-"))
        try:
            places = stage_datasets({c.dataset: datasets[c.dataset] for c in cells}, folder)
            tasks = (
                delayed(_supervise)(c, places[c.dataset], scoring, threads, execution, known.get(c.key), stop)
                for c in cells
            )
            yield from Parallel(
                n_jobs=jobs, backend="threading", return_as="generator_unordered", pre_dispatch="n_jobs"
            )(tasks)
        finally:
            shutil.rmtree(folder, ignore_errors=True)
