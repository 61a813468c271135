"""Memory budget of the measures and the block size it allows.

Block-size formula
    The neighbourhood engine computes the distance rows of a block of query
    points with one matrix product per space (8 bytes per point and row, two
    spaces: ``ROW_BYTES_PER_POINT = 16``), then does the bucket work on
    sub-blocks of at most 32 rows and about a million distances, which hold
    about ``SUB_BYTES_PER_POINT = 64`` bytes per point and row (scratch row,
    bucket ids of both spaces, bucket histograms of n buckets, masks).  With ``fixed`` bytes for the copied
    inputs and result tables,

        work = memory_bytes - fixed - SUB_BYTES_PER_POINT * sub_rows * n
        block_rows = clamp(work // (ROW_BYTES_PER_POINT * n), 1, MAX_BLOCK_ROWS)

    ``MAX_BLOCK_ROWS`` is where the matrix product stops getting faster; the
    budget only ever lowers it.
"""
from __future__ import annotations

import logging
import os

from ._ranks import sub_rows_for

log = logging.getLogger(__name__)

#: Bytes per (query row, point) of a block's distance rows (two spaces).
ROW_BYTES_PER_POINT = 16
#: Bytes per (query row, point) of the bucket work on a sub-block.
SUB_BYTES_PER_POINT = 64
#: Upper limit on rows per block: the matrix product gains nothing beyond it.
MAX_BLOCK_ROWS = 512
#: Cap of the default budget.
DEFAULT_CAP_BYTES = 8 * 2**30
#: Floor of the default budget.
DEFAULT_FLOOR_BYTES = 256 * 2**20


def available_bytes() -> int:
    """Memory available to this process now, in bytes (psutil, else ``os.sysconf``)."""
    try:
        import psutil
        return int(psutil.virtual_memory().available)
    except ImportError:  # psutil is optional: fall back to the POSIX counters
        return int(os.sysconf("SC_AVPHYS_PAGES") * os.sysconf("SC_PAGE_SIZE"))


def default_memory_bytes() -> int:
    """A quarter of the available memory, between 256 MiB and 8 GiB."""
    return int(min(DEFAULT_CAP_BYTES, max(DEFAULT_FLOOR_BYTES, available_bytes() // 4)))


def block_rows(n: int, n_queries: int, memory_bytes: int, fixed_bytes: int) -> int:
    """Query rows per block for ``n`` points under ``memory_bytes``.

    Parameters
    ----------
    n : int
        Number of points (length of a distance row).
    n_queries : int
        Number of query rows to process in total.
    memory_bytes : int
        Budget for the whole computation.
    fixed_bytes : int
        Bytes already committed (copied inputs, result tables).

    Returns
    -------
    int
        At least 1; a warning is logged when even one row exceeds the budget.
    """
    per_row = ROW_BYTES_PER_POINT * n
    rows = (memory_bytes - fixed_bytes - SUB_BYTES_PER_POINT * sub_rows_for(n) * n) // per_row
    if rows < 1:
        log.warning("memory budget of %d bytes is below one block row (%d bytes plus %d fixed); "
                    "using one row per block", memory_bytes, per_row, fixed_bytes)
        rows = 1
    return int(max(1, min(rows, MAX_BLOCK_ROWS, n_queries)))


def memory_for_rows(n: int, rows: int, fixed_bytes: int) -> int:
    """Smallest budget for which :func:`block_rows` gives ``rows`` (for tests and benchmarks)."""
    return ROW_BYTES_PER_POINT * n * rows + SUB_BYTES_PER_POINT * sub_rows_for(n) * n + fixed_bytes
