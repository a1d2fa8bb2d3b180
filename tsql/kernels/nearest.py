"""Look-alike items: the k nearest other items of every item under dynamic time warping.

One call gets a whole set of items (one series each) and answers for all of
them, exactly as comparing every pair would, while computing the warping
distance of only a small share of the pairs:

1. Every series is prepared once: gaps filled, z-normalised if asked.
2. Seeds: each item's ``k`` nearest items under a cheap summary (the Euclidean
   distance between 16 segment means) get their exact warping distance first,
   so every item has a k-th best distance (an upper bound of its final one)
   before the search starts.
3. Every item then looks for its own neighbours. Lower bounds come first,
   cheapest first — LB_Kim (first and last elements together, the largest and
   the smallest elements; Rakthanmanon et al. 2012) over all items, then
   LB_Keogh both ways (Keogh & Ratanamahatana 2005) over the survivors; a
   candidate whose bound is above the item's current k-th best distance is
   dropped. The rest, smallest bound first, go through the warping programme
   ``_LANES`` at a time (one vector lane each), pruned and abandoned at that
   distance (see :func:`_warp`), until the next bound is above it.

Items are searched independently: each reads and writes only its own list,
so the items run on all cores (:mod:`tsql.kernels.parallel`) and no answer depends on the
thread count or on which thread took which item. The price is that a pair
that is among the nearest of both its items is computed from both sides (the
same number bit for bit: the programme of (b, a) is the transpose of that of
(a, b)); pairs that only one side needs, by far the most, run once.

A bound or an abandoned programme only ever drops a pair that could not enter
the item's list, so the answer is the brute-force one; the order of the work (the
seeds) changes only how much of it is needed. The warping distance is computed
with the arithmetic of :func:`tsql.kernels.dtw.dtw_distance`, cell by cell, so
the distances are the same bit for bit. Floating-point sums
of non-negative terms only grow as terms are added or made larger, so the
bounds hold in floating point too, not only on paper.

The compiled code is self-contained (numba's on-disk cache checks only the
source file of the function it loads). The work of one call is done in pieces
of about 0.1 s with a :func:`tsql.kernels.cancel.checkpoint` between them; the
items of a piece are searched on all cores (:func:`tsql.kernels.parallel.run_pieces`:
an item's search reads and writes only its own list, so no answer depends on
which thread took which item, or when).

References
----------
.. [1] Sakoe, H. & Chiba, S. (1978). Dynamic programming algorithm optimization
   for spoken word recognition. *IEEE Trans. ASSP* 26(1), 43–49.
.. [2] Keogh, E. & Ratanamahatana, C. A. (2005). Exact indexing of dynamic time
   warping. *Knowledge and Information Systems* 7(3), 358–386.
.. [3] Rakthanmanon, T., Campana, B., Mueen, A., Batista, G., Westover, B.,
   Zhu, Q., Zakaria, J. & Keogh, E. (2012). Searching and mining trillions of
   time series subsequences under dynamic time warping. *Proc. KDD 2012*,
   262–270.
.. [4] Silva, D. F. & Batista, G. E. A. P. A. (2016). Speeding up all-pairwise
   dynamic time warping matrix calculation. *Proc. SIAM SDM 2016*, 837–845.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from tsql.kernels import parallel
from tsql.kernels.cancel import checkpoint
from tsql.kernels.ragged import Ragged

__all__ = ["dtw_nearest", "prepare"]

#: ``band=None`` inside the compiled code.
_NO_BAND = -1
#: Items searched between two looks at an interrupt request: about this many item pairs' worth (0.1 s or so).
_PAIRS_PER_PIECE = 1 << 18
#: Candidates of one item stepped through the programme together, one vector lane each.
_LANES = 8
#: Pieces of one piece of items, taken in turns by the cores.
_PIECES = 16
#: Segment means summarising a series for the seeds.
_SEGMENTS = 16
#: A squared cutoff is widened by this factor so that ``lb > cut_sq`` implies ``sqrt(lb) > cutoff`` after rounding.
_WIDEN = 1.0 + 8 * np.finfo(np.float64).eps


# ---------------------------------------------------------------------------
# preparing the series
# ---------------------------------------------------------------------------


@njit(cache=True, nogil=True)
def _prepare_rows(values, offsets, usable, normalize, out):
    """Fill each usable row's gaps into ``out`` and z-normalise it if asked.

    Inner gaps: linear between the neighbouring present values (the formula
    of ``on_grid(..., fill := 'linear')``); leading and trailing gaps: the
    nearest present value. z-normalising is the arithmetic of
    ``dtw_distance(..., normalize=True)`` (population standard deviation; a
    constant series becomes zeros).
    """
    for r in range(len(offsets) - 1):
        if not usable[r]:
            continue
        lo, hi = offsets[r], offsets[r + 1]
        n = hi - lo
        last = -1
        for t in range(n):
            v = values[lo + t]
            if math.isnan(v):
                continue
            if last < 0:
                for s in range(t):
                    out[lo + s] = v
            elif last < t - 1:
                a = values[lo + last]
                for s in range(last + 1, t):
                    out[lo + s] = a + ((s - last) / (t - last)) * (v - a)
            out[lo + t] = v
            last = t
        for s in range(last + 1, n):
            out[lo + s] = values[lo + last]
        if not normalize:
            continue
        lowest, highest, total = out[lo], out[lo], 0.0
        for k in range(lo, hi):
            total += out[k]
            lowest = min(lowest, out[k])
            highest = max(highest, out[k])
        if lowest == highest:
            out[lo:hi] = 0.0
            continue
        mean = total / n
        spread = 0.0
        for k in range(lo, hi):
            spread += (out[k] - mean) * (out[k] - mean)
        std = math.sqrt(spread / n)
        for k in range(lo, hi):
            out[k] = (out[k] - mean) / std


def prepare(series: Ragged, normalize: bool = False) -> tuple[Ragged, np.ndarray]:
    """The series as the neighbour search sees them: gaps filled, z-normalised if asked.

    Parameters
    ----------
    series : Ragged
        One series per item; NaN elements are gaps.
    normalize : bool
        z-normalise each filled series (population standard deviation; a
        constant series becomes zeros), as ``dtw_distance(normalize=True)``.

    Returns
    -------
    prepared : Ragged
        The filled series (unusable rows keep their elements, untouched).
    usable : numpy.ndarray
        bool per row: a valid, non-empty row with at least one present value
        and no infinite element. Other rows take no part in the search.

    Examples
    --------
    >>> filled, usable = prepare(Ragged.from_list([[np.nan, 1.0, np.nan, 3.0, np.nan]]))
    >>> filled.row(0).tolist(), usable.tolist()
    ([1.0, 1.0, 2.0, 3.0, 3.0], [True])
    """
    values = np.ascontiguousarray(series.values, dtype=np.float64)
    offsets = np.ascontiguousarray(series.offsets, dtype=np.int64)
    usable = series.row_valid & (series.lengths > 0)
    present = ~np.isnan(values)
    counts = np.bincount(series.row_ids[present], minlength=series.n_rows)
    usable &= counts > 0
    infinite = np.isinf(values)
    if infinite.any():
        usable &= np.bincount(series.row_ids[infinite], minlength=series.n_rows) == 0
    out = values.copy()
    _prepare_rows(values, offsets, usable, bool(normalize), out)
    return Ragged(out, offsets, series.valid), usable


# ---------------------------------------------------------------------------
# compiled core: bounds, the warping programme, the lists
# ---------------------------------------------------------------------------


@njit(cache=True, nogil=True)
def _half_width(n, m, band):
    """The band used for an n x m pair: widened to ``|n - m|``; ``max(n, m) - 1`` allows every cell."""
    widest = max(n, m) - 1
    if band < 0:
        return widest
    return min(max(band, abs(n - m)), widest)


@njit(cache=True, nogil=True)
def _envelope(y, w, upper, lower, run_max, run_min, back_max, back_min):
    """Largest and smallest element of ``y`` over ``[i - w, i + w]`` clipped to ``y``, for every ``i``.

    van Herk's running extremes (Pattern Recognition Letters 13(7), 1992): cut
    ``y`` into blocks of ``2w + 1``; a window meets at most two blocks, so its
    extreme is that of the running extreme from its start to its block's end
    and the running extreme from the next block's start to its end.
    """
    n = len(y)
    if w >= n - 1:
        upper[:] = y.max()
        lower[:] = y.min()
        return
    size = 2 * w + 1
    for t in range(n):
        if t % size == 0:
            run_max[t], run_min[t] = y[t], y[t]
        else:
            run_max[t], run_min[t] = max(run_max[t - 1], y[t]), min(run_min[t - 1], y[t])
    for t in range(n - 1, -1, -1):
        if t == n - 1 or (t + 1) % size == 0:
            back_max[t], back_min[t] = y[t], y[t]
        else:
            back_max[t], back_min[t] = max(back_max[t + 1], y[t]), min(back_min[t + 1], y[t])
    for i in range(n):
        s, e = max(0, i - w), min(n - 1, i + w)
        if s // size != e // size:
            upper[i], lower[i] = max(back_max[s], run_max[e]), min(back_min[s], run_min[e])
        elif s % size == 0:  # the window starts its block
            upper[i], lower[i] = run_max[e], run_min[e]
        else:  # clipped at the end of y: back_* runs to n - 1 = e
            upper[i], lower[i] = back_max[s], back_min[s]


@njit(cache=True, nogil=True)
def _keogh(x, upper, lower, cut_sq, tail):
    """LB_Keogh of ``x`` against an envelope, squared; stops early (a partial sum) once above ``cut_sq``.

    When it does not stop, ``tail[i]`` gets the sum of the terms after ``i`` (``tail[n - 1] = 0``): the least
    that rows ``i + 1 ..`` of the programme can add.
    """
    n = len(x)
    total = 0.0
    for block in range(0, n, 8):
        for i in range(block, min(n, block + 8)):
            above = max(x[i] - upper[i], 0.0)
            below = max(lower[i] - x[i], 0.0)
            e = above * above + below * below  # one of the two is 0
            tail[i] = e
            total += e
        if total > cut_sq:
            return total
    after = 0.0
    for i in range(n - 1, -1, -1):
        e = tail[i]
        tail[i] = after
        after += e
    return total


@njit(cache=True, nogil=True)
def _warp(x, y, w, cut_sq, tail, above, here):
    """Least cumulative squared cost within band ``w``, or ``inf`` when it is above ``cut_sq``.

    Each computed cell is ``c + min(diagonal, above, left)``: the number that
    :func:`tsql.kernels.dtw.dtw_distance` computes for it. A path through a
    cell of row ``i`` costs at least the cell's cost plus ``tail[i]``, a lower
    bound of what the later rows add (LB_Keogh's terms); a cell for which that
    is above the cutoff is dead, and a row is worked only from the first live
    cell of the row above to its last, and on to the right while the cell to
    the left lives (the pruning of Silva & Batista 2016 with the early
    abandoning of Rakthanmanon et al. 2012): a dead cell can never be the
    cheapest way into a live one, so every live cell is computed exactly. The
    programme stops when a row has no live cell. The bound is summed in
    another order than a path's cost, so it is shrunk by a bound of the
    rounding of a sum of ``n + m`` non-negative terms before the comparison.
    ``above`` and ``here`` hold ``m + 1`` cells (index ``j + 1`` is column ``j``).
    """
    n, m = len(x), len(y)
    inf = np.inf
    shrink = 1.0 - 4.0 * (n + m + 2) * 2.220446049250313e-16
    here[0] = inf
    d = x[0] - y[0]
    here[1] = d * d
    last = min(m - 1, w)
    for j in range(1, last + 1):
        d = x[0] - y[j]
        here[j + 1] = d * d + here[j]
    first_live, last_live = -1, -1
    for j in range(last + 1):  # row 0 grows to the right
        if (here[j + 1] + tail[0]) * shrink > cut_sq:
            break
        first_live, last_live = 0, j
    if first_live < 0:
        return inf
    if last_live + 2 <= m:
        here[last_live + 2] = inf
    for i in range(1, n):
        above, here = here, above
        lo, hi = max(0, i - w), min(m - 1, i + w)
        start = max(lo, first_live)
        here[start] = inf
        xi, rest = x[i], tail[i]
        new_first, new_last = -1, -1
        j = start
        while j <= hi:
            d = xi - y[j]
            if j <= last_live:
                v = d * d + min(above[j], above[j + 1], here[j])
            elif j == last_live + 1:
                v = d * d + min(above[j], here[j])
            else:
                if new_last != j - 1:  # right of the row above: only the left cell leads here
                    break
                v = d * d + here[j]
            here[j + 1] = v
            if (v + rest) * shrink <= cut_sq:
                if new_first < 0:
                    new_first = j
                new_last = j
            j += 1
        if new_first < 0:
            return inf
        first_live, last_live = new_first, new_last
        here[first_live] = inf
        if last_live + 2 <= m:
            here[last_live + 2] = inf
    if last_live != m - 1:
        return inf
    return here[m]


@njit(cache=True, nogil=True)
def _live(values, rest, shrink, cut_sq):
    """Whether any lane's cell can still be on a path ending at or below the cutoff."""
    for g in range(_LANES):
        if (values[g] + rest[g]) * shrink <= cut_sq:
            return True
    return False


@njit(cache=True, nogil=True)
def _warp_tile(x, ys, w, cut_sq, tails, above, here, out):
    """:func:`_warp` of ``x`` against the ``_LANES`` columns of ``ys`` (all of one length), stepped together.

    The innermost loops run across the lanes: independent chains of
    arithmetic the processor overlaps (they compile to scalar instructions,
    not vector ones: numba cannot prove the arrays apart). A row is worked over the union of the lanes' live cells, so a
    lane's live cells are exact as in :func:`_warp` (a dead cell computed for
    the sake of another lane may come out too large, and stays dead). ``out``
    gets each lane's squared cost, or ``inf`` when it is above the cutoff.
    """
    n, m = len(x), ys.shape[0]
    inf = np.inf
    shrink = 1.0 - 4.0 * (n + m + 2) * 2.220446049250313e-16
    x0 = x[0]
    for g in range(_LANES):
        here[0, g] = inf
        d = x0 - ys[0, g]
        here[1, g] = d * d
    last = min(m - 1, w)
    for j in range(1, last + 1):
        for g in range(_LANES):
            d = x0 - ys[j, g]
            here[j + 1, g] = d * d + here[j, g]
    first_live, last_live = -1, -1
    for j in range(last + 1):  # row 0 grows to the right in every lane
        if not _live(here[j + 1], tails[0], shrink, cut_sq):
            break
        first_live, last_live = 0, j
    if first_live < 0:
        out[:] = inf
        return
    if last_live + 2 <= m:
        here[last_live + 2, :] = inf
    for i in range(1, n):
        above, here = here, above
        lo, hi = max(0, i - w), min(m - 1, i + w)
        start = max(lo, first_live)
        if start > last_live + 1:
            out[:] = inf
            return
        here[start, :] = inf
        xi = x[i]
        for j in range(start, min(hi, last_live) + 1):
            for g in range(_LANES):
                d = xi - ys[j, g]
                here[j + 1, g] = d * d + min(above[j, g], above[j + 1, g], here[j, g])
        j = last_live + 1
        if j <= hi:
            for g in range(_LANES):
                d = xi - ys[j, g]
                here[j + 1, g] = d * d + min(above[j, g], here[j, g])
            j += 1
            while j <= hi and _live(here[j], tails[i], shrink, cut_sq):  # the left cell lives in some lane
                for g in range(_LANES):
                    d = xi - ys[j, g]
                    here[j + 1, g] = d * d + here[j, g]
                j += 1
        end = j - 1
        new_first = start
        while new_first <= end and not _live(here[new_first + 1], tails[i], shrink, cut_sq):
            new_first += 1
        if new_first > end:
            out[:] = inf
            return
        new_last = end
        while not _live(here[new_last + 1], tails[i], shrink, cut_sq):
            new_last -= 1
        first_live, last_live = new_first, new_last
        here[first_live, :] = inf
        if last_live + 2 <= m:
            here[last_live + 2, :] = inf
    for g in range(_LANES):
        v = here[m, g]
        out[g] = v if last_live == m - 1 and v * shrink <= cut_sq else inf


@njit(cache=True, nogil=True)
def _offer(i, j, d, k, best_d, best_j, count, kth_sq):
    """Put ``(d, j)`` into item ``i``'s list (ordered by distance, then index) if it belongs there."""
    c = count[i]
    if c == k:
        if d > best_d[i, k - 1] or (d == best_d[i, k - 1] and j > best_j[i, k - 1]):
            return
        pos = k - 1
    else:
        pos = c
        count[i] = c + 1
    while pos > 0 and (best_d[i, pos - 1] > d or (best_d[i, pos - 1] == d and best_j[i, pos - 1] > j)):
        best_d[i, pos] = best_d[i, pos - 1]
        best_j[i, pos] = best_j[i, pos - 1]
        pos -= 1
    best_d[i, pos] = d
    best_j[i, pos] = j
    if count[i] == k:
        kth = best_d[i, k - 1]
        kth_sq[i] = kth * kth * _WIDEN


@njit(cache=True, nogil=True)
def _known(i, j, best_j, count):
    for s in range(count[i]):
        if best_j[i, s] == j:
            return True
    return False


@njit(cache=True, nogil=True)
def _settle(i, j, x_all, off, env_up, env_low, reference, band, k, best_d, best_j, count, kth_sq, cut_sq, work):
    """LB_Keogh both ways, then the programme abandoned at ``cut_sq``; an exact distance goes into ``i``'s list."""
    x = x_all[off[i] : off[i + 1]]
    y = x_all[off[j] : off[j + 1]]
    n, m = len(x), len(y)
    spent = 0
    tail_x, tail_y = work[2], work[3]
    if n == m:
        spent += n
        bound_x = _keogh(x, env_up[off[j] : off[j + 1]], env_low[off[j] : off[j + 1]], cut_sq, tail_x)
        if bound_x > cut_sq:
            return spent
        spent += n
        bound_y = _keogh(y, env_up[off[i] : off[i + 1]], env_low[off[i] : off[i + 1]], cut_sq, tail_y)
        if bound_y > cut_sq:
            return spent
        if bound_y > bound_x:  # rows along y: d(x, y) = d(y, x), the programme of (y, x) is the transpose
            x, y, n, m, tail_x = y, x, m, n, tail_y
    else:
        tail_x[:n] = 0.0
    w = _half_width(n, m, band)
    spent += n * min(m, 2 * w + 1)
    total = _warp(x, y, w, cut_sq, tail_x, work[0], work[1])
    if total == np.inf:
        return spent
    distance = math.sqrt(total)
    if reference[j]:
        _offer(i, j, distance, k, best_d, best_j, count, kth_sq)
    return spent


@njit(cache=True, nogil=True)
def _setup(x_all, off, band, env_up, env_low, ends):
    """Per item: the envelope for an equal-length partner, and first, last, largest, smallest, length."""
    longest = 1
    for i in range(len(off) - 1):
        longest = max(longest, off[i + 1] - off[i])
    scratch = np.empty((4, longest))
    for i in range(len(off) - 1):
        y = x_all[off[i] : off[i + 1]]
        n = len(y)
        w = _half_width(n, n, band)
        _envelope(
            y,
            w,
            env_up[off[i] : off[i + 1]],
            env_low[off[i] : off[i + 1]],
            scratch[0],
            scratch[1],
            scratch[2],
            scratch[3],
        )
        ends[i, 0], ends[i, 1], ends[i, 2], ends[i, 3], ends[i, 4] = y[0], y[n - 1], y.max(), y.min(), n


@njit(cache=True, nogil=True, inline="always")  # one call site: no library of its own
def _query(
    i,
    seeds,
    x_all,
    off,
    ends,
    env_up,
    env_low,
    reference,
    band,
    k,
    best_d,
    best_j,
    count,
    kth_sq,
    work,
    lb,
    cand,
    tile,
):
    """Item ``i``'s neighbours among all items: its seeds first, then the candidates in the order of their
    lower bounds.

    Bounds above ``i``'s current k-th best distance drop a candidate; the rest,
    closest bound first, get the programme abandoned at that distance, until the
    next bound is above it.
    """
    items = len(off) - 1
    x = x_all[off[i] : off[i + 1]]
    n = len(x)
    planted = np.int64(0)  # not a literal 0: _try compiles once
    for j in seeds[i]:
        if j >= 0:
            cand[planted] = j
            lb[planted] = 0.0
            planted += 1
    spent = _try(
        i,
        x,
        cand,
        lb,
        planted,
        x_all,
        off,
        env_up,
        env_low,
        reference,
        band,
        k,
        best_d,
        best_j,
        count,
        kth_sq,
        work,
        tile,
    )
    cut = kth_sq[i]
    found = np.int64(0)
    for j in range(items):  # LB_Kim
        if j == i or not reference[j]:
            continue
        d = ends[i, 0] - ends[j, 0]
        bound = d * d
        if n + ends[j, 4] > 2.0:
            d = ends[i, 1] - ends[j, 1]
            bound = bound + d * d
        d = ends[i, 2] - ends[j, 2]
        bound = max(bound, d * d)
        d = ends[i, 3] - ends[j, 3]
        bound = max(bound, d * d)
        if bound <= cut:
            lb[found] = bound
            cand[found] = j
            found += 1
    spent += items
    tail = work[2]
    for t in range(found):  # LB_Keogh both ways, equal lengths
        j = cand[t]
        if off[j + 1] - off[j] != n:
            continue
        spent += 2 * n
        y = x_all[off[j] : off[j + 1]]
        bound = max(lb[t], _keogh(x, env_up[off[j] : off[j + 1]], env_low[off[j] : off[j + 1]], cut, tail))
        if bound <= cut:
            bound = max(bound, _keogh(y, env_up[off[i] : off[i + 1]], env_low[off[i] : off[i + 1]], cut, tail))
        lb[t] = bound
    order = np.argsort(lb[:found])
    lb[:found] = lb[order]
    cand[:found] = cand[order]
    spent += _try(
        i,
        x,
        cand,
        lb,
        found,
        x_all,
        off,
        env_up,
        env_low,
        reference,
        band,
        k,
        best_d,
        best_j,
        count,
        kth_sq,
        work,
        tile,
    )
    return spent


@njit(cache=True, nogil=True)
def _try(
    i,
    x,
    cand,
    lb,
    found,
    x_all,
    off,
    env_up,
    env_low,
    reference,
    band,
    k,
    best_d,
    best_j,
    count,
    kth_sq,
    work,
    tile,
):
    """The programme of item ``i`` against ``cand[:found]`` in that order, by tiles of ``_LANES``, while the
    candidate's bound ``lb`` is not above ``i``'s k-th best distance."""
    n = len(x)
    spent = 0
    ys, tails, members = tile[0], tile[1], tile[4]
    lanes = np.int64(0)  # not a literal 0: _run_tile compiles once
    for t in range(found):
        if lb[t] > kth_sq[i]:
            break
        j = cand[t]
        if _known(i, j, best_j, count):
            continue
        if off[j + 1] - off[j] != n:
            spent += _settle(
                i, j, x_all, off, env_up, env_low, reference, band, k, best_d, best_j, count, kth_sq, kth_sq[i], work
            )
            continue
        cut = kth_sq[i]
        if _keogh(x, env_up[off[j] : off[j + 1]], env_low[off[j] : off[j + 1]], cut, tails[:n, lanes]) > cut:
            continue
        ys[:n, lanes] = x_all[off[j] : off[j + 1]]
        members[lanes] = j
        lanes += 1
        if lanes == _LANES:
            spent += _run_tile(i, x, lanes, reference, band, k, best_d, best_j, count, kth_sq, tile)
            lanes = 0
    if lanes > 0:
        for g in range(lanes, _LANES):
            ys[:n, g] = ys[:n, 0]
            tails[:n, g] = tails[:n, 0]
        spent += _run_tile(i, x, lanes, reference, band, k, best_d, best_j, count, kth_sq, tile)
    return spent


@njit(cache=True, nogil=True)
def _run_tile(i, x, lanes, reference, band, k, best_d, best_j, count, kth_sq, tile):
    """The programme of item ``i`` against a tile of candidates; exact distances go into ``i``'s list."""
    n = len(x)
    ys, tails, above, here, members = tile
    w = _half_width(n, n, band)
    out = np.empty(_LANES)
    _warp_tile(x, ys[:n], w, kth_sq[i], tails[:n], above[: n + 1], here[: n + 1], out)
    for g in range(lanes):
        if out[g] < np.inf:
            j = members[g]
            distance = math.sqrt(out[g])
            _offer(i, j, distance, k, best_d, best_j, count, kth_sq)
    return n * min(n, 2 * w + 1)


@njit(cache=True, nogil=True)
def _items(first, stop, seeds, x_all, off, ends, env_up, env_low, reference, band, k, best_d, best_j, count, kth_sq):
    """:func:`_query` for the items ``first .. stop - 1``, with work arrays of their own."""
    items = len(off) - 1
    longest = 1
    for i in range(items):
        longest = max(longest, off[i + 1] - off[i])
    work = np.empty((4, longest + 1))
    lb, cand = np.empty(max(items, k)), np.empty(max(items, k), dtype=np.int64)
    tile = (
        np.empty((longest + 1, _LANES)),
        np.empty((longest + 1, _LANES)),
        np.empty((longest + 1, _LANES)),
        np.empty((longest + 1, _LANES)),
        np.empty(_LANES, dtype=np.int64),
    )
    for i in range(first, stop):
        _query(
            i,
            seeds,
            x_all,
            off,
            ends,
            env_up,
            env_low,
            reference,
            band,
            k,
            best_d,
            best_j,
            count,
            kth_sq,
            work,
            lb,
            cand,
            tile,
        )


# ---------------------------------------------------------------------------
# seeds
# ---------------------------------------------------------------------------


def _summaries(x_all: np.ndarray, off: np.ndarray) -> np.ndarray:
    """Means of ``_SEGMENTS`` equal stretches of each series (a stretch of a short series may repeat an element)."""
    lengths = np.diff(off)
    cumulative = np.concatenate(([0.0], np.cumsum(x_all)))
    share = np.arange(_SEGMENTS + 1) / _SEGMENTS
    bounds = np.floor(lengths[:, None] * share[None, :]).astype(np.int64)
    first = np.minimum(bounds[:, :-1], lengths[:, None] - 1)
    last = np.maximum(bounds[:, 1:], first + 1)
    begin, end = off[:-1, None] + first, off[:-1, None] + last
    return (cumulative[end] - cumulative[begin]) / (end - begin)


def _seeds(summary: np.ndarray, reference: np.ndarray, k: int) -> np.ndarray:
    """For every item, its ``k`` nearest other reference items by the summaries' Euclidean distance (-1: none).

    Only the order of the work depends on these, never the answer.
    """
    items = len(summary)
    refs = np.flatnonzero(reference)
    seeds = np.full((items, k), -1, dtype=np.int64)
    take = min(k + 1, len(refs))
    if take == 0:
        return seeds
    summary = summary - summary.mean(axis=0)  # smaller magnitudes, less cancellation below
    norms = np.einsum("ij,ij->i", summary, summary)
    candidates = summary[refs]
    step = max(1, (1 << 22) // len(refs))
    for start in range(0, items, step):
        rows = np.arange(start, min(items, start + step))
        dist = norms[rows, None] + norms[None, refs] - 2.0 * (summary[rows] @ candidates.T)
        dist[refs[None, :] == rows[:, None]] = np.inf
        near = np.argpartition(dist, take - 1, axis=1)[:, :take] if take < len(refs) else np.argsort(dist, axis=1)
        near = np.take_along_axis(near, np.argsort(np.take_along_axis(dist, near, 1), axis=1), 1)[:, :k]
        found = refs[near]
        found[np.take_along_axis(dist, near, 1) == np.inf] = -1  # the item itself
        seeds[rows, : found.shape[1]] = found
    return seeds


# ---------------------------------------------------------------------------
# public kernel
# ---------------------------------------------------------------------------


def _common_scale(x_all: np.ndarray, normalize: bool) -> float:
    """A power of two bringing the largest magnitude near 1 when squared differences could overflow or
    underflow (beyond about 1e120 or below 1e-120); 1.0 otherwise. Exact: distances scale back exactly."""
    if normalize or len(x_all) == 0:
        return 1.0
    biggest = float(np.max(np.abs(x_all)))
    _, exponent = np.frexp(biggest)
    if biggest == 0 or -400 <= exponent <= 400:
        return 1.0
    return float(np.ldexp(1.0, -int(np.clip(exponent, -1020, 1020))))


def dtw_nearest(
    ids: np.ndarray,
    series: Ragged,
    k: int = 5,
    band: int | None = None,
    normalize: bool = False,
    reference: np.ndarray | None = None,
) -> dict[str, np.ndarray]:
    """The ``k`` nearest other items of every item under the dynamic time warping distance.

    Exact: the same neighbours and distances as computing
    :func:`tsql.kernels.dtw.dtw_distance` for every pair and ranking, only
    faster (lower bounds and early abandoning drop pairs that cannot be among
    the ``k`` nearest; see the module notes) [1]_ [2]_ [3]_.

    Parameters
    ----------
    ids : numpy.ndarray
        One id per item (numbers or strings), unique and not missing. Ties are
        broken by id: at equal distance the item with the smaller id ranks
        first (and is the one kept at the k-th place).
    series : Ragged
        One series per item, lengths may differ. NaN elements are gaps: each
        series is filled before the search, inner gaps linearly between the
        neighbouring present values (as ``on_grid(..., fill := 'linear')``),
        leading and trailing gaps with the nearest present value. An item
        whose series is NULL, empty, wholly missing or holds an infinite
        element takes no part: it gets no neighbours and is nobody's.
    k : int
        Neighbours per item (>= 1). An item gets fewer when fewer other items
        take part. 5 is a short list to read per item; the cost grows slowly
        with ``k``.
    band : int or None
        Sakoe–Chiba half-width, widened to the length difference, as in
        :func:`tsql.kernels.dtw.dtw_distance`. None allows any warping.
    normalize : bool
        z-normalise each filled series first (shape only, not level), as
        ``dtw_distance(normalize=True)``.
    reference : numpy.ndarray of bool or None
        The items that may be neighbours (a reference set, e.g. the training
        items of a 1-NN classifier); every item still gets its neighbours among
        them. None: every item.

    Returns
    -------
    dict of numpy.ndarray
        Flat records, ordered by item (input position) and then rank:
        ``item`` and ``neighbor`` (int64, positions in ``ids``/``series``),
        ``distance`` (float64, equal to ``dtw_distance`` of the two filled
        series, bit for bit) and ``rank`` (int64, 1 = nearest).

    Notes
    -----
    Cost: a pass of a few floating-point operations over every pair of items,
    then the bounds and the warping programme on the pairs that survive. On
    series that form groups most pairs fall to the first bound.

    The bounds work on differences of level, range and (within a band) local
    shape. z-normalised series (``normalize``) share their level and nearly
    their range, so more pairs reach the programme. On the first 1,000 of the
    sample warehouse's monthly curves, at the final k-th distance (k = 5), the
    pairs left after both bounds are 2 % with a band of 2 and 12 % without one
    when not normalised, 26 % and 74 % when normalised (without a band the
    envelope is the whole range; bounds over the first and last few steps of
    the path, as in LB_Enhanced, would still leave about 60 %). Give ``band``
    with ``normalize`` where the shapes may only shift a little. Without a
    band, a bound by each element's nearest element of the other series
    (LB_New, Shen et al. 2018, by one merge of the sorted series) with
    LB_Enhanced's last layers, also as the early-abandoning tail, cut the
    cells of the programme by a quarter (40.7M to 30.1M rows of a tile on those
    1,000 curves; 188.7M to 139.2M normalised) but cost as much time as it
    saved (measured side by side), so it is not used.

    See Also
    --------
    tsql.kernels.dtw.dtw_distance : the distance of one pair.
    tsql.kernels.dtw.lb_keogh : the lower bound used here.
    tsql.kernels.clusters.dtw_clusters : groups of look-alike items.

    References
    ----------
    .. [1] Sakoe, H. & Chiba, S. (1978). *IEEE Trans. ASSP* 26(1), 43–49.
    .. [2] Keogh, E. & Ratanamahatana, C. A. (2005). *KAIS* 7(3), 358–386.
    .. [3] Rakthanmanon, T. et al. (2012). *Proc. KDD 2012*, 262–270.

    Examples
    --------
    >>> found = dtw_nearest(np.array([10, 20, 30]), Ragged.from_list([[0, 1, 2], [0, 1, 1, 2], [5, 5, 5]]), k=1)
    >>> found["item"].tolist(), found["neighbor"].tolist(), found["distance"].round(3).tolist()
    ([0, 1, 2], [1, 0, 0], [0.0, 0.0, 7.071])

    The third item is as far from the first as from the second; the smaller
    id (10) wins the tie.
    """
    ids = np.asarray(ids)
    if len(ids) != series.n_rows:
        raise ValueError(f"dtw_nearest: {len(ids)} ids for {series.n_rows} series; give one id per series")
    k = int(k)
    if k < 1:
        raise ValueError(f"dtw_nearest: k must be at least 1, got {k}")
    if band is not None and band < 0:
        raise ValueError(f"dtw_nearest: band must be >= 0 or NULL (any warping), got {band}")
    try:
        order = np.argsort(ids, kind="stable")
    except TypeError:
        raise ValueError("dtw_nearest: ids must be numbers or strings of one kind, none missing") from None
    sorted_ids = ids[order]
    if len(ids) > 1 and np.any(sorted_ids[1:] == sorted_ids[:-1]):
        raise ValueError("dtw_nearest: ids must be unique; group the rows to one series per id first")
    prepared, usable = prepare(series, normalize)
    reference = np.ones(series.n_rows, bool) if reference is None else np.asarray(reference, bool)
    items = order[usable[order]]  # the items taking part, by id
    member = prepared.take(items)
    x_all = np.ascontiguousarray(member.values)
    scale = _common_scale(x_all, normalize)
    if scale != 1.0:
        x_all = x_all * scale
    off = np.ascontiguousarray(member.offsets)
    is_ref = np.ascontiguousarray(reference[items])
    count_items = len(items)
    best_d = np.full((count_items, k), np.inf)
    best_j = np.full((count_items, k), -1, dtype=np.int64)
    count = np.zeros(count_items, dtype=np.int64)
    kth_sq = np.full(count_items, np.inf)
    if count_items > 1:
        band_code = _NO_BAND if band is None else min(int(band), 2**40)
        env_up, env_low = np.empty_like(x_all), np.empty_like(x_all)
        ends = np.empty((count_items, 5))
        _setup(x_all, off, band_code, env_up, env_low, ends)
        state = (x_all, off, ends, env_up, env_low, is_ref, band_code, k, best_d, best_j, count, kth_sq)
        seeds = _seeds(_summaries(x_all, off), is_ref, k)
        step = max(_PIECES, _PAIRS_PER_PIECE // count_items)
        for first in range(0, count_items, step):
            stop = min(count_items, first + step)
            parallel.run_pieces(lambda a, b: _items(a, b, seeds, *state), first, stop, _PIECES)
            checkpoint()
    if scale != 1.0:
        best_d = best_d / scale
    by_position = np.argsort(items, kind="stable")  # answer in input order
    counts = count[by_position]
    rows = np.repeat(by_position, counts)
    rank = np.arange(counts.sum()) - np.repeat(np.cumsum(counts) - counts, counts)
    return {
        "item": items[rows].astype(np.int64),
        "neighbor": items[best_j[rows, rank]].astype(np.int64),
        "distance": best_d[rows, rank],
        "rank": (rank + 1).astype(np.int64),
    }
