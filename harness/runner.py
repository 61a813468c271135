"""Execute cells: fit, score, and hand plain results back, one at a time.

:func:`compute_cell` is a pure function of a cell, its dataset and the scoring
settings.  The local backend runs each cell in a child process of its own,
supervised by a joblib thread pool: a cell that overruns its time limit is
stopped, a child that dies (segmentation fault, out-of-memory kill,
``os._exit``) marks only its own cell as crashed, and the run goes on.
Children come from a fork server that has imported the package once, so a
cell starts in milliseconds, and datasets reach them as memory-mapped ``.npy``
files written once per run.
"""
from __future__ import annotations

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
import traceback
import types
from contextlib import contextmanager
from collections.abc import Iterator
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np
from joblib import Parallel, delayed
from threadpoolctl import threadpool_limits

from .cache import EmbeddingCache
from .cells import Cell, CellResult
from .datasets import Dataset
from .methods import DegenerateEmbedding, fit_embedding, get_method_spec
from .metrics import score
from .suite import Scoring

log = logging.getLogger(__name__)

#: Seconds between checks for a stop request or the time limit while a cell runs.
_POLL = 0.25
#: First message of a child: it is running (the time limit starts now).
_STARTED = "started"


@dataclass(frozen=True)
class Execution:
    """How to execute cells.

    Parameters
    ----------
    jobs : int
        Cells computed at the same time.
    time_limit : float or None
        Seconds a cell may take (fit and scoring) before it is stopped.
    isolate : bool
        Run each cell in a child process (needed for time limits and crash isolation).
    """

    jobs: int = 1
    time_limit: float | None = None
    isolate: bool = True


# ---------------------------------------------------------------- one cell

class _PeakMeter:
    """Peak resident memory added during a block, from Linux's /proc (VmHWM)."""

    def __enter__(self) -> "_PeakMeter":
        self.base = _rss_kib("VmRSS")
        self._reset_ok = _reset_peak()
        self.peak_mb = float("nan")
        return self

    def __exit__(self, *exc: object) -> None:
        peak = _rss_kib("VmHWM")
        if self._reset_ok and peak is not None and self.base is not None:
            self.peak_mb = max(0.0, (peak - self.base) / 1024.0)


def _rss_kib(field: str) -> float | None:
    try:
        with open("/proc/self/status", encoding="ascii") as fh:
            for line in fh:
                if line.startswith(field + ":"):
                    return float(line.split()[1])
    except OSError:
        return None
    return None


def _reset_peak() -> bool:
    try:
        with open("/proc/self/clear_refs", "w", encoding="ascii") as fh:
            fh.write("5")
        return True
    except OSError:
        return False


def compute_cell(cell: Cell, dataset: Dataset, scoring: Scoring,
                 cache: EmbeddingCache | None = None) -> CellResult:
    """Fit the cell's method on its dataset (or take the fit from the cache), check it, score it.

    Parameters
    ----------
    cell : Cell
        What to compute.
    dataset : Dataset
        The cell's dataset.
    scoring : Scoring
        Measure settings of the suite.
    cache : EmbeddingCache, optional
        Where earlier fits of the same cell may be found (read only here).

    Returns
    -------
    CellResult
        Status ``ok`` with values, or ``failed`` with the error text; never raises
        for a problem of the method or its output.
    """
    hit = cache.get(cell) if cache is not None else None
    if hit is not None:
        result = score_cell(cell, dataset, hit.embedding, scoring)
        result.fit_seconds, result.fit_peak_mb, result.from_cache = hit.fit_seconds, hit.fit_peak_mb, True
        return result
    spec = get_method_spec(cell.use)
    try:
        with _PeakMeter() as meter:
            t0 = time.perf_counter()
            Y = fit_embedding(spec, dataset, cell.dimensions, cell.params_dict(), cell.seed)
            fit_seconds = time.perf_counter() - t0
    except DegenerateEmbedding as exc:
        return CellResult(cell, "failed", f"degenerate embedding: {exc.reason}")
    except MemoryError:
        return CellResult(cell, "failed", "MemoryError: the fit ran out of memory",
                          detail=traceback.format_exc(limit=8))
    except Exception as exc:  # a method may raise anything; the run must go on
        return CellResult(cell, "failed", _one_line(exc), detail=traceback.format_exc(limit=8))
    result = score_cell(cell, dataset, Y, scoring)
    result.fit_seconds = fit_seconds
    result.fit_peak_mb = meter.peak_mb
    return result


def score_cell(cell: Cell, dataset: Dataset, Y: np.ndarray, scoring: Scoring) -> CellResult:
    """Score a finished embedding (also used for embeddings taken from the cache)."""
    data = dataset.distances if dataset.is_precomputed else dataset.X
    t0 = time.perf_counter()
    try:
        measured = score(
            data, Y, ks=list(scoring.ks), metric="precomputed" if dataset.is_precomputed else "euclidean",
            labels=dataset.labels, latent=dataset.latent, seed=scoring.seed,
            pair_sample_above=scoring.pair_sample_above, n_pairs=scoring.pairs,
            estimate_above=scoring.estimate_above, n_queries=scoring.queries,
            memory_bytes=scoring.memory_bytes)
    except Exception as exc:  # report, never crash the run over one cell's score
        return CellResult(cell, "failed", f"scoring: {_one_line(exc)}", embedding=Y,
                          detail=traceback.format_exc(limit=8))
    return CellResult(cell, "ok", embedding=Y, values=dict(measured.values),
                      halfwidths=dict(measured.halfwidths), estimated=tuple(sorted(measured.estimated)),
                      curve=measured.curve, score_seconds=time.perf_counter() - t0)


def _one_line(exc: BaseException) -> str:
    text = " ".join(str(exc).split()) or "(no message)"
    return f"{type(exc).__name__}: {text}"[:500]


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


def _child(cell: Cell, where: Path, scoring: Scoring, threads: int, cache: EmbeddingCache | None,
           sys_path: list[str], conn: mp.connection.Connection) -> None:
    # The parent handles Ctrl-C; a child only stops when told to.
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    # Plug-ins import from the parent's path as it is now, not as it was when the fork server started.
    sys.path[:] = sys_path
    conn.send(_STARTED)
    collect = _Collect()
    root = logging.getLogger()
    root.handlers[:] = [collect]
    root.setLevel(logging.WARNING)
    with threadpool_limits(limits=threads):
        result = compute_cell(cell, _unstage(where), scoring, cache)
    result.warnings = tuple(dict.fromkeys(collect.lines))
    conn.send(result)
    conn.close()


_CONTEXT: mp.context.BaseContext | None = None


def _context() -> mp.context.BaseContext:
    global _CONTEXT
    if _CONTEXT is None:
        method = "forkserver" if "forkserver" in mp.get_all_start_methods() else "spawn"
        ctx = mp.get_context(method)
        if method == "forkserver":
            ctx.set_forkserver_preload(["harness.runner"])
        _CONTEXT = ctx
    return _CONTEXT


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


def _supervise(cell: Cell, where: Path, scoring: Scoring, threads: int, time_limit: float | None,
               cache: EmbeddingCache | None, stop: threading.Event) -> CellResult:
    if stop.is_set():
        return CellResult(cell, "interrupted", "not started: the run was interrupted")
    ctx = _context()
    receive, send = ctx.Pipe(duplex=False)
    proc = ctx.Process(target=_child, args=(cell, where, scoring, threads, cache, list(sys.path), send),
                       daemon=True)
    with _main_module_hidden():
        proc.start()
    send.close()
    t0 = None  # the clock starts when the child is running, not while the fork server warms up
    try:
        while True:
            waited = 0.0 if t0 is None else time.perf_counter() - t0
            if time_limit is not None and waited >= time_limit:
                return CellResult(cell, "timeout", f"stopped after the time limit of {time_limit:g} s")
            if stop.is_set():
                return CellResult(cell, "interrupted", "stopped: the run was interrupted")
            step = _POLL if time_limit is None or t0 is None else min(_POLL, time_limit - waited)
            if receive.poll(step):
                try:
                    message = receive.recv()
                except (EOFError, OSError):
                    proc.join(5)
                    return CellResult(cell, "crashed", _death(proc.exitcode))
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


# ---------------------------------------------------------------- many cells

def execute(cells: list[Cell], datasets: dict[str, Dataset], scoring: Scoring,
            execution: Execution, cache: EmbeddingCache | None = None,
            stop: threading.Event | None = None) -> Iterator[CellResult]:
    """Compute cells and yield each result as soon as it is ready (in finishing order).

    Parameters
    ----------
    cells : list of Cell
        Cells to compute.
    datasets : dict
        Dataset name to :class:`Dataset`.
    scoring : Scoring
        Measure settings.
    execution : Execution
        Parallelism, time limit and isolation.
    cache : EmbeddingCache, optional
        Fits found here are not repeated.
    stop : threading.Event, optional
        When set, running cells are stopped and the rest are not started; their
        results come back with status ``interrupted``.

    Yields
    ------
    CellResult
    """
    if not cells:
        return
    stop = stop or threading.Event()
    if not execution.isolate:
        for cell in cells:
            if stop.is_set():
                yield CellResult(cell, "interrupted", "not started: the run was interrupted")
                continue
            yield compute_cell(cell, datasets[cell.dataset], scoring, cache)
        return
    jobs = max(1, min(execution.jobs, len(cells)))
    threads = max(1, (os.cpu_count() or 1) // jobs)
    folder = Path(tempfile.mkdtemp(prefix="foldbench-data-"))
    try:
        places = stage_datasets({c.dataset: datasets[c.dataset] for c in cells}, folder)
        tasks = (delayed(_supervise)(c, places[c.dataset], scoring, threads, execution.time_limit,
                                     cache, stop) for c in cells)
        yield from Parallel(n_jobs=jobs, backend="threading", return_as="generator_unordered",
                            pre_dispatch="n_jobs")(tasks)
    finally:
        shutil.rmtree(folder, ignore_errors=True)
