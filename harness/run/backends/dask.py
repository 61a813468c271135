"""Execute cells on a Dask cluster: the same results as the local backend, computed elsewhere.

The parent (the machine running foldbench) sends each dataset to the cluster
once, submits one task per cell, and yields results as they arrive; the store
and the embedding cache stay on the parent.  Cached fits are looked up by the
parent before submitting, so a cached cell travels with its embedding and the
worker only scores it: workers never need to see the cache folder.

A dataset is placed on the cluster by a task that holds it, not by scattering:
the scheduler keeps that task's argument, so when the workers holding the data
die (a plug-in that kills its process takes its worker with it) the data are
rebuilt instead of lost.

A worker that dies takes every cell it was running with it, and Dask cannot
tell which one killed it.  A cell whose workers kept dying is therefore only a
suspect: once the other cells are done, each suspect runs again as the only
cell in flight, and only one whose workers still die then is ``crashed``.  What
a cell prints is captured on the worker (per thread) and written to its log by
the parent.

``distributed`` is imported inside the functions, so ``import harness`` works
without the ``dask`` extra.
"""

from __future__ import annotations

import io
import logging
import sys
import threading
import time
import traceback
import uuid
from collections.abc import Iterator
from concurrent.futures import CancelledError
from contextlib import contextmanager
from dataclasses import replace
from types import ModuleType
from typing import Any

from threadpoolctl import threadpool_limits

from ...config import CellStatus, Scoring
from ...datasets import Dataset
from ...errors import InputError
from ...methods import thread_budget
from ...text import exception_line
from ..cells import Cell, CellResult, KnownFit
from ..compute import compute_cell
from ._base import Execution
from ._capture import CappedText, WarningTally, write_log

log = logging.getLogger(__name__)

#: Seconds between checks for a stop request while waiting for results.
_POLL = 0.25
#: Seconds to wait for a scheduler given by address.
_CONNECT_TIMEOUT = 20
#: Seconds the cluster may have no worker at all before the cells still to do are given up
#: (crashed, with the reason; ``--resume`` computes them later).  Without it a run whose
#: workers all died, and were not replaced, would wait for ever.
NO_WORKER_GRACE = 300.0
#: BLAS threads per task: Dask runs one task per worker thread, so more would oversubscribe.
_TASK_THREADS = 1

MISSING_EXTRA = "the dask backend needs the dask extra: pip install 'foldbench[dask]'"
#: Worker deaths a task may cause on the cluster this backend starts (Dask's default is 3):
#: a suspect is run again alone anyway, so a first death is enough to suspect it.
_LOCAL_ALLOWED_FAILURES = 0


def probe(execution: Execution) -> None:
    """Check, before a run folder is made, that the cluster can be used.

    Raises
    ------
    InputError
        When ``distributed`` is not installed or the scheduler cannot be reached.
    """
    dd = _import_distributed()
    if execution.scheduler is not None:
        with _connect(dd, execution.scheduler):
            pass


class DaskBackend:
    """Cells as tasks on a Dask cluster: the same results as the local backend, computed elsewhere."""

    def execute(
        self,
        cells: list[Cell],
        datasets: dict[str, Dataset],
        scoring: Scoring,
        execution: Execution,
        known: dict[str, KnownFit],
        stop: threading.Event,
    ) -> Iterator[CellResult]:
        """Compute cells on a Dask cluster and yield each result as soon as it is ready.

        The contract is that of :class:`~harness.run.backends.Backend`.
        ``execution.jobs`` sizes the local cluster started when
        ``execution.scheduler`` is None; ``time_limit`` is measured on the
        worker from the moment the cell starts; ``isolate`` is ignored (cells
        never run in the parent process).

        Yields
        ------
        CellResult
            Besides the statuses of :func:`~harness.run.compute.compute_cell`:
            ``timeout`` when the cell overran its time limit; ``crashed`` when
            the workers running it kept dying; ``failed`` when the task raised
            (for instance a plug-in module that a worker cannot import).

        Raises
        ------
        InputError
            When ``distributed`` is not installed, or the scheduler cannot be reached.

        Notes
        -----
        A cell that overruns its time limit is reported at once, but Python
        cannot stop the thread that computes it: it keeps its worker busy until
        the fit ends.  The local backend, which runs each cell in a process of
        its own, stops such a cell for good.
        """
        if not cells:
            return
        dd = _import_distributed()
        with _client(dd, execution.scheduler, max(1, min(execution.jobs, len(cells)))) as client:
            yield from _run(dd, client, cells, datasets, scoring, execution, known, stop)


def _import_distributed() -> ModuleType:
    try:
        import distributed
    except ImportError:
        raise InputError("--backend", MISSING_EXTRA) from None
    return distributed


@contextmanager
def _client(dd: ModuleType, scheduler: str | None, workers: int) -> Iterator[Any]:
    """A client of the given scheduler, or of a cluster started (and closed) here."""
    if scheduler is not None:
        with _connect(dd, scheduler) as client:
            yield client
        return
    import dask

    # Worker processes, one thread each: a cell is the unit of parallelism, as in the local backend.
    with dask.config.set({"distributed.scheduler.allowed-failures": _LOCAL_ALLOWED_FAILURES}):
        cluster = dd.LocalCluster(
            n_workers=workers,
            threads_per_worker=1,
            processes=True,
            dashboard_address=":0",
            silence_logs=logging.ERROR,
        )
    try:
        client = dd.Client(cluster)
        log.info("started a local Dask cluster of %d workers (dashboard: %s)", workers, client.dashboard_link)
        try:
            yield client
        finally:
            client.close()
    finally:
        cluster.close()


@contextmanager
def _connect(dd: ModuleType, scheduler: str) -> Iterator[Any]:
    """A client of the scheduler at this address, or a one-line error."""
    try:
        client = dd.Client(scheduler, timeout=_CONNECT_TIMEOUT)
    except (OSError, TimeoutError, ValueError) as exc:
        raise InputError(
            "--scheduler",
            f"expected the address of a running Dask scheduler "
            f"(tcp://host:8786); could not connect to {scheduler!r} "
            f"({type(exc).__name__}: {exc})",
        ) from None
    try:
        yield client
    finally:
        client.close()


def _run(
    dd: ModuleType,
    client: Any,
    cells: list[Cell],
    datasets: dict[str, Dataset],
    scoring: Scoring,
    execution: Execution,
    known: dict[str, KnownFit],
    stop: threading.Event,
) -> Iterator[CellResult]:
    token = uuid.uuid4().hex[:8]  # two runs sharing a cluster must not share task names
    held = {
        name: client.submit(_hold, datasets[name], key=f"foldbench-data-{name}-{token}", pure=False)
        for name in dict.fromkeys(c.dataset for c in cells)
    }
    waiting = list(reversed(cells))
    suspects: list[Cell] = []  # cells whose workers died while other cells ran beside them
    pending: dict[Any, tuple[Cell, bool]] = {}  # future -> (cell, running alone)

    def submit(cell: Cell, alone: bool) -> None:
        future = client.submit(
            _task,
            cell,
            held[cell.dataset],
            scoring,
            known.get(cell.key),
            execution.time_limit,
            execution.plugin_roots,
            key=f"foldbench-cell-{cell.method}-{cell.key}-{token}{'-alone' if alone else ''}",
            pure=False,
            retries=0,
        )
        pending[future] = (cell, alone)

    log.info("sending %d cells to the Dask scheduler %s", len(cells), client.scheduler.address)
    no_worker_since: float | None = None
    try:
        while pending or waiting or suspects:
            threads = sum(client.nthreads().values())
            if threads:
                no_worker_since = None
            elif no_worker_since is None:
                no_worker_since = time.monotonic()
            elif time.monotonic() - no_worker_since > NO_WORKER_GRACE:
                client.cancel(list(pending))
                reason = (
                    f"not computed: the Dask cluster had no worker for {NO_WORKER_GRACE:g} s "
                    "(start workers, then continue with --resume)"
                )
                for cell in [*(c for c, _ in pending.values()), *reversed(waiting), *suspects]:
                    yield CellResult(cell, CellStatus.CRASHED, reason)
                pending.clear()
                waiting.clear()
                suspects.clear()
                return
            if stop.is_set():
                client.cancel(list(pending))
                for cell in [*(c for c, _ in pending.values()), *reversed(waiting), *suspects]:
                    yield CellResult(cell, CellStatus.INTERRUPTED, "stopped: the run was interrupted")
                pending.clear()
                waiting.clear()
                suspects.clear()
                return
            # No more cells in flight than worker threads, counted anew each time (workers come
            # and go); suspects run one at a time with nothing beside them, after the rest.
            capacity = max(1, threads)
            while waiting and len(pending) < capacity:
                submit(waiting.pop(), alone=False)
            if not waiting and not pending and suspects:
                submit(suspects.pop(0), alone=True)
            try:
                finished, _ = dd.wait(list(pending), timeout=_POLL, return_when="FIRST_COMPLETED")
            except TimeoutError:
                continue
            for future in finished:
                cell, alone = pending.pop(future)
                result = _collect(dd, future, cell, alone, execution.log_dir)
                future.release()  # the embedding need not stay in a worker's memory
                if result is None:
                    log.info("cell %s lost its worker beside other cells; it runs again alone", cell.key)
                    suspects.append(cell)
                    continue
                yield result
    finally:
        # Reached early when the consumer stops iterating; leaves nothing running on a shared cluster.
        if pending:
            client.cancel(list(pending))
        client.cancel(list(held.values()))


def _collect(
    dd: ModuleType, future: Any, cell: Cell, alone: bool, log_dir: str | None = None
) -> CellResult | None:
    """The cell's result, or a result saying why the cluster could not produce one.

    None when the cell's workers died while it ran beside others: it is then
    only a suspect, to be run again alone.
    """
    try:
        result, output = future.result()
    except dd.KilledWorker as exc:
        if not alone:
            return None
        return CellResult(
            cell,
            CellStatus.CRASHED,
            f"the worker process died each of the {exc.allowed_failures + 1} times it ran "
            "this cell alone (a crash such as os._exit or a segmentation fault, or an "
            "out-of-memory kill)",
        )
    except CancelledError as exc:
        return CellResult(
            cell, CellStatus.CRASHED, f"the Dask cluster dropped this cell: {exception_line(exc, 500)}"
        )
    except Exception as exc:  # the task itself raised: report it, keep the run going
        return CellResult(
            cell,
            CellStatus.FAILED,
            exception_line(exc, 500),
            detail="".join(traceback.format_exception(exc, limit=8)),
        )
    write_log(log_dir, cell.key, output)
    return result


# ---------------------------------------------------------------- on the worker


def _hold(dataset: Dataset) -> Dataset:
    """Hand the dataset to the cluster as a task result, which it can rebuild if lost."""
    return dataset


class _PerThread(io.TextIOBase):
    """``sys.stdout`` or ``sys.stderr`` of a worker: a cell thread's writes go to that cell's sink."""

    def __init__(self, real: Any) -> None:
        self.real = real
        self.sinks: dict[int, CappedText] = {}

    def write(self, text: str) -> int:
        sink = self.sinks.get(threading.get_ident())
        return sink.write(text) if sink is not None else self.real.write(text)

    def flush(self) -> None:
        self.real.flush()


_STREAMS_LOCK = threading.Lock()


def _streams() -> tuple[_PerThread, _PerThread]:
    """The worker's per-thread ``sys.stdout`` and ``sys.stderr`` (installed once per process)."""
    with _STREAMS_LOCK:
        if not isinstance(sys.stdout, _PerThread):
            sys.stdout = _PerThread(sys.stdout)
        if not isinstance(sys.stderr, _PerThread):
            sys.stderr = _PerThread(sys.stderr)
        return sys.stdout, sys.stderr


def _task(
    cell: Cell,
    dataset: Dataset,
    scoring: Scoring,
    known: KnownFit | None,
    time_limit: float | None,
    roots: tuple[str, ...],
) -> tuple[CellResult, bytes]:
    """Compute one cell on a worker, within its time limit; returns its result and its output.

    Workers on the parent's filesystem find plug-ins in the suite's folders;
    elsewhere those folders do not exist and change nothing.  What the cell
    prints from its own thread (Python level; C code writing to the file
    descriptors is not caught here) comes back capped at 1 MB.

    With ``measures: {backend: dask}`` the cell's neighbourhood measures are
    tasks on this same cluster: the cell is given the scheduler's address and
    its task leaves the worker's thread pool while it waits (``secede``), so
    that those tasks find a free thread even when every thread holds a cell.
    """
    spread = scoring.backend == "dask"
    if spread:
        import distributed

        scoring = replace(scoring, scheduler=distributed.get_worker().scheduler.address)
    box: dict[str, Any] = {}
    sink = CappedText()
    out, err = _streams()

    def work() -> None:
        me = threading.get_ident()
        out.sinks[me] = err.sinks[me] = sink
        try:
            with threadpool_limits(limits=_TASK_THREADS), thread_budget(_TASK_THREADS):
                box["result"] = compute_cell(cell, dataset, scoring, known, roots)
        except BaseException as exc:  # handed to the task's thread, which raises it to Dask
            box["error"] = exc
        finally:
            out.sinks.pop(me, None)
            err.sinks.pop(me, None)

    # A thread of its own so that the time limit can be kept while the fit runs.
    name = f"foldbench-cell-{cell.key}-{uuid.uuid4().hex[:6]}"
    worker = threading.Thread(target=work, name=name, daemon=True)
    tally = WarningTally(name)
    root = logging.getLogger()
    root.addHandler(tally)
    try:
        worker.start()
        if spread:
            distributed.secede()
        try:
            worker.join(time_limit)
        finally:
            if spread:
                distributed.rejoin()
    finally:
        root.removeHandler(tally)
    if worker.is_alive():
        log.warning(
            "cell %s overran its time limit; its fit goes on in the background until it ends", cell.key
        )
        timeout = CellResult(cell, CellStatus.TIMEOUT, f"no result within the time limit of {time_limit:g} s")
        return timeout, sink.getvalue()
    if "error" in box:
        raise box["error"]
    result = box["result"]
    result.warnings = tally.lines()
    return result, sink.getvalue()
