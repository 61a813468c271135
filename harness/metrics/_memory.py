"""Memory budget of the measures and the block size it allows.

Block-size formula
    The neighbourhood engine computes the distance rows of a block of query
    points with one matrix product per space (8 bytes per point and row, two
    spaces: ``ROW_BYTES_PER_POINT = 16``), then ranks them one row at a time.
    Each of ``threads`` threads holds one block at a time, and the compiled
    row pass ``SCRATCH_BYTES_PER_POINT = 88`` bytes per point (group minima and
    select buffers, candidate distances and columns of both spaces, a position table).  With
    ``fixed`` bytes for the copied inputs and result tables,

        work = memory_bytes - fixed - threads * SCRATCH_BYTES_PER_POINT * n
        block_rows = clamp(min(work, MAX_BLOCK_BYTES) // (threads * ROW_BYTES_PER_POINT * n),
                           1, MAX_BLOCK_ROWS)

    with at least ``MIN_BLOCK_ROWS`` rows whenever ``work`` allows them.
    ``MAX_BLOCK_ROWS`` is where the matrix product stops getting faster;
    ``MAX_BLOCK_BYTES`` keeps very long rows (n in the millions) from taking
    gigabytes for no gain; the budget only ever lowers the result.
"""

from __future__ import annotations

import logging
import os

from ._ranks import THREADS

log = logging.getLogger(__name__)

#: Bytes per (query row, point) of a block's distance rows (two spaces).
ROW_BYTES_PER_POINT = 16
#: Bytes per point of one thread's row-pass scratch (see :func:`harness.metrics._kernel.rank_rows`).
SCRATCH_BYTES_PER_POINT = 88
#: Upper limit on rows per block: the matrix product gains nothing beyond it.
MAX_BLOCK_ROWS = 512
#: Rows per block kept even when MAX_BLOCK_BYTES would allow fewer (the
#: product re-reads the other factor once per block).
MIN_BLOCK_ROWS = 64
#: Size of a block's distance rows above which larger blocks bring nothing.
MAX_BLOCK_BYTES = 2**28
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


def _scratch_bytes(n: int) -> int:
    return THREADS * SCRATCH_BYTES_PER_POINT * n


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
    per_row = ROW_BYTES_PER_POINT * THREADS * n  # each thread holds its own block
    work = memory_bytes - fixed_bytes - _scratch_bytes(n)
    rows = max(min(work, MAX_BLOCK_BYTES) // per_row, min(MIN_BLOCK_ROWS, work // per_row))
    if rows < 1:
        log.warning(
            "memory budget of %d bytes is below one block row (%d bytes plus %d fixed); "
            "using one row per block",
            memory_bytes,
            per_row,
            fixed_bytes,
        )
        rows = 1
    return int(max(1, min(rows, MAX_BLOCK_ROWS, n_queries)))
