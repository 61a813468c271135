"""Compute one cell: fit its method (or take a known fit), check the embedding, score it.

Both functions are pure: they read nothing but their arguments and write
nothing, and a method's failure becomes a result with a status, never an
exception.  Backends decide where they run; the cache is consulted by the
caller, which passes a known fit in.
"""

from __future__ import annotations

import time
import traceback
from typing import Any

import numpy as np

from ..config import CellStatus, Scoring
from ..datasets import Dataset
from ..methods import DegenerateEmbedding, MethodSpec, fit_model, get_method_spec
from ..metrics import DataSide, score
from ..text import exception_line
from .cells import Cell, CellResult, KnownFit
from .heldout import full_embedding, heldout_values, points_in_rows, split_rows, subset

#: Frames of a traceback kept in a failed cell's ``detail``.
TRACE_FRAMES = 8


class _PeakMeter:
    """Peak resident memory added during a block, from Linux's /proc (VmHWM)."""

    def __enter__(self) -> _PeakMeter:
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


def compute_cell(
    cell: Cell,
    dataset: Dataset,
    scoring: Scoring,
    known: KnownFit | None = None,
    roots: tuple[str, ...] = (),
    prepared: DataSide | None = None,
) -> CellResult:
    """Fit the cell's method on its dataset (or use ``known``), check the embedding, score it.

    Parameters
    ----------
    cell : Cell
        What to compute.
    dataset : Dataset
        The cell's dataset.
    scoring : Scoring
        Measure settings of the suite.
    known : KnownFit, optional
        An earlier fit of the same cell; it is scored instead of fitting again.
    roots : tuple of str
        Folders a plug-in method may be imported from (the suite's).
    prepared : DataSide, optional
        The dataset's data side for ``scoring`` (made once for all its cells;
        the values do not change).  Cells that hold points out do not use it.

    Returns
    -------
    CellResult
        Status ``ok`` with values, or ``failed`` with the error text; never raises
        for a problem of the method or its output.
    """
    if cell.holdout is not None:
        return _compute_heldout(cell, dataset, scoring, roots)
    if known is not None:
        result = score_cell(cell, dataset, known.embedding, scoring, prepared)
        if result.status == CellStatus.OK:
            result.fit_seconds, result.fit_peak_mb = known.fit_seconds, known.fit_peak_mb
            result.from_cache = True
            return result
        # a known fit that cannot be scored is not trusted: fit again
        refit = compute_cell(cell, dataset, scoring, None, roots, prepared)
        refit.warnings += (f"the cached embedding was not used ({result.error}); fitted again",)
        return refit
    fitted = _fit(cell, dataset, roots)
    if isinstance(fitted, CellResult):
        return fitted
    _spec, _estimator, Y, fit_seconds, peak_mb = fitted
    result = score_cell(cell, dataset, Y, scoring, prepared)
    result.fit_seconds = fit_seconds
    result.fit_peak_mb = peak_mb
    return result


def _compute_heldout(cell: Cell, dataset: Dataset, scoring: Scoring, roots: tuple[str, ...]) -> CellResult:
    """Fit on the training rows of the cell's split, score them, then place and score the held-out rows.

    A known fit is never used: the cache keeps whole-data fits only.
    """
    assert cell.holdout is not None
    rows = split_rows(dataset, cell.holdout, cell.seed)
    train = subset(dataset, rows[0])
    fitted = _fit(cell, train, roots)
    if isinstance(fitted, CellResult):
        return fitted
    spec, estimator, Y_train, fit_seconds, peak_mb = fitted
    result = score_cell(cell, train, Y_train, scoring)
    result.fit_seconds, result.fit_peak_mb = fit_seconds, peak_mb
    if result.status != CellStatus.OK:
        return result
    try:
        values, Y_test, record = heldout_values(
            spec, estimator, cell.out_of_sample, dataset, rows, Y_train, scoring
        )
    except DegenerateEmbedding as exc:
        values, Y_test = {}, None
        record = {"rows": rows[1].tolist(), "n_train": int(rows[0].size), "n_heldout": int(rows[1].size)}
        record.update(map="", reason=f"held-out points: {exc.reason}")
    except Exception as exc:  # a method's transform may raise anything; the in-sample scores stand
        values, Y_test = {}, None
        record = {"rows": rows[1].tolist(), "n_train": int(rows[0].size), "n_heldout": int(rows[1].size)}
        record.update(map="", reason=f"held-out points: {exception_line(exc, 400)}")
    result.values.update(values)
    result.heldout = record
    result.points = points_in_rows(result.points, rows[0])
    # the whole dataset's coordinates when the held-out rows were placed; else none (rows would not match)
    result.embedding = None if Y_test is None else full_embedding(dataset.n, rows, Y_train, Y_test)
    return result


def _fit(
    cell: Cell, dataset: Dataset, roots: tuple[str, ...]
) -> CellResult | tuple[MethodSpec, Any, np.ndarray, float, float]:
    """Fit the cell's method: (spec, estimator, embedding, seconds, peak MiB), or a failed result."""
    try:
        spec = get_method_spec(cell.use, roots=roots)
        with _PeakMeter() as meter:
            t0 = time.perf_counter()
            estimator, Y = fit_model(spec, dataset, cell.dimensions, cell.params_dict(), cell.seed)
            fit_seconds = time.perf_counter() - t0
    except DegenerateEmbedding as exc:
        return CellResult(cell, CellStatus.FAILED, f"degenerate embedding: {exc.reason}")
    except MemoryError:
        return CellResult(
            cell,
            CellStatus.FAILED,
            "MemoryError: the fit ran out of memory",
            detail=traceback.format_exc(limit=TRACE_FRAMES),
        )
    except Exception as exc:  # a method may raise anything; the run must go on
        return CellResult(
            cell, CellStatus.FAILED, exception_line(exc, 500), detail=traceback.format_exc(limit=TRACE_FRAMES)
        )
    return spec, estimator, Y, fit_seconds, meter.peak_mb


def score_cell(
    cell: Cell, dataset: Dataset, Y: np.ndarray, scoring: Scoring, prepared: DataSide | None = None
) -> CellResult:
    """Score a finished embedding (a new fit or a known one), with the dataset's data side if given."""
    data = dataset.distances if dataset.is_precomputed else dataset.X
    t0 = time.perf_counter()
    try:
        measured = score(
            data,
            Y,
            ks=list(scoring.ks),
            metric="precomputed" if dataset.is_precomputed else "euclidean",
            labels=dataset.labels,
            latent=dataset.latent,
            prepared=prepared,
            backend=scoring.backend,
            scheduler=scoring.scheduler,
            **scoring.engine_options(),
        )
    except Exception as exc:  # report, never crash the run over one cell's score
        return CellResult(
            cell,
            CellStatus.FAILED,
            f"scoring: {exception_line(exc, 490)}",
            embedding=Y,
            detail=traceback.format_exc(limit=TRACE_FRAMES),
        )
    return CellResult(
        cell,
        CellStatus.OK,
        embedding=Y,
        values=dict(measured.values),
        intervals=dict(measured.intervals),
        estimated=tuple(sorted(measured.estimated)),
        curve=measured.curve,
        points=measured.points,
        score_seconds=time.perf_counter() - t0,
    )
