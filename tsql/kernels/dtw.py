"""Dynamic time warping between paired series: distance, optimal path, LB_Keogh.

Row ``r`` of batch ``a`` is compared with row ``r`` of batch ``b`` (what an SQL
self-join hands over). One compiled dynamic programme does the work.

The warping distance between ``x`` (length n) and ``y`` (length m) is

    sqrt(min over warping paths P of sum over (i, j) in P of (x_i - y_j)^2)

where a warping path runs from (1, 1) to (n, m) in steps (1, 0), (0, 1) and
(1, 1). With a Sakoe–Chiba band of half-width ``band`` only cells with
``|i - j| <= band`` may be used; when ``|n - m| > band`` no path would reach
(n, m), so the band is widened to ``|n - m|``.

The programme runs row by row (one row per element of ``x``), keeping only the
cells inside the band, with two rolling rows of cumulative cost. Every path
crosses every row, so once the smallest cumulative cost of a row is above the
cutoff no path can come back under it and the pair is abandoned (looked at
every fourth row; pairs stepped together stop when all of them are past it).

Pairs of the same shape (both lengths equal, the usual case of a self-join)
are stepped through the programme together, 32 at a time, one pair per vector
lane: each cell depends on its left neighbour, so a single pair is bound by
that chain, while 32 independent chains fill the vector units. A lane does
exactly the arithmetic a pair alone does, so an answer never depends on the
other pairs of the batch. Odd pairs go alone, through the same code. The
optimal path is found the same way: each lane keeps its whole band of
cumulative costs (shapes of up to ``_TILE_PATH_CELLS`` cells, so that a tile's
store stays small), and each pair's path is walked back from its own lane.

The work of one call is done in pieces of about 0.1 s (a budget of cells):
several tiles or pairs at a time, and the programme of a long tile or pair in
blocks of rows, resumed where the last block stopped, so that the answers are
the same bit for bit. Between pieces :func:`tsql.kernels.cancel.checkpoint` looks
for a :func:`tsql.interrupt` request: DuckDB itself sees an interrupt only
between two calls of a Python function.

Why compiled code: the recurrence is sequential along the rows and along the
anti-diagonals, so numpy needs at least one call per row or anti-diagonal.
Across the pairs of a batch that is fine (all pairs of 500 series of 36
points ran about as fast as dtaidistance's C), but two series of 10,000 points
need 10,000-20,000 calls of a few microseconds each: 8-9 times dtaidistance's
C in the same run. numba compiles the one programme (cached on disk after the
first call).

References
----------
Sakoe, H. & Chiba, S. (1978). Dynamic programming algorithm optimization for
spoken word recognition. *IEEE Trans. Acoustics, Speech, and Signal
Processing* 26(1), 43–49.
Keogh, E. & Ratanamahatana, C. A. (2005). Exact indexing of dynamic time
warping. *Knowledge and Information Systems* 7(3), 358–386.
Rakthanmanon, T. et al. (2012). Searching and mining trillions of time series
subsequences under dynamic time warping. *Proc. KDD 2012*, 262–270 (early
abandoning of the warping programme).
van Herk, M. (1992). A fast algorithm for local minimum and maximum filters
on rectangular and octagonal kernels. *Pattern Recognition Letters* 13(7),
517–521 (the running envelope of LB_Keogh; also Gil, J. & Werman, M. (1993),
*IEEE Trans. PAMI* 15(5), 504–507).
"""

from __future__ import annotations

import math

import numpy as np
from numba import literally, njit

from tsql.kernels.cancel import checkpoint
from tsql.kernels.ragged import Ragged, RaggedRecords

__all__ = ["dtw_distance", "dtw_path", "lb_keogh"]

#: ``band=None`` inside the compiled code.
_NO_BAND = -1
#: Pairs of one shape stepped together, one vector lane each.
_LANES = 32
#: A last tile with fewer pairs than this goes one pair at a time instead.
_PAD_FROM = 4
#: Work done between two looks at an interrupt request (:func:`tsql.kernels.cancel.checkpoint`), in units of one
#: cell of a pair done alone (about 9 ns here): about 0.08 s.
_BUDGET = 1 << 23
#: One cell of a tile of ``_LANES`` pairs (about 40 ns), and one cell of a traced pair (about 20 ns: the whole
#: band is kept), in those units.
_TILE_COST = 4
_PATH_COST = 2
#: Largest band (in cells) of a shape whose paths are traced a tile at a time: the tile's store is ``_LANES``
#: times that, 8 bytes a cell (4 MiB).
_TILE_PATH_CELLS = 1 << 14


# ---------------------------------------------------------------------------
# compiled core (one implementation, shared by the distance and the path)
# ---------------------------------------------------------------------------


@njit(cache=True, nogil=True)
def _half_width(n: int, m: int, band: int) -> int:
    """The band actually used: widened to ``|n - m|``, at most ``max(n, m) - 1``
    (which allows every cell, as does an unset band)."""
    widest = max(n, m) - 1
    if band < 0:
        return widest
    return min(max(band, abs(n - m)), widest)


@njit(cache=True, nogil=True)
def _row_bounds(i, m, w):
    """First and last column of row ``i`` inside the band."""
    return max(0, i - w), min(m - 1, i + w)


@njit(cache=True, nogil=True)
def _warp(x, y, w, cutoff, store, row_start, period, out, lanes, first_row, stop_row):
    """Least cumulative squared cost from (0, 0) to (n-1, m-1) within band ``w``: rows ``first_row`` to
    ``stop_row - 1`` of the programme; returns the next row to do (``n``: done).

    ``lanes`` pairs of one shape are stepped together: ``x`` is (n, lanes),
    ``y`` is (m, lanes), one column per pair, so the innermost loop runs
    across pairs and compiles to vector instructions. ``lanes`` is a
    compile-time constant (``_LANES`` or 1); each pair's arithmetic is the
    same whatever the other columns hold.

    Row ``i`` of cumulative costs (its cells ``lo..hi``) goes to rows
    ``row_start[i % period]...`` of ``store``: ``period=2`` with two slots
    keeps two rolling rows (distance only), ``period=n`` with every row's start
    keeps the whole band for backtracking. A row needs only the row before it,
    so a programme run in blocks of rows (calls resuming at the row the last
    one returned, with the same ``store``) does exactly the arithmetic of one
    call. Each cell is ``c + min(diagonal, above, left)``, computed as
    ``min(c + min(diagonal, above), c + left)``: the same number (rounding is
    monotone) with one addition on the sequential chain. ``out`` gets each
    column's total when the last row is done, or ``inf`` for all columns once
    the square root of the smallest cost in a row is above ``cutoff``: every
    path crosses every row, and costs only grow along a path. Row 0 and every
    fourth row are looked at (a look costs about a row).
    """
    lanes = literally(lanes)
    n, m = x.shape[0], y.shape[0]
    inf = np.inf
    check = cutoff < inf
    lowest = np.empty(lanes if check else 0)
    if first_row == 0:
        lo, hi = _row_bounds(np.int64(0), m, w)
        cb = row_start[0]
        for g in range(lanes):
            d = x[0, g] - y[0, g]
            store[cb, g] = d * d
        for j in range(1, hi + 1):
            for g in range(lanes):
                d = x[0, g] - y[j, g]
                store[cb + j, g] = d * d + store[cb + j - 1, g]
        if check and _abandoned(store, cb, cb + 1, cutoff, lowest, lanes):  # row 0 only grows to the right
            out[:] = inf
            return n
        first_row = 1
    for i in range(first_row, stop_row):
        plo, phi = _row_bounds(i - 1, m, w)
        pb = row_start[(i - 1) % period] - plo  # store row of cell (i - 1, j) is pb + j
        lo, hi = _row_bounds(i, m, w)
        cb = row_start[i % period] - lo  # store row of cell (i, j) is cb + j
        # first cell: no left neighbour (lo is plo or plo + 1, and lo <= phi + 1)
        has_above, has_diagonal = lo <= phi, lo > plo
        for g in range(lanes):
            above = store[pb + lo, g] if has_above else inf
            diagonal = store[pb + lo - 1, g] if has_diagonal else inf
            d = x[i, g] - y[lo, g]
            store[cb + lo, g] = d * d + min(diagonal, above)
        # cells with all three neighbours
        for j in range(lo + 1, min(hi, phi) + 1):
            for g in range(lanes):
                d = x[i, g] - y[j, g]
                c = d * d
                store[cb + j, g] = min(c + min(store[pb + j - 1, g], store[pb + j, g]), c + store[cb + j - 1, g])
        # one cell past the end of the row above: diagonal and left only
        j = phi + 1
        if lo < j <= hi:
            for g in range(lanes):
                d = x[i, g] - y[j, g]
                c = d * d
                store[cb + j, g] = min(c + store[pb + j - 1, g], c + store[cb + j - 1, g])
        if check and i % 4 == 0 and _abandoned(store, cb + lo, cb + hi + 1, cutoff, lowest, lanes):
            out[:] = inf
            return n
    if stop_row < n:
        return stop_row
    lo, _ = _row_bounds(n - 1, m, w)
    cb = row_start[(n - 1) % period] - lo
    for g in range(lanes):
        out[g] = store[cb + m - 1, g]
    return n


@njit(cache=True, nogil=True)
def _warp_rows(x, y, w, cutoff, store, row_start, period, out, first_row, stop_row):
    """:func:`_warp` on a tile of ``_LANES`` pairs or on one pair (``x.shape[1]``), from Python."""
    if x.shape[1] == _LANES:
        return _warp(x, y, w, cutoff, store, row_start, period, out, _LANES, first_row, stop_row)
    return _warp(x, y, w, cutoff, store, row_start, period, out, 1, first_row, stop_row)


@njit(cache=True, nogil=True)
def _abandoned(store, first, stop, cutoff, lowest, lanes):
    """Whether the square root of every cost in store rows first..stop-1 is above the cutoff."""
    for g in range(lanes):
        lowest[g] = store[first, g]
    for k in range(first + 1, stop):
        for g in range(lanes):  # across pairs, in vector lanes
            lowest[g] = min(lowest[g], store[k, g])
    return math.sqrt(lowest.min()) > cutoff


@njit(cache=True, nogil=True)
def _load(series, column, lane, normalize):
    """Copy a series into one column of a tile, z-normalised if asked.

    Population standard deviation; a constant series becomes zeros.
    """
    n = len(series)
    if not normalize:
        for k in range(n):
            column[k, lane] = series[k]
        return
    lowest, highest, total = series[0], series[0], 0.0
    for k in range(n):
        total += series[k]
        lowest = min(lowest, series[k])
        highest = max(highest, series[k])
    if lowest == highest:
        for k in range(n):
            column[k, lane] = 0.0
        return
    mean = total / n
    spread = 0.0
    for k in range(n):
        spread += (series[k] - mean) * (series[k] - mean)
    std = math.sqrt(spread / n)
    for k in range(n):
        column[k, lane] = (series[k] - mean) / std


@njit(cache=True, nogil=True)
def _band_cells(n, m, w):
    """Cells of an n x m programme inside the band ``w`` (about)."""
    return n * min(m, 2 * w + 1)


@njit(cache=True, nogil=True)
def _load_tile(av, aoff, bv, boff, order, start, count, normalize, x, y):
    """Pairs ``order[start:start + count]`` into the columns of ``x`` and ``y``, the last repeated to fill them."""
    for g in range(x.shape[1]):
        r = order[start + min(g, count - 1)]
        _load(av[aoff[r] : aoff[r + 1]], x, g, normalize)
        _load(bv[boff[r] : boff[r + 1]], y, g, normalize)


@njit(cache=True, nogil=True)
def _put_distances(found, order, start, count, cutoff, out):
    for g in range(count):
        distance = math.sqrt(found[g])
        out[order[start + g]] = distance if distance <= cutoff else np.nan


@njit(cache=True, nogil=True)
def _distance_batch(av, aoff, bv, boff, order, group_starts, band, normalize, cutoff, out, k, start, budget):
    """Distances of the rows ``order``, grouped by shape (``group_starts``), from group ``k``, position
    ``start`` on, until about ``budget`` units of work are done; returns where to go on, and whether it stopped
    at a group whose single tile is more than the budget (:func:`_long_group` does those).

    A group is cut into tiles of ``_LANES`` pairs; a last tile of at least
    ``_PAD_FROM`` pairs is filled up by repeating its last pair, smaller
    remainders go one pair at a time. It stops only between tiles, and
    resumes at the same tile boundaries.
    """
    rolling = np.empty(2, dtype=np.int64)
    zero, one, two = np.int64(0), np.int64(1), np.int64(2)  # not literals: one compiled _warp for every caller
    spent = 0
    while k < len(group_starts) - 1:
        first, stop = group_starts[k], group_starts[k + 1]
        start = max(start, first)
        r0 = order[first]
        n, m = aoff[r0 + 1] - aoff[r0], boff[r0 + 1] - boff[r0]
        w = _half_width(n, m, band)
        cells = _band_cells(n, m, w)
        if cells * _TILE_COST > budget:
            return k, start, True
        width = min(m, 2 * w + 1)
        rolling[0], rolling[1] = 0, width
        if stop - start >= _PAD_FROM:
            x, y = np.empty((n, _LANES)), np.empty((m, _LANES))
            store, totals = np.empty((2 * width, _LANES)), np.empty(_LANES)
        while start < stop:
            count = min(stop - start, _LANES)
            cost = cells * (_TILE_COST if count >= _PAD_FROM else 1)
            if spent > 0 and spent + cost > budget:
                return k, start, False
            spent += cost
            if count >= _PAD_FROM:
                _load_tile(av, aoff, bv, boff, order, start, count, normalize, x, y)
                _warp_rows(x, y, w, cutoff, store, rolling, two, totals, zero, n)
                found = totals
            else:
                count = 1
                x1, y1 = np.empty((n, 1)), np.empty((m, 1))
                _load_tile(av, aoff, bv, boff, order, start, one, normalize, x1, y1)
                found = np.empty(1)
                _warp_rows(x1, y1, w, cutoff, np.empty((2 * width, 1)), rolling, two, found, zero, n)
            _put_distances(found, order, start, count, cutoff, out)
            start += count
        k += 1
    return k, start, False


def _distances(av, aoff, bv, boff, order, group_starts, band, normalize, cutoff, out):
    """:func:`_distance_batch` in pieces of about ``_BUDGET`` units, with a :func:`checkpoint` between them."""
    k, start, groups = 0, 0, len(group_starts) - 1
    while k < groups:
        k, start, long = _distance_batch(
            av, aoff, bv, boff, order, group_starts, band, normalize, cutoff, out, k, start, _BUDGET
        )
        checkpoint()
        if long:
            _long_group(av, aoff, bv, boff, order, group_starts[k], group_starts[k + 1], band, normalize, cutoff, out)
            k += 1
    return out


def _long_group(av, aoff, bv, boff, order, first, stop, band, normalize, cutoff, out):
    """The pairs ``order[first:stop]`` (one shape), tiled as :func:`_distance_batch` does, each tile's
    programme in blocks of rows of about ``_BUDGET`` units, with a :func:`checkpoint` between blocks."""
    r0 = order[first]
    n, m = int(aoff[r0 + 1] - aoff[r0]), int(boff[r0 + 1] - boff[r0])
    w = _half_width(n, m, band)
    width = min(m, 2 * w + 1)
    rolling = np.array([0, width], dtype=np.int64)
    start = first
    while start < stop:
        count = min(stop - start, _LANES)
        lanes = _LANES if count >= _PAD_FROM else 1
        count = count if lanes == _LANES else 1
        x, y = np.empty((n, lanes)), np.empty((m, lanes))
        _load_tile(av, aoff, bv, boff, order, start, count, normalize, x, y)
        store, found = np.empty((2 * width, lanes)), np.empty(lanes)
        rows = max(1, _BUDGET // (width * (_TILE_COST if lanes == _LANES else 1)))
        row = 0
        while row < n:
            row = _warp_rows(x, y, w, cutoff, store, rolling, 2, found, row, min(n, row + rows))
            checkpoint()
        _put_distances(found, order, start, count, cutoff, out)
        start += count


@njit(cache=True, nogil=True)
def _path_rows(n, m, w):
    """Where each row of the whole band starts in the store of a traced pair (``n + 1`` entries)."""
    row_start = np.empty(n + 1, dtype=np.int64)
    row_start[0] = 0
    for i in range(n):
        lo, hi = _row_bounds(i, m, w)
        row_start[i + 1] = row_start[i] + hi - lo + 1
    return row_start


@njit(cache=True, nogil=True)
def _trace(store, row_start, n, m, w, slot, out_i, out_j):
    """Walk the whole band of cumulative costs back from the last cell; the path, 0-based, from ``slot`` on.

    At each cell the cheapest neighbour, preferring on a tie the diagonal, then
    the cell above (i - 1, j), then the cell to the left (i, j - 1). Returns its length.
    """
    return _trace_lane(store, row_start, n, m, w, slot, out_i, out_j, np.int64(0))


@njit(cache=True, nogil=True)
def _trace_lane(store, row_start, n, m, w, slot, out_i, out_j, lane):
    """:func:`_trace` on column ``lane`` of ``store`` (one pair of a tile)."""
    inf = np.inf
    k = slot + n + m - 2
    i, j = n - 1, m - 1
    out_i[k], out_j[k] = i, j
    while i > 0 or j > 0:
        lo, hi = _row_bounds(i, m, w)
        left = store[row_start[i] + j - 1 - lo, lane] if j > lo else inf
        if i > 0:
            plo, phi = _row_bounds(i - 1, m, w)
            above = store[row_start[i - 1] + j - plo, lane] if j <= phi else inf
            diagonal = store[row_start[i - 1] + j - 1 - plo, lane] if j > plo else inf
        else:
            above = diagonal = inf
        if diagonal <= above and diagonal <= left:
            i -= 1
            j -= 1
        elif above <= left:
            i -= 1
        else:
            j -= 1
        k -= 1
        out_i[k], out_j[k] = i, j
    length = slot + n + m - 1 - k
    for t in range(length):  # move the path to the front of its slot
        out_i[slot + t] = out_i[k + t]
        out_j[slot + t] = out_j[k + t]
    return length


@njit(cache=True, nogil=True)
def _path_batch(av, aoff, bv, boff, usable, band, slots, out_i, out_j, lengths, r, budget):
    """Optimal paths, 0-based, written from ``slots[r]`` on, from row ``r`` on until about ``budget`` units of
    work are done; returns the row to go on at, and whether it stopped at a pair costing more than the budget
    alone (:func:`_long_path` does those).

    The whole band of cumulative costs is kept and walked back (:func:`_trace`).
    Each cell holds its cost plus its cheapest neighbour's, so the squared
    differences along the path, added up from the start, give the last cell exactly.
    """
    spent = 0
    while r < len(usable):
        if not usable[r]:
            lengths[r] = 0
            r += 1
            continue
        n, m = aoff[r + 1] - aoff[r], boff[r + 1] - boff[r]
        w = _half_width(n, m, band)
        cost = _band_cells(n, m, w) * _PATH_COST
        if cost > budget:
            return r, True
        if spent > 0 and spent + cost > budget:
            return r, False
        spent += cost
        row_start = _path_rows(n, m, w)
        store = np.empty((row_start[n], 1))
        x = av[aoff[r] : aoff[r + 1]].copy().reshape((n, 1))
        y = bv[boff[r] : boff[r + 1]].copy().reshape((m, 1))
        _warp_rows(x, y, w, np.inf, store, row_start, n, np.empty(1), np.int64(0), n)
        lengths[r] = _trace(store, row_start, n, m, w, slots[r], out_i, out_j)
        r += 1
    return r, False


@njit(cache=True, nogil=True)
def _path_tiles(av, aoff, bv, boff, order, group_starts, band, slots, out_i, out_j, lengths, k, start, budget):
    """Paths of the rows ``order``, grouped by shape (``group_starts``), from group ``k``, position ``start``
    on, until about ``budget`` units of work are done; returns where to go on, and whether it stopped at a
    group whose pairs are each more than the budget (:func:`_long_path` does those).

    As :func:`_distance_batch`, pairs of one shape are stepped through the
    programme ``_LANES`` at a time, each lane keeping its whole band (a tile's
    store is ``_LANES`` times a pair's, so only shapes of at most
    ``_TILE_PATH_CELLS`` band cells are tiled); each lane is then walked back
    (:func:`_trace_lane`). A lane's costs are those of the pair alone, so the
    paths are too.
    """
    zero, one, off = np.int64(0), np.int64(1), np.bool_(False)  # not literals: one compiled _warp for every caller
    spent = 0
    while k < len(group_starts) - 1:
        first, stop = group_starts[k], group_starts[k + 1]
        start = max(start, first)
        r0 = order[first]
        n, m = aoff[r0 + 1] - aoff[r0], boff[r0 + 1] - boff[r0]
        w = _half_width(n, m, band)
        cells = _band_cells(n, m, w)
        if cells * _PATH_COST > budget:
            return k, start, True
        row_start = _path_rows(n, m, w)
        tiled = row_start[n] <= _TILE_PATH_CELLS
        if tiled and stop - start >= _PAD_FROM:
            x, y = np.empty((n, _LANES)), np.empty((m, _LANES))
            store, totals = np.empty((row_start[n], _LANES)), np.empty(_LANES)
        while start < stop:
            count = min(stop - start, _LANES)
            lanes = _LANES if tiled and count >= _PAD_FROM else 1
            count = count if lanes == _LANES else 1
            cost = cells * (_TILE_COST if lanes == _LANES else _PATH_COST)
            if spent > 0 and spent + cost > budget:
                return k, start, False
            spent += cost
            if lanes == _LANES:
                _load_tile(av, aoff, bv, boff, order, start, count, off, x, y)
                _warp_rows(x, y, w, np.inf, store, row_start, n, totals, zero, n)
                for g in range(count):
                    r = order[start + g]
                    lengths[r] = _trace_lane(store, row_start, n, m, w, slots[r], out_i, out_j, g)
            else:
                r = order[start]
                x1, y1 = np.empty((n, 1)), np.empty((m, 1))
                _load_tile(av, aoff, bv, boff, order, start, one, off, x1, y1)
                store1 = np.empty((row_start[n], 1))
                _warp_rows(x1, y1, w, np.inf, store1, row_start, n, np.empty(1), zero, n)
                lengths[r] = _trace(store1, row_start, n, m, w, slots[r], out_i, out_j)
            start += count
        k += 1
    return k, start, False


@njit(cache=True, nogil=True)
def _one_based(out_i, out_j, slots, offsets, i, j):
    """Each path from the front of its slot to ``offsets``, 1-based."""
    for r in range(len(offsets) - 1):
        start = slots[r]
        for k in range(offsets[r + 1] - offsets[r]):
            i[offsets[r] + k] = out_i[start + k] + 1
            j[offsets[r] + k] = out_j[start + k] + 1


def _paths(av, aoff, bv, boff, usable, band, slots, out_i, out_j, lengths):
    """:func:`_path_tiles` over the usable pairs grouped by shape, in pieces of about ``_BUDGET`` units, with a
    :func:`checkpoint` between them; ``lengths`` of the other rows are 0."""
    lengths[~usable] = 0
    a_len, b_len = np.diff(aoff), np.diff(boff)
    rows = np.flatnonzero(usable)
    order = rows[np.lexsort((b_len[rows], a_len[rows]))].astype(np.int64)
    na, nb = a_len[order], b_len[order]
    change = np.flatnonzero((np.diff(na) != 0) | (np.diff(nb) != 0)) + 1
    group_starts = np.concatenate(([0], change, [len(order)])).astype(np.int64) if len(order) else np.zeros(1, np.int64)
    k, start, groups = 0, 0, len(group_starts) - 1
    while k < groups:
        k, start, long = _path_tiles(
            av, aoff, bv, boff, order, group_starts, band, slots, out_i, out_j, lengths, k, start, _BUDGET
        )
        checkpoint()
        if long:
            for r in order[group_starts[k] : group_starts[k + 1]]:
                _long_path(av, aoff, bv, boff, r, band, slots, out_i, out_j, lengths)
                checkpoint()
            k += 1
    return lengths


def _long_path(av, aoff, bv, boff, r, band, slots, out_i, out_j, lengths):
    """The path of pair ``r``, its programme in blocks of rows of about ``_BUDGET`` units."""
    x = av[aoff[r] : aoff[r + 1]].reshape((-1, 1))
    y = bv[boff[r] : boff[r + 1]].reshape((-1, 1))
    n, m = len(x), len(y)
    w = _half_width(n, m, band)
    row_start = _path_rows(n, m, w)
    store = np.empty((row_start[n], 1))
    rows = max(1, _BUDGET // (min(m, 2 * w + 1) * _PATH_COST))
    row = 0
    while row < n:
        row = _warp_rows(x, y, w, np.inf, store, row_start, n, np.empty(1), row, min(n, row + rows))
        checkpoint()
    lengths[r] = _trace(store, row_start, n, m, w, slots[r], out_i, out_j)


@njit(cache=True, nogil=True)
def _lb_keogh_batch(av, aoff, bv, boff, usable, band, out):
    """LB_Keogh per pair, the envelope by van Herk's running max/min.

    Positions of ``b`` are shifted by ``w`` so that the window of ``a_i`` is
    ``t = i .. i + 2w`` of a padded line (``-inf``/``+inf`` outside ``b``).
    Cut the line into blocks of ``2w + 1``: a window spans at most two
    neighbouring blocks, so its max is the larger of the running max from the
    window's start to its block's end and the running max from the next
    block's start to the window's end. Three passes, no sorting.
    """
    inf = np.inf
    longest = 1
    for r in range(len(usable)):
        n, m = aoff[r + 1] - aoff[r], boff[r + 1] - boff[r]
        if n > 0 and m > 0:
            longest = max(longest, n + 2 * _half_width(n, m, band))
    from_start_max = np.empty(longest)
    from_start_min = np.empty(longest)
    to_end_max = np.empty(longest)
    to_end_min = np.empty(longest)
    for r in range(len(usable)):
        if not usable[r]:
            out[r] = np.nan
            continue
        x = av[aoff[r] : aoff[r + 1]]
        y = bv[boff[r] : boff[r + 1]]
        n, m = len(x), len(y)
        w = _half_width(n, m, band)
        size = 2 * w + 1
        line = n + 2 * w
        for start in range(0, line, size):
            stop = min(start + size, line)
            top, bottom = -inf, inf
            for t in range(start, stop):
                if w <= t < w + m:
                    top = max(top, y[t - w])
                    bottom = min(bottom, y[t - w])
                from_start_max[t] = top
                from_start_min[t] = bottom
            top, bottom = -inf, inf
            for t in range(stop - 1, start - 1, -1):
                if w <= t < w + m:
                    top = max(top, y[t - w])
                    bottom = min(bottom, y[t - w])
                to_end_max[t] = top
                to_end_min[t] = bottom
        total = 0.0
        for i in range(n):
            top = max(to_end_max[i], from_start_max[i + size - 1])
            bottom = min(to_end_min[i], from_start_min[i + size - 1])
            above = max(x[i] - top, 0.0)
            below = max(bottom - x[i], 0.0)
            total = (above * above + below * below) + total  # one of the two is 0
        out[r] = math.sqrt(total)
    return out


# ---------------------------------------------------------------------------
# public kernels
# ---------------------------------------------------------------------------


def _flat(batch: Ragged) -> tuple[np.ndarray, np.ndarray]:
    return (
        np.ascontiguousarray(batch.values, dtype=np.float64),
        np.ascontiguousarray(batch.offsets, dtype=np.int64),
    )


def _usable(a: Ragged, b: Ragged) -> np.ndarray:
    """Pairs with an answer: both rows valid, non-empty and wholly finite."""
    if a.n_rows != b.n_rows:
        raise ValueError(f"a has {a.n_rows} rows and b has {b.n_rows}; pairs need the same number")
    usable = a.row_valid & b.row_valid & (a.lengths > 0) & (b.lengths > 0)
    for batch in (a, b):
        finite = np.isfinite(batch.values)
        if not finite.all():
            usable &= np.bincount(batch.row_ids[~finite], minlength=batch.n_rows) == 0
    return usable


def _pair_scales(a: Ragged, b: Ragged, usable: np.ndarray) -> np.ndarray | None:
    """Per pair, a power of two bringing both series near 1 where squared differences would overflow
    or underflow (magnitudes beyond about 1e120 or below 1e-120); None when no pair needs one.

    Scaling by a power of two is exact: distances scale back exactly, paths do not change.
    """
    magnitude = np.zeros(a.n_rows)
    for batch in (a, b):
        ends = batch.offsets[1:][batch.lengths > 0]
        if len(ends):
            biggest = np.maximum.reduceat(np.abs(batch.values), batch.offsets[:-1][batch.lengths > 0])
            magnitude[batch.lengths > 0] = np.maximum(magnitude[batch.lengths > 0], biggest)
    _, exponent = np.frexp(magnitude)
    needed = usable & (magnitude > 0) & ((exponent > 400) | (exponent < -400))
    if not needed.any():
        return None
    scale = np.ones(a.n_rows)
    scale[needed] = np.ldexp(1.0, -np.clip(exponent[needed], -1020, 1020))
    return scale


def _scaled_flat(a: Ragged, b: Ragged, scale: np.ndarray | None) -> tuple[np.ndarray, ...]:
    av, aoff = _flat(a)
    bv, boff = _flat(b)
    if scale is not None:
        av, bv = av * np.repeat(scale, a.lengths), bv * np.repeat(scale, b.lengths)
    return av, aoff, bv, boff


def _by_shape(a: Ragged, b: Ragged, usable: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Usable rows ordered by (length of a, length of b), and where each shape starts."""
    rows = np.flatnonzero(usable)
    n, m = a.lengths[rows], b.lengths[rows]
    order = np.lexsort((m, n))
    rows, n, m = rows[order], n[order], m[order]
    change = np.flatnonzero((np.diff(n) != 0) | (np.diff(m) != 0)) + 1
    starts = np.concatenate(([0], change, [len(rows)]) if len(rows) else ([0],)).astype(np.int64)
    return rows.astype(np.int64), starts


def _band_code(band: int | None) -> int:
    # any band of 2**40 or more allows every cell of any pair that fits in memory
    return _NO_BAND if band is None else min(int(band), 2**40)


def dtw_distance(
    a: Ragged, b: Ragged, band: int | None = None, normalize: bool = False, cutoff: float | None = None
) -> np.ndarray:
    """Dynamic time warping distance between ``a.row(r)`` and ``b.row(r)``.

    The square root of the least sum of squared differences over warping
    paths from (1, 1) to (n, m) with steps (1, 0), (0, 1), (1, 1) (Sakoe &
    Chiba 1978). Lengths may differ.

    Parameters
    ----------
    a, b : Ragged
        Batches with the same number of rows; row ``r`` of one is compared with
        row ``r`` of the other.
    band : int or None
        Sakoe–Chiba half-width: cell (i, j) is allowed when ``|i - j| <= band``.
        When ``|n - m| > band`` the band is widened to ``|n - m|`` so that a path
        exists. None allows every cell.
    normalize : bool
        Z-normalise each series first (population standard deviation); a
        constant series becomes all zeros.
    cutoff : float or None
        Only distances ``<= cutoff`` are returned; a pair farther than that
        gives NaN ("farther than cutoff"), whether or not its programme was
        cut short. The programme may stop once every path's cost is above the
        cutoff (the early abandoning of Rakthanmanon et al. 2012). Any distance
        that is returned is exact, and the same as without a cutoff.

    Returns
    -------
    numpy.ndarray
        float64, one per pair. NaN when either row is NULL or empty, when
        either series holds a missing (NaN) or infinite element (drop NULLs
        first, e.g. with ``list_filter``, to ignore them), or when the distance
        is above ``cutoff``.

    References
    ----------
    Sakoe, H. & Chiba, S. (1978). IEEE Trans. ASSP 26(1), 43–49.
    Rakthanmanon, T. et al. (2012). Proc. KDD 2012, 262–270.

    Examples
    --------
    >>> float(dtw_distance(Ragged.from_list([[0, 1, 2]]), Ragged.from_list([[0, 1, 1, 2]]))[0])
    0.0
    """
    usable = _usable(a, b)
    scale = _pair_scales(a, b, usable)
    av, aoff, bv, boff = _scaled_flat(a, b, scale)
    limit = np.inf if cutoff is None else float(cutoff)
    out = np.full(a.n_rows, np.nan)
    if scale is None:
        order, group_starts = _by_shape(a, b, usable)
        return _distances(av, aoff, bv, boff, order, group_starts, _band_code(band), bool(normalize), limit, out)
    # scaled pairs: no early abandoning (the cutoff is in the original units), the cutoff applied afterwards
    for pairs, pair_limit in ((usable & (scale == 1), limit), (usable & (scale != 1), np.inf)):
        order, group_starts = _by_shape(a, b, pairs)
        _distances(av, aoff, bv, boff, order, group_starts, _band_code(band), bool(normalize), pair_limit, out)
    if not normalize:  # a z-normalised distance does not depend on the scale
        with np.errstate(over="ignore"):
            out /= scale
    if cutoff is not None:
        out[out > limit] = np.nan
    return out


#: Largest cost matrix dtw_path keeps for one pair (8 bytes a cell: 1 GiB).
PATH_MAX_CELLS = 1 << 27


def _check_path_size(n: np.ndarray, m: np.ndarray, band: int | None) -> None:
    if len(n) == 0:
        return
    if band is None:
        cells = n * m
    else:
        w = np.maximum(band, np.abs(n - m))
        cells = np.minimum(n * (2 * w + 1), n * m)
    worst = int(np.argmax(cells))
    if cells[worst] > PATH_MAX_CELLS:
        raise ValueError(
            f"dtw_path: a {n[worst]} x {m[worst]} pair needs {cells[worst]:,} cells, more than the "
            f"{PATH_MAX_CELLS:,} allowed; give a smaller band"
        )


def dtw_path(a: Ragged, b: Ragged, band: int | None = None) -> RaggedRecords:
    """One optimal warping path per pair, as 1-based cells ``(i, j)``.

    The path runs from (1, 1) to (n, m); the sum of ``(a_i - b_j)^2`` over its
    cells, added up from the start, equals ``dtw_distance(a, b, band) ** 2``
    before the square root (Sakoe & Chiba 1978). Among optimal paths the one
    returned is found by walking back from (n, m) and taking, at each cell, the
    step the forward programme came by: the cheapest neighbour, preferring on
    a tie the diagonal (i-1, j-1), then (i-1, j), then (i, j-1).

    Parameters
    ----------
    a, b : Ragged
        Batches with the same number of rows.
    band : int or None
        Sakoe–Chiba half-width, widened to ``|n - m|`` as in :func:`dtw_distance`.

    Returns
    -------
    RaggedRecords
        Fields ``'i'`` and ``'j'`` (int64, 1-based), one list of cells per pair;
        a pair without an answer (see :func:`dtw_distance`) is an invalid row.
        Memory: 8 bytes per cell inside the band, for the pair being traced;
        a pair needing more than ``PATH_MAX_CELLS`` cells is an error (give a
        band) rather than an allocation that could exhaust the machine.

    References
    ----------
    Sakoe, H. & Chiba, S. (1978). IEEE Trans. ASSP 26(1), 43–49.

    Examples
    --------
    >>> p = dtw_path(Ragged.from_list([[0.0, 1, 2]]), Ragged.from_list([[0.0, 1, 1, 2]]))
    >>> p.fields["i"].tolist(), p.fields["j"].tolist()
    ([1, 2, 2, 3], [1, 2, 3, 4])
    """
    usable = _usable(a, b)
    _check_path_size(a.lengths[usable], b.lengths[usable], band)
    av, aoff, bv, boff = _scaled_flat(a, b, _pair_scales(a, b, usable))
    room = np.where(usable, a.lengths + b.lengths - 1, 0).astype(np.int64)
    slots = np.zeros(a.n_rows + 1, dtype=np.int64)
    np.cumsum(room, out=slots[1:])
    out_i = np.empty(slots[-1], dtype=np.int64)
    out_j = np.empty(slots[-1], dtype=np.int64)
    lengths = np.zeros(a.n_rows, dtype=np.int64)
    _paths(av, aoff, bv, boff, usable, _band_code(band), slots, out_i, out_j, lengths)
    offsets = np.zeros(a.n_rows + 1, dtype=np.int64)
    np.cumsum(lengths, out=offsets[1:])
    fields = {"i": np.empty(offsets[-1], dtype=np.int64), "j": np.empty(offsets[-1], dtype=np.int64)}
    _one_based(out_i, out_j, slots, offsets, fields["i"], fields["j"])
    return RaggedRecords(fields, offsets, None if usable.all() else usable)


def lb_keogh(a: Ragged, b: Ragged, band: int) -> np.ndarray:
    """LB_Keogh lower bound of the warping distance between ``a.row(r)`` and ``b.row(r)``.

    ``sqrt(sum_i e_i)`` with ``e_i = (a_i - U_i)^2`` where ``a_i > U_i``,
    ``(a_i - L_i)^2`` where ``a_i < L_i`` and 0 otherwise; ``U_i`` and ``L_i``
    are the largest and smallest element of ``b`` over positions
    ``[i - band, i + band]`` clipped to ``b``'s ends (Keogh & Ratanamahatana
    2005). For unequal lengths the band is widened to ``|n - m|``, as the
    distance does; every warping path meets every position ``i`` of ``a`` at
    some ``j`` inside that clipped window, so the bound holds for any lengths:
    ``lb_keogh(a, b, band) <= dtw_distance(a, b, band)``, also in floating
    point (both are sums of non-negative terms taken in path order).

    Parameters
    ----------
    a, b : Ragged
        Batches with the same number of rows; the envelope is built around ``b``.
    band : int
        Sakoe–Chiba half-width (>= 0).

    Returns
    -------
    numpy.ndarray
        float64, one per pair; NaN as for :func:`dtw_distance`.

    References
    ----------
    Keogh, E. & Ratanamahatana, C. A. (2005). KAIS 7(3), 358–386.
    van Herk, M. (1992). Pattern Recognition Letters 13(7), 517–521.

    Examples
    --------
    >>> float(lb_keogh(Ragged.from_list([[0, 5, 0]]), Ragged.from_list([[0, 1, 0]]), 1)[0])
    4.0
    """
    usable = _usable(a, b)
    scale = _pair_scales(a, b, usable)
    av, aoff, bv, boff = _scaled_flat(a, b, scale)
    out = np.empty(a.n_rows, dtype=np.float64)
    _lb_keogh_batch(av, aoff, bv, boff, usable, min(int(band), 2**40), out)  # a wider band makes no difference
    if scale is not None:
        with np.errstate(over="ignore"):
            out /= scale
    return out
