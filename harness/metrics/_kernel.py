"""Compiled passes of the measures (numba: compiled on first use, cached on disk, no threads of its own).

The neighbourhood engine's per-row pass (:func:`rank_rows`)
    After the two matrix products of a block, every remaining step works on
    one distance row at a time: find the exactly ordered head of the row (the
    query and its nearest points), look up where the other space's neighbours
    sit in it, and count the exact rank of those that are not in the head.
    Done in one compiled loop per row, each row is read a few times from the
    cache instead of being written and re-read as temporary arrays per step.
    The engine's threads (:mod:`._ranks`) call it with the GIL released.

The rank rule is the engine's: ``1 +`` the number of points ``l != i`` before
``j`` in the order *(distance to i, index)*.  All comparisons are on the
float64 distances themselves, so ranks are exact.

Head of a row
    The query's distance is set to ``-inf``.  Columns are grouped ``g`` at a
    time (strided) and the ``(K+1)``-th smallest group minimum ``t`` is
    selected (a quickselect whose partitions do not branch on the data).
    Every point at or below ``t`` is a candidate (at least ``K+1`` of them,
    one per group) and every other point comes after all of them.  Only the
    groups whose minimum is at most ``t`` are visited, in an order that keeps
    the candidates in index order; a candidate's place is the number of
    candidates at a smaller distance, equal distances taking the following
    places in index order (long lists are merge-sorted instead).

Counting a rank
    For a point ``j`` outside the head, its rank is
    ``#{l < j: d_l <= v} + #{l >= j: d_l < v}`` with ``v = d_j`` (the query's
    ``-inf`` stands in for the ``1 +``).  ``d <= v`` is ``d < nextafter(v, inf)``,
    so the row is cut at the sorted columns of four values at a time and every
    piece is one branch-free loop of four ``<`` counts (two for a row's last
    one or two values).

Whole rank rows and sorts (:func:`full_ranks`, :func:`sort_order`)
    A stable three-pass radix sort of the float32 roundings (rounding is
    monotone), then runs of equal roundings put in float64 order: the
    (value, index) order, for the full-range R_NX area and the pair measures.
"""

from __future__ import annotations

import numba
import numpy as np

#: Candidates up to this many are ordered by counting (c * c compares); longer lists are sorted.
_COUNT_SORT_MAX = 256
#: Values to count in a row up to this many are put in column order by insertion.
_INSERTION_MAX = 32
#: Values whose ranks are counted in one sweep over a row.
_SWEEP = 4


@numba.njit(cache=True, nogil=True)
def _before(da: float, ia: int, db: float, ib: int) -> bool:
    return da < db or (da == db and ia < ib)


@numba.njit(cache=True, nogil=True)
def _merge_order(values: np.ndarray, idx: np.ndarray, tmp: np.ndarray) -> None:
    """Sort ``idx`` in place by ``values[idx]``, stably (equal values keep their order).

    A bottom-up merge sort written out here: numba's own sorts cost seconds of
    first-call compile time each.  ``tmp`` holds ``len(idx)`` values.
    """
    n = idx.shape[0]
    width = 1
    while width < n:
        for lo in range(0, n, 2 * width):
            mid = min(lo + width, n)
            hi = min(lo + 2 * width, n)
            i, j, w = lo, mid, lo
            while i < mid and j < hi:
                if values[idx[j]] < values[idx[i]]:
                    tmp[w] = idx[j]
                    j += 1
                else:
                    tmp[w] = idx[i]
                    i += 1
                w += 1
            while i < mid:
                tmp[w] = idx[i]
                i += 1
                w += 1
            while j < hi:
                tmp[w] = idx[j]
                j += 1
                w += 1
        idx[:] = tmp[:n]
        width *= 2


@numba.njit(cache=True, nogil=True)
def _count_below(part: np.ndarray, v: float) -> int:
    """``#(part < v)``; ``part`` is a slice from its own start, so the loop compiles to vector compares."""
    total = 0
    for s in range(part.shape[0]):
        total += part[s] < v
    return total


@numba.njit(cache=True, nogil=True)
def _count_at_most(part: np.ndarray, v: float) -> int:
    """``#(part <= v)``, as :func:`_count_below`."""
    total = 0
    for s in range(part.shape[0]):
        total += part[s] <= v
    return total


@numba.njit(cache=True, nogil=True)
def _select(values: np.ndarray, count: int, k: int, buf_a: np.ndarray, buf_b: np.ndarray) -> float:
    """The ``k``-th smallest (0-based) of ``values[:count]``, which are left as they are.

    Quickselect whose partitions copy the kept side into a buffer without
    branching on the data (random data mispredicts about every second branch).
    """
    src = values
    dst = buf_a
    while count > 32:
        a, b, c = src[0], src[count // 2], src[count - 1]
        pivot = max(min(a, b), min(max(a, b), c))
        below = 0
        equal = 0
        for s in range(count):
            below += src[s] < pivot
            equal += src[s] == pivot
        w = 0
        if k < below:
            for s in range(count):
                v = src[s]
                dst[w] = v
                w += v < pivot
        elif k < below + equal:
            return pivot
        else:
            for s in range(count):
                v = src[s]
                dst[w] = v
                w += v > pivot
            k -= below + equal
        count = w
        src, dst = dst, (buf_b if dst is buf_a else buf_a)
    for s in range(count):
        dst[s] = src[s]
    for s in range(1, count):
        v = dst[s]
        r = s - 1
        while r >= 0 and dst[r] > v:
            dst[r + 1] = dst[r]
            r -= 1
        dst[r + 1] = v
    return dst[k]


@numba.njit(cache=True, nogil=True)
def _order_candidates(
    cand_d: np.ndarray,
    cand_i: np.ndarray,
    count: int,
    out_d: np.ndarray,
    out_i: np.ndarray,
    places: np.ndarray,
) -> None:
    """``out_d``, ``out_i``: the candidates in (distance, index) order.

    ``places`` is int32 scratch of ``2 * _COUNT_SORT_MAX`` values.
    """
    if count <= _COUNT_SORT_MAX:
        # Position of a candidate = candidates at a smaller distance (one
        # branch-free vector pass per candidate, cheaper than a sort of a short
        # list); equal distances share a position and take the following
        # places in the order they arrived, which is index order.
        pos = places[:count]
        taken = places[_COUNT_SORT_MAX : _COUNT_SORT_MAX + count]
        pos[:] = 0
        taken[:] = 0
        for b in range(count):
            v = cand_d[b]
            for a in range(count):
                pos[a] += np.int32(v < cand_d[a])
        for a in range(count):
            p = pos[a]
            place = p + taken[p]
            taken[p] += 1
            out_d[place] = cand_d[a]
            out_i[place] = cand_i[a]
        return
    order = np.arange(count)
    _merge_order(cand_d, order, np.empty(count, dtype=np.int64))  # stable: ties stay in index order
    for s in range(count):
        out_d[s] = cand_d[order[s]]
        out_i[s] = cand_i[order[s]]


@numba.njit(cache=True, nogil=True)
def _head(
    row: np.ndarray,
    q: int,
    k: int,
    scratch: np.ndarray,
    cand_i: np.ndarray,
    out_d: np.ndarray,
    out_i: np.ndarray,
    places: np.ndarray,
) -> int:
    """Order the head of ``row`` (query ``q``) into ``out_d``, ``out_i``; return its length.

    ``scratch`` holds ``4 n + 1`` float64 values, ``cand_i`` ``2 n + 1`` int64 values.
    """
    n = row.shape[0]
    row[q] = -np.inf
    g = max(1, min(32, n // (4 * (k + 1))))
    m = n // g
    mins = scratch[:n]
    for c in range(m):
        mins[c] = row[c]
    for r in range(1, g):
        part = row[r * m : (r + 1) * m]  # a slice from 0 keeps the loop vectorised
        for c in range(m):
            v = part[c]
            mins[c] = v if v < mins[c] else mins[c]
    total = m
    for c in range(g * m, n):
        mins[total] = row[c]
        total += 1
    t = _select(mins, total, k, scratch[n : 2 * n], scratch[2 * n : 3 * n])
    # Only groups whose minimum is at most t hold candidates (about K+1 of
    # the m groups).  Visiting their columns row of groups by row of groups
    # keeps the candidates in index order; lists are written always and kept
    # when <= t, so no branch depends on the data.
    hit = cand_i[n:]  # cand_i has n + m slots (see rank_rows)
    groups = 0
    for c in range(m):
        hit[groups] = c
        groups += mins[c] <= t
    cand_d = scratch[3 * n :]
    count = 0
    for r in range(g):
        base = r * m
        for h in range(groups):
            col = base + hit[h]
            v = row[col]
            cand_d[count] = v
            cand_i[count] = col
            count += v <= t
    for col in range(g * m, n):
        v = row[col]
        cand_d[count] = v
        cand_i[count] = col
        count += v <= t
    _order_candidates(cand_d, cand_i, count, out_d, out_i, places)
    return count


@numba.njit(cache=True, nogil=True)
def _count_four(part: np.ndarray, v0: float, v1: float, v2: float, v3: float) -> tuple:
    a0 = a1 = a2 = a3 = 0
    for col in range(part.shape[0]):
        x = part[col]
        a0 += x < v0
        a1 += x < v1
        a2 += x < v2
        a3 += x < v3
    return a0, a1, a2, a3


@numba.njit(cache=True, nogil=True)
def _count_two(part: np.ndarray, v0: float, v1: float) -> tuple:
    a0 = a1 = 0
    for col in range(part.shape[0]):
        x = part[col]
        a0 += x < v0
        a1 += x < v1
    return a0, a1


@numba.njit(cache=True, nogil=True)
def _count_ranks(
    row: np.ndarray, cols: np.ndarray, count: int, out: np.ndarray, values: np.ndarray, bounds: np.ndarray
) -> None:
    """Exact ranks of the points ``cols[:count]`` (sorted by column, none the query) into ``out``.

    ``values`` and ``bounds`` are scratch of ``2 * _SWEEP`` floats and ``_SWEEP + 1`` integers.
    """
    n = row.shape[0]
    low = values[:_SWEEP]
    high = values[_SWEEP:]
    for s0 in range(0, count, _SWEEP):
        used = min(count - s0, _SWEEP)
        # Values of this sweep; empty slots compare false everywhere (NaN).
        for s in range(_SWEEP):
            if s < used:
                v = row[cols[s0 + s]]
                low[s] = v
                high[s] = np.nextafter(v, np.inf)
                bounds[s] = cols[s0 + s]
            else:
                low[s] = high[s] = np.nan
                bounds[s] = n
        bounds[_SWEEP] = n
        t0 = t1 = t2 = t3 = 0
        # Before a value's own column it counts d <= v, from there on d < v
        # (columns are sorted, so the row falls into pieces).
        start = 0
        for piece in range(used + 1):
            stop = bounds[piece]
            if stop > start and used <= 2:  # the last one or two values of a row
                b = _count_two(
                    row[start:stop], low[0] if piece > 0 else high[0], low[1] if piece > 1 else high[1]
                )
                t0 += b[0]
                t1 += b[1]
            elif stop > start:
                # A slice starting at 0 lets the loop compile to vector compares.
                a = _count_four(
                    row[start:stop],
                    low[0] if piece > 0 else high[0],
                    low[1] if piece > 1 else high[1],
                    low[2] if piece > 2 else high[2],
                    low[3] if piece > 3 else high[3],
                )
                t0 += a[0]
                t1 += a[1]
                t2 += a[2]
                t3 += a[3]
            start = stop
        for s in range(used):
            total = t0 if s == 0 else (t1 if s == 1 else (t2 if s == 2 else t3))
            if low[s] == np.inf:  # nextafter(inf) is inf: d <= inf was not counted as such
                total = 0
                for col in range(n):
                    total += _before(row[col], col, low[s], cols[s0 + s])
            out[s0 + s] = total


@numba.njit(cache=True, nogil=True)
def _cross(
    row: np.ndarray,
    head_i: np.ndarray,
    head_count: int,
    other: np.ndarray,
    k: int,
    exact: int,
    where: np.ndarray,
    need: np.ndarray,
    slot: np.ndarray,
    counted: np.ndarray,
    values: np.ndarray,
    bounds: np.ndarray,
    out: np.ndarray,
) -> None:
    """Ranks in ``row``'s space of the points ``other[:k]`` into ``out[:k]`` (see :func:`rank_rows`)."""
    for s in range(head_count):
        where[head_i[s]] = s
    missing = 0
    for p in range(k):
        pos = where[other[p]]
        if pos >= 0:
            out[p] = pos if p < exact or pos <= k else k + 1
        elif p < exact:
            need[missing] = other[p]
            slot[missing] = p
            missing += 1
        else:
            out[p] = k + 1
    for s in range(head_count):
        where[head_i[s]] = -1
    if missing == 0:
        return
    if missing <= _INSERTION_MAX:
        for s in range(1, missing):  # few values: insertion sort of (column, slot) by column
            col, at = need[s], slot[s]
            r = s - 1
            while r >= 0 and need[r] > col:
                need[r + 1] = need[r]
                slot[r + 1] = slot[r]
                r -= 1
            need[r + 1] = col
            slot[r + 1] = at
    else:
        order = np.arange(missing)
        _merge_order(need[:missing].astype(np.float64), order, np.empty(missing, dtype=np.int64))
        need[:missing] = need[:missing][order]
        slot[:missing] = slot[:missing][order]
    _count_ranks(row, need, missing, counted, values, bounds)
    for s in range(missing):
        out[slot[s]] = counted[s]


@numba.njit(cache=True, nogil=True)
def rank_rows(
    dx: np.ndarray, dy: np.ndarray, rows: np.ndarray, k: int, exact: int, out_x: np.ndarray, out_y: np.ndarray
) -> None:
    """Cross-space rank tables of a block of distance rows.

    Parameters
    ----------
    dx, dy : ndarray of float64, shape (b, n)
        Distance rows of the data and the embedding (C-contiguous rows); the
        query entries are overwritten with ``-inf``.
    rows : ndarray of int, shape (b,)
        Query point of each row.
    k : int
        Neighbourhood size ``K``.
    exact : int
        Columns of the tables that hold exact ranks; later columns hold ``min(rank, K + 1)``.
    out_x, out_y : ndarray of int64, shape (b, K)
        Filled with the data rank of each embedding neighbour and the
        embedding rank of each data neighbour, neighbours in (distance, index) order.
    """
    b, n = dx.shape
    scratch = np.empty(4 * n + 1)
    cand = np.empty(2 * n + 1, dtype=np.int64)
    cand_dx = np.empty(n)
    cand_ix = np.empty(n, dtype=np.int64)
    cand_dy = np.empty(n)
    cand_iy = np.empty(n, dtype=np.int64)
    where = np.full(n, -1, dtype=np.int64)
    need = np.empty(k, dtype=np.int64)
    slot = np.empty(k, dtype=np.int64)
    counted = np.empty(k, dtype=np.int64)
    places = np.empty(2 * _COUNT_SORT_MAX, dtype=np.int32)
    values = np.empty(2 * _SWEEP)
    bounds = np.empty(_SWEEP + 1, dtype=np.int64)
    for r in range(b):
        q = rows[r]
        row_x = dx[r]
        row_y = dy[r]
        cx = _head(row_x, q, k, scratch, cand, cand_dx, cand_ix, places)
        cy = _head(row_y, q, k, scratch, cand, cand_dy, cand_iy, places)
        # Position 0 of a head is the query; the neighbours follow.
        _cross(
            row_x,
            cand_ix,
            cx,
            cand_iy[1 : k + 1],
            k,
            exact,
            where,
            need,
            slot,
            counted,
            values,
            bounds,
            out_x[r],
        )
        _cross(
            row_y,
            cand_iy,
            cy,
            cand_ix[1 : k + 1],
            k,
            exact,
            where,
            need,
            slot,
            counted,
            values,
            bounds,
            out_y[r],
        )


@numba.njit(cache=True, nogil=True)
def head_rows(dist: np.ndarray, rows: np.ndarray, k: int, out: np.ndarray) -> None:
    """The ``k`` nearest neighbours of each row's query in (distance, index) order.

    Parameters
    ----------
    dist : ndarray of float64, shape (b, n)
        Distance rows (C-contiguous); the query entries are overwritten with ``-inf``.
    rows : ndarray of int, shape (b,)
        Query point of each row (never its own neighbour).
    k : int
        Neighbours per row, at most the number of finite entries of a row less one.
    out : ndarray of int, shape (b, k)
        Filled with the neighbours' columns, nearest first.
    """
    b, n = dist.shape
    scratch = np.empty(4 * n + 1)
    cand = np.empty(2 * n + 1, dtype=np.int64)
    head_d = np.empty(n)
    head_i = np.empty(n, dtype=np.int64)
    places = np.empty(2 * _COUNT_SORT_MAX, dtype=np.int32)
    for r in range(b):
        _head(dist[r], rows[r], k, scratch, cand, head_d, head_i, places)
        for j in range(k):  # position 0 of a head is the query
            out[r, j] = head_i[j + 1]


#: Bits of the float32 key sorted per radix pass (three passes cover 32 bits).
_RADIX_BITS = 11
_RADIX = 1 << _RADIX_BITS
#: Equal float32 keys up to this many are put in float64 order by insertion; longer runs are sorted.
_RUN_INSERTION_MAX = 32


@numba.njit(cache=True, nogil=True)
def _row_order(row: np.ndarray, low: np.ndarray, keys: np.ndarray, idx: np.ndarray, hist: np.ndarray) -> None:
    """``idx[:n]``: the columns of ``row`` in (distance, index) order.

    A stable three-pass radix sort of the float32 roundings (monotone, so a
    smaller key means a smaller distance), then runs of equal keys are put in
    float64 order, stably, so equal distances stay in index order.
    ``keys`` (unsigned, 32 bits or more) and ``idx`` hold ``2 n`` values (two
    halves swapped per pass), ``hist`` ``3 * _RADIX``.
    """
    n = row.shape[0]
    for col in range(n):
        low[col] = row[col]  # float32 rounding; beyond its range it becomes inf, still in order
    bits = low.view(np.uint32)
    hist[:] = 0
    for col in range(n):
        b = np.int64(bits[col])
        # Order-preserving integer key: negative floats reversed, positive ones above them.
        key = (0xFFFFFFFF - b) if b >= 0x80000000 else (b + 0x80000000)
        keys[col] = key
        idx[col] = col
        hist[key & (_RADIX - 1)] += 1
        hist[_RADIX + ((key >> _RADIX_BITS) & (_RADIX - 1))] += 1
        hist[2 * _RADIX + (key >> (2 * _RADIX_BITS))] += 1
    for p in range(3):
        total = 0
        for d in range(p * _RADIX, (p + 1) * _RADIX):
            c = hist[d]
            hist[d] = total
            total += c
    src = 0
    for p in range(3):
        dst = n - src
        shift = p * _RADIX_BITS
        base = p * _RADIX
        for s in range(n):
            key = keys[src + s]
            d = base + ((key >> shift) & (_RADIX - 1))
            w = dst + hist[d]
            hist[d] += 1
            keys[w] = key
            idx[w] = idx[src + s]
        src = dst
    if src:
        keys[:n] = keys[n:]
        idx[:n] = idx[n:]
    start = 0
    while start < n:
        stop = start + 1
        while stop < n and keys[stop] == keys[start]:
            stop += 1
        if stop - start > _RUN_INSERTION_MAX:
            _merge_order(row, idx[start:stop], np.empty(stop - start, dtype=np.int64))  # stable
        elif stop - start > 1:
            for s in range(start + 1, stop):
                c = idx[s]
                v = row[c]
                r = s - 1
                while r >= start and row[idx[r]] > v:
                    idx[r + 1] = idx[r]
                    r -= 1
                idx[r + 1] = c
        start = stop


@numba.njit(cache=True, nogil=True)
def full_ranks(dist: np.ndarray, rows: np.ndarray, out: np.ndarray) -> None:
    """Rank of every point in each row by (distance, index), the query 0.

    Parameters
    ----------
    dist : ndarray of float64, shape (b, n)
        Distance rows; the query entries are overwritten with ``-inf``.
    rows : ndarray of int, shape (b,)
        Query point of each row.
    out : ndarray of int32, shape (b, n)
        Filled with the ranks: ``out[r, j]`` is the number of points before
        ``j`` in row ``r``'s order (the query counts), so the query has 0 and
        its nearest neighbour 1.
    """
    b, n = dist.shape
    low = np.empty(n, dtype=np.float32)
    keys = np.empty(2 * n, dtype=np.uint32)
    idx = np.empty(2 * n, dtype=np.int64)
    hist = np.empty(3 * _RADIX, dtype=np.int64)
    for r in range(b):
        row = dist[r]
        row[rows[r]] = -np.inf
        _row_order(row, low, keys, idx, hist)
        ranks = out[r]
        for p in range(n):
            ranks[idx[p]] = p


@numba.njit(cache=True, nogil=True)
def sort_order(values: np.ndarray) -> np.ndarray:
    """Indices that sort ``values`` (float64, 1-D) by (value, index), like a stable ``argsort``."""
    n = values.shape[0]
    low = np.empty(n, dtype=np.float32)
    keys = np.empty(2 * n, dtype=np.uint32)
    idx = np.empty(2 * n, dtype=np.int64)
    hist = np.empty(3 * _RADIX, dtype=np.int64)
    _row_order(values, low, keys, idx, hist)
    return idx[:n].copy()


@numba.njit(cache=True, nogil=True)
def tie_blocks(values: np.ndarray, order: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Each item's place in ``order`` (which sorts ``values``), each place's tie block ``[first, last)``."""
    n = values.shape[0]
    place = np.empty(n, dtype=np.int64)
    first = np.empty(n, dtype=np.int64)
    last = np.empty(n, dtype=np.int64)
    start = 0
    while start < n:
        stop = start + 1
        v = values[order[start]]
        while stop < n and values[order[stop]] == v:
            stop += 1
        for p in range(start, stop):
            place[order[p]] = p
            first[p] = start
            last[p] = stop
        start = stop
    return place, first, last
