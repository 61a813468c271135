"""The local backend: each cell in a child process of its own, supervised by a joblib thread pool.

A cell that overruns its time limit is stopped, a child that dies
(segmentation fault, out-of-memory kill, ``os._exit``) marks only its own cell
as crashed, and the run goes on.  Children come from a fork server that has
imported the package once, so a cell starts in milliseconds, and datasets
reach them as memory-mapped ``.npy`` files staged once per run in a temporary
folder (removed at the end; one left by a process that was killed is removed
by the next run).  What a cell prints goes, through a pipe, to its log
(``execution.log_dir/<key>.log``, at most 1 MB), never to foldbench's own
output.  Children, their process groups and the fork server end with the
process that started them (:mod:`._orphans`).
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
from filelock import FileLock, Timeout
from joblib import Parallel, delayed
from threadpoolctl import ThreadpoolController

from ...config import CellStatus, Scoring
from ...datasets import Dataset
from ...methods import thread_budget
from ...metrics import DataSide
from .. import dataside
from ..cells import Cell, CellResult, KnownFit
from ..compute import compute_cell
from . import _orphans
from ._base import Execution
from ._capture import CappedText, WarningTally, write_log

log = logging.getLogger(__name__)

#: Seconds between checks for a stop request or the time limit while a cell runs.
_POLL = 0.25
#: First message of a child: it is running (the time limit starts now).
_STARTED = "started"
#: Staging folders are ``<temp>/foldbench-data-<pid>-<random>``, each with a lock its process holds.
_STAGE_PREFIX = "foldbench-data-"
_STAGE_LOCK = ".owner.lock"
#: Seconds to wait for the rest of a finished cell's output.
_OUTPUT_GRACE = 5.0
#: Seconds a child that has answered gets to run its exit handlers before its group is killed.
_EXIT_GRACE = 2.0


# ---------------------------------------------------------------- staging folders


@contextmanager
def staging_folder() -> Iterator[Path]:
    """A temporary folder for staged datasets, locked while this process uses it, removed after."""
    folder = Path(tempfile.mkdtemp(prefix=f"{_STAGE_PREFIX}{os.getpid()}-"))
    lock = FileLock(folder / _STAGE_LOCK, timeout=0)
    try:
        lock.acquire(blocking=False)
        yield folder
    finally:
        lock.release()
        shutil.rmtree(folder, ignore_errors=True)


def sweep_staging(root: str | Path | None = None) -> int:
    """Remove staging folders left by processes that are gone; returns how many.

    A folder counts as left behind when its lock can be taken: the operating
    system releases a lock when its process ends, however it ends.  Folders
    without a lock (being made, or of an older version) are left alone.
    """
    removed = 0
    for folder in Path(root or tempfile.gettempdir()).glob(f"{_STAGE_PREFIX}*"):
        lock_file = folder / _STAGE_LOCK
        if not lock_file.is_file():
            continue
        lock = FileLock(lock_file, timeout=0)
        try:
            lock.acquire(blocking=False)
        except (Timeout, OSError):
            continue  # in use by a live run (or not ours to touch)
        lock.release()
        shutil.rmtree(folder, ignore_errors=True)
        removed += 1
    if removed:
        log.info("removed %d staging folders left by runs that were killed", removed)
    return removed


# ---------------------------------------------------------------- datasets for children


def stage_datasets(
    datasets: dict[str, Dataset], folder: Path, sides: dict[str, DataSide] | None = None
) -> dict[str, Path]:
    """Write each dataset once as ``.npy`` files that children memory-map, with its data side if given."""
    places = {}
    for name, ds in datasets.items():
        where = folder / name
        where.mkdir(parents=True, exist_ok=True)
        array = ds.distances if ds.is_precomputed else ds.X
        np.save(where / "array.npy", np.ascontiguousarray(array, dtype=np.float64))
        meta = replace(ds, X=None, distances=None)
        (where / "meta.pkl").write_bytes(pickle.dumps((ds.is_precomputed, meta)))
        if sides and name in sides:
            dataside.stage(sides[name], where)
        places[name] = where
    return places


def _unstage(where: Path) -> tuple[Dataset, DataSide | None]:
    precomputed, meta = pickle.loads((where / "meta.pkl").read_bytes())
    array = np.load(where / "array.npy", mmap_mode="r")
    dataset = replace(meta, distances=array) if precomputed else replace(meta, X=array)
    return dataset, dataside.load(where)


def shared_sides(cells: list[Cell], datasets: dict[str, Dataset], scoring: Scoring) -> dict[str, DataSide]:
    """The data side of every dataset that two or more cells score in full (see :mod:`..dataside`)."""
    sides = {}
    for name in sorted(dataside.wanted(cells)):
        side = dataside.make(datasets[name], scoring)
        if side is not None:
            sides[name] = side
    return sides


def _child(
    cell: Cell,
    where: Path,
    scoring: Scoring,
    threads: int,
    known: KnownFit | None,
    roots: tuple[str, ...],
    conn: Connection,
    alive: Connection,
    output: Connection | None,
) -> None:
    # The parent handles Ctrl-C; a child only stops when told to, or when the parent is gone.
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    _orphans.die_with_parent()
    _orphans.lead_own_group()
    _orphans.end_with(alive)
    if output is not None:  # the cell's stdout and stderr, down to the file descriptors, go to its log
        os.dup2(output.fileno(), 1)
        os.dup2(output.fileno(), 2)
        output.close()
    conn.send(_STARTED)
    tally = WarningTally()
    shown = logging.StreamHandler(sys.stderr)  # every warning in full in the log, a tally in the record
    shown.setFormatter(logging.Formatter("%(levelname)s %(name)s: %(message)s"))
    root = logging.getLogger()
    root.handlers[:] = [tally, shown]
    root.setLevel(logging.WARNING)
    with thread_pools().limit(limits=threads), thread_budget(threads):
        dataset, side = _unstage(where)
        result = compute_cell(cell, dataset, scoring, known, roots, None if cell.holdout else side)
    result.warnings = tally.lines()
    sys.stdout.flush()
    sys.stderr.flush()
    conn.send(result)
    conn.close()


def thread_pools() -> ThreadpoolController:
    """The loaded BLAS and OpenMP pools, found once for as long as no module is imported.

    Finding them scans every loaded library (about 30 ms with the scientific stack loaded);
    the fork server finds them while warming up, so a cell process inherits the answer.
    """
    return _pools(len(sys.modules))


@functools.lru_cache(maxsize=1)
def _pools(modules: int) -> ThreadpoolController:
    return ThreadpoolController()


@functools.cache
def _context() -> mp.context.ForkServerContext | mp.context.SpawnContext:
    """The start method of cell processes: a fork server that has imported this module once."""
    method = "forkserver" if "forkserver" in mp.get_all_start_methods() else "spawn"
    if method == "spawn":
        return mp.get_context("spawn")
    ctx = mp.get_context("forkserver")
    ctx.set_forkserver_preload(["harness.run.backends._forkserver"])
    return ctx


def _start_fork_server() -> None:
    """Start the fork server from the calling thread (it is told to end when that thread does)."""
    if _context().get_start_method() != "forkserver":
        return
    from multiprocessing import forkserver

    with _main_module_hidden():
        forkserver.ensure_running()


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
    halt: threading.Event,
) -> CellResult:
    if stop.is_set() or halt.is_set():
        return CellResult(cell, CellStatus.INTERRUPTED, "not started: the run was interrupted")
    ctx = _context()
    receive, send = ctx.Pipe(duplex=False)
    alive_end, alive = ctx.Pipe(duplex=False)  # the child watches alive_end; only this process holds alive
    output_end, output = ctx.Pipe(duplex=False) if execution.log_dir else (None, None)
    proc = ctx.Process(
        target=_child,
        args=(cell, where, scoring, threads, known, execution.plugin_roots, send, alive_end, output),
        daemon=True,
    )
    with _main_module_hidden():
        proc.start()
    for end in (send, alive_end, output):
        if end is not None:
            end.close()
    sink = CappedText()
    pump = _pump(output_end, sink) if output_end is not None else None
    answered = False
    try:
        result, answered = _await(cell, proc, receive, execution.time_limit, stop, halt)
        return result
    finally:
        receive.close()
        if answered:  # let it end on its own: its exit handlers release named semaphores (numba's)
            proc.join(_EXIT_GRACE)
        _orphans.kill_group(proc.pid)  # the cell and anything it started
        if proc.is_alive():
            proc.kill()
        proc.join(5)
        alive.close()
        if pump is not None and output_end is not None:
            pump.join(_OUTPUT_GRACE)
            write_log(execution.log_dir, cell.key, sink.getvalue())
            if not pump.is_alive():
                output_end.close()


def _await(
    cell: Cell,
    proc: mp.process.BaseProcess,
    receive: Connection,
    time_limit: float | None,
    stop: threading.Event,
    halt: threading.Event,
) -> tuple[CellResult, bool]:
    """The child's result, or why there is none (time limit, stop request, death).

    The flag says whether the child itself answered (and so is ending normally).
    """
    t0 = None  # the clock starts when the child is running, not while the fork server warms up
    while True:
        waited = 0.0 if t0 is None else time.perf_counter() - t0
        if time_limit is not None and waited >= time_limit:
            return CellResult(
                cell, CellStatus.TIMEOUT, f"stopped after the time limit of {time_limit:g} s"
            ), False
        if stop.is_set() or halt.is_set():
            return CellResult(cell, CellStatus.INTERRUPTED, "stopped: the run was interrupted"), False
        step = _POLL if time_limit is None or t0 is None else min(_POLL, time_limit - waited)
        if receive.poll(step):
            try:
                message = receive.recv()
            except (EOFError, OSError):
                proc.join(5)
                return CellResult(cell, CellStatus.CRASHED, _death(proc.exitcode)), False
            if isinstance(message, str) and message == _STARTED:
                t0 = time.perf_counter()
                continue
            return message, True


def _pump(source: Connection, sink: CappedText) -> threading.Thread:
    """Copy what a child writes to ``source`` into ``sink`` until end-of-file, on a thread."""

    def copy() -> None:
        fd = source.fileno()
        while True:
            try:
                chunk = os.read(fd, 1 << 16)
            except OSError:
                return
            if not chunk:
                return
            sink.add(chunk)

    thread = threading.Thread(target=copy, name="foldbench-cell-output", daemon=True)
    thread.start()
    return thread


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
            sides = shared_sides(cells, datasets, scoring)
            for cell in cells:
                if stop.is_set():
                    yield CellResult(cell, CellStatus.INTERRUPTED, "not started: the run was interrupted")
                    continue
                side = None if cell.holdout is not None else sides.get(cell.dataset)
                yield compute_cell(
                    cell, datasets[cell.dataset], scoring, known.get(cell.key), execution.plugin_roots, side
                )
            return
        yield from self._isolated(cells, datasets, scoring, execution, known, stop)

    def _isolated(
        self,
        cells: list[Cell],
        datasets: dict[str, Dataset],
        scoring: Scoring,
        execution: Execution,
        known: dict[str, KnownFit],
        stop: threading.Event,
    ) -> Iterator[CellResult]:
        jobs = max(1, min(execution.jobs, len(cells)))
        threads = max(1, (os.cpu_count() or 1) // jobs)
        # Largest data first (stable: plan order within a dataset), so the long fits start early and
        # the small cells fill the last lanes; results are stored by key, so the order is not seen.
        cells = sorted(cells, key=lambda c: -datasets[c.dataset].n)
        sweep_staging()
        _start_fork_server()
        halt = threading.Event()  # set when the consumer stops early: running cells end at once
        with staging_folder() as folder:
            sides = shared_sides(cells, datasets, scoring)
            places = stage_datasets({c.dataset: datasets[c.dataset] for c in cells}, folder, sides)
            tasks = (
                delayed(_supervise)(
                    c, places[c.dataset], scoring, threads, execution, known.get(c.key), stop, halt
                )
                for c in cells
            )
            results = Parallel(
                n_jobs=jobs, backend="threading", return_as="generator_unordered", pre_dispatch="n_jobs"
            )(tasks)
            try:
                for result in results:  # noqa: UP028 (``yield from`` would close results before halt is set)
                    yield result
            finally:
                halt.set()
                results.close()
