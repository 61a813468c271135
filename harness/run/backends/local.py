"""The local backend: cells in worker processes, supervised by a joblib thread pool.

Each lane of the pool holds a worker process that runs cells one after another
(:func:`_reusable` says when a worker may go on: after a built-in method's cell
that ended well; a plug-in's cell runs in a worker of its own).  A cell that
overruns its time limit is stopped with its worker, a worker that dies
(segmentation fault, out-of-memory kill, ``os._exit``) marks only its own cell
as crashed, and the run goes on with a fresh worker.  Workers come from a fork
server that has imported the package once, so one starts in milliseconds, and
datasets reach them as memory-mapped ``.npy`` files staged once per run in a
temporary folder (removed at the end; one left by a process that was killed is
removed by the next run).  What a cell prints goes, through a pipe, to its log
(``execution.log_dir/<key>.log``, at most 1 MB), never to foldbench's own
output; a mark the worker writes after each cell keeps the cells' output apart.
Workers, their process groups and the fork server end with the process that
started them (:mod:`._orphans`).
"""

from __future__ import annotations

import contextlib
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


#: Written by a worker to its output after each cell's, so that each cell's log holds only its own.
_END_OF_CELL = b"\x00\x1efoldbench: end of cell output\x1e\x00\n"
#: A worker is retired after this many cells (a bound on anything a method leaves behind).
_MAX_CELLS = 64
#: A worker is retired after a cell whose fit's peak memory was above this (MiB): the allocator may
#: keep it.
_RETIRE_PEAK_MB = 512.0


def _serve(conn: Connection, alive: Connection, output: Connection | None) -> None:
    """A worker: run the cells sent on ``conn`` one after another until told to stop.

    Each cell's result goes back on ``conn``; after each cell the worker writes
    :data:`_END_OF_CELL` to its output, so the parent can tell the cells' output apart.
    """
    # The parent handles Ctrl-C; a worker only stops when told to, or when the parent is gone.
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    _orphans.die_with_parent()
    _orphans.lead_own_group()
    _orphans.end_with(alive)
    if output is not None:  # the cells' stdout and stderr, down to the file descriptors, go to the logs
        os.dup2(output.fileno(), 1)
        os.dup2(output.fileno(), 2)
        output.close()
    staged: dict[Path, tuple[Dataset, DataSide | None]] = {}
    while True:
        try:
            task = conn.recv()
        except (EOFError, OSError):
            return
        if task is None:
            break
        cell, where, scoring, threads, known, roots = task
        conn.send(_STARTED)
        if where not in staged:
            staged[where] = _unstage(where)
        dataset, side = staged[where]
        result = _one_cell(cell, dataset, side, scoring, threads, known, roots)
        sys.stdout.flush()
        sys.stderr.flush()
        if output is not None:
            os.write(1, _END_OF_CELL)
        conn.send(result)
    conn.close()


def _one_cell(
    cell: Cell,
    dataset: Dataset,
    side: DataSide | None,
    scoring: Scoring,
    threads: int,
    known: KnownFit | None,
    roots: tuple[str, ...],
) -> CellResult:
    """One cell inside a worker, with its own warning tally and its share of the threads."""
    tally = WarningTally()
    shown = logging.StreamHandler(sys.stderr)  # every warning in full in the log, a tally in the record
    shown.setFormatter(logging.Formatter("%(levelname)s %(name)s: %(message)s"))
    root = logging.getLogger()
    root.handlers[:] = [tally, shown]
    root.setLevel(logging.WARNING)
    try:
        with thread_pools().limit(limits=threads), thread_budget(threads):
            result = compute_cell(cell, dataset, scoring, known, roots, None if cell.holdout else side)
    finally:
        root.handlers[:] = []
    result.warnings = tally.lines()
    return result


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


class _Output:
    """A worker's printed output, cut into its cells at :data:`_END_OF_CELL` (read on a thread)."""

    def __init__(self, source: Connection) -> None:
        self.source = source
        self.changed = threading.Condition()
        self.current = CappedText()
        self.done: list[bytes] = []  # the output of cells whose end mark has come, oldest first
        self.tail = b""  # bytes that may be the start of an end mark
        self.ended = False
        self.thread = threading.Thread(target=self._copy, name="foldbench-cell-output", daemon=True)
        self.thread.start()

    def _copy(self) -> None:
        fd = self.source.fileno()
        while True:
            try:
                chunk = os.read(fd, 1 << 16)
            except OSError:
                chunk = b""
            with self.changed:
                if not chunk:
                    self.current.add(self.tail)
                    self.tail, self.ended = b"", True
                    self.changed.notify_all()
                    return
                self._feed(chunk)

    def _feed(self, chunk: bytes) -> None:
        data = self.tail + chunk
        while (at := data.find(_END_OF_CELL)) >= 0:
            self.current.add(data[:at])
            self.done.append(self.current.getvalue())
            self.current = CappedText()
            data = data[at + len(_END_OF_CELL) :]
            self.changed.notify_all()
        keep = len(_END_OF_CELL) - 1
        self.current.add(data[: max(0, len(data) - keep)])
        self.tail = data[max(0, len(data) - keep) :]

    def next_cell(self, timeout: float) -> bytes:
        """The output of the worker's oldest cell not yet taken (what there is, if its mark never comes)."""
        with self.changed:
            self.changed.wait_for(lambda: bool(self.done) or self.ended, timeout)
            if self.done:
                return self.done.pop(0)
            value = self.current.getvalue() + self.tail
            self.current, self.tail = CappedText(), b""
            return value

    def close(self) -> None:
        self.thread.join(_OUTPUT_GRACE)
        if not self.thread.is_alive():
            self.source.close()


class _Worker:
    """A worker process of the fork server, with the ends of its pipes that this process holds."""

    def __init__(self, with_output: bool) -> None:
        ctx = _context()
        self.conn, conn_end = ctx.Pipe(duplex=True)
        alive_end, self.alive = ctx.Pipe(duplex=False)  # the worker watches alive_end; only we hold alive
        output_end, output = ctx.Pipe(duplex=False) if with_output else (None, None)
        self.proc = ctx.Process(target=_serve, args=(conn_end, alive_end, output), daemon=True)
        with _main_module_hidden():
            self.proc.start()
        for end in (conn_end, alive_end, output):
            if end is not None:
                end.close()
        self.output = _Output(output_end) if output_end is not None else None
        self.cells = 0

    def retire(self, answered: bool) -> None:
        """End the worker and anything its cells started.

        A worker that answered is first let to end on its own: its exit handlers release
        named semaphores (numba's).
        """
        if answered:
            with contextlib.suppress(OSError, ValueError):
                self.conn.send(None)
            self.proc.join(_EXIT_GRACE)
        self.conn.close()
        _orphans.kill_group(self.proc.pid)
        if self.proc.is_alive():
            self.proc.kill()
        self.proc.join(5)
        self.alive.close()
        if self.output is not None:
            self.output.close()


class _Workers:
    """Idle workers of one run, handed to the lanes; every worker is retired at the end."""

    def __init__(self, with_output: bool) -> None:
        self.with_output = with_output
        self.idle: list[_Worker] = []
        self.lock = threading.Lock()
        self.closed = False

    def take(self) -> _Worker:
        with self.lock:
            if self.idle:
                return self.idle.pop()
        return _Worker(self.with_output)

    def give_back(self, worker: _Worker) -> None:
        with self.lock:
            if not self.closed:
                self.idle.append(worker)
                return
        worker.retire(answered=True)  # a lane that finished after the run closed its workers

    def close(self) -> None:
        with self.lock:
            idle, self.idle, self.closed = self.idle, [], True
        for worker in idle:
            worker.retire(answered=True)


def _reusable(cell: Cell, result: CellResult, worker: _Worker) -> bool:
    """Whether ``worker`` may run another cell after ``cell`` gave ``result``.

    Only after a built-in method's cell that ended well: a plug-in (``module:Name``) is
    code we do not know, so its cells run in a worker of their own; so does a cell after a
    fit that held much memory, and every :data:`_MAX_CELLS` cells a worker starts afresh.
    """
    peak = result.fit_peak_mb
    return (
        ":" not in cell.use
        and result.status == CellStatus.OK
        and worker.cells < _MAX_CELLS
        and not (peak is not None and peak > _RETIRE_PEAK_MB)
    )


def _supervise(
    cell: Cell,
    where: Path,
    scoring: Scoring,
    threads: int,
    execution: Execution,
    known: KnownFit | None,
    stop: threading.Event,
    halt: threading.Event,
    workers: _Workers,
) -> CellResult:
    if stop.is_set() or halt.is_set():
        return CellResult(cell, CellStatus.INTERRUPTED, "not started: the run was interrupted")
    worker = workers.take()
    try:
        worker.conn.send((cell, where, scoring, threads, known, execution.plugin_roots))
    except OSError:  # an idle worker that has gone (killed from outside): a new one
        worker.retire(answered=False)
        worker = _Worker(workers.with_output)
        worker.conn.send((cell, where, scoring, threads, known, execution.plugin_roots))
    worker.cells += 1
    answered = keep = False
    try:
        result, answered = _await(cell, worker.proc, worker.conn, execution.time_limit, stop, halt)
        keep = answered and _reusable(cell, result, worker)
    finally:  # whatever happened, a worker that is not kept is ended, and the cell's output kept
        if not keep:
            worker.retire(answered)
        if worker.output is not None:
            write_log(execution.log_dir, cell.key, worker.output.next_cell(_OUTPUT_GRACE))
    if keep:
        workers.give_back(worker)
    return result


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
        workers = _Workers(with_output=execution.log_dir is not None)
        with staging_folder() as folder, contextlib.closing(workers):
            sides = shared_sides(cells, datasets, scoring)
            places = stage_datasets({c.dataset: datasets[c.dataset] for c in cells}, folder, sides)
            tasks = (
                delayed(_supervise)(
                    c, places[c.dataset], scoring, threads, execution, known.get(c.key), stop, halt, workers
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
