"""Monotonic trend: the Mann–Kendall test and Sen's slope, for a batch of series.

Time is the 0-based position of an element in its list, so a missing element
(NaN) is dropped but keeps the true spacing of the values around it.

One compiled pass per row does the work, in O(n log n) time for typical rows:

* S from one stable merge sort of the values that counts the pairs out of
  order (Knight [4]_), each merge run from both ends at once, on integers in
  the values' order; the tie groups for the variance are runs of the sorted
  values.
* Sen's slope by slope selection by counting: the number of pairwise slopes
  not above ``theta`` is the number of inversions of ``x_t - theta * t`` read
  in time order.  The counts at ``theta = 0`` are exact from the Mann–Kendall
  sort and settle a median of exactly 0 outright.  A fixed sample of pair
  slopes (a seeded splitmix64 stream: the same pairs for every row of a
  length, drawn once per row length) estimates the count at any slope, the
  idea of sampling and then counting of Matoušek [5]_ and Dillencourt, Mount
  and Netanyahu [6]_.  Anchored at the exact counts at 0 (the sampled slopes
  between 0 and a point estimate the count there, so the error shrinks with
  that distance), it aims the first count at the middle ranks; then secant
  steps through the last two exact counts (the count grows smoothly with
  ``theta`` over many slopes: each step cuts the error to a few per cent)
  until the middle ranks should lie within a few dozen slopes, and the
  slopes of that window are listed outright (the last step below, from
  there).  A count near an order already sorted is an insertion sort from
  it, in O(n + the slopes between); a count farther away a merge sort.
  Should the steps not settle (many tied slopes, a cluster within rounding
  distance), a bracket is narrowed from the start instead: the sampled
  median, a sampled slope just beyond the middle ranks on the other side,
  then points where linear interpolation of the counts puts the middle
  ranks, until the two ends hold about ``2n`` slopes.  Last, an insertion
  sort carries an order sorted on one side of a window (below or above it)
  to the other side: its exchanges are exactly the pairs whose slope lies
  between, and the middle ones are selected from those.  Sorts compare
  integers in the order of the doubles (``_ordered``).  A rounding margin
  makes the counts exact in floating point (see ``_final``), so the answer
  equals the median of the slopes as ``scipy.stats.theilslopes`` computes
  them.  Only when more than ``_K_FINAL`` slopes lie within rounding
  distance of the median (a long series on a straight line, say) is the
  answer one of those slopes instead, exact when they are tied exactly.
  The sample only decides where to count: the answer never depends on it
  otherwise.

Rows with at most ``PAIRWISE_MAX`` present values list all their slopes.

References
----------
.. [1] Mann, H. B. (1945). Nonparametric tests against trend. Econometrica
   13(3), 245-259.
.. [2] Kendall, M. G. (1975). Rank Correlation Methods, 4th ed. Griffin, London.
.. [3] Sen, P. K. (1968). Estimates of the regression coefficient based on
   Kendall's tau. Journal of the American Statistical Association 63(324),
   1379-1389.
.. [4] Knight, W. R. (1966). A computer method for calculating Kendall's tau
   with ungrouped data. Journal of the American Statistical Association
   61(314), 436-439.
.. [5] Matoušek, J. (1991). Randomized optimal algorithm for slope selection.
   Information Processing Letters 39(4), 183-187.
.. [6] Dillencourt, M. B., Mount, D. M., Netanyahu, N. S. (1992). A randomized
   algorithm for slope selection. Int. J. Computational Geometry &
   Applications 2(1), 1-27.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit
from scipy.special import erfc

from tsql.kernels.cancel import checkpoint
from tsql.kernels.ragged import Ragged, full

__all__ = ["trend_test", "PAIRWISE_MAX"]

#: Rows with at most this many present values list all their slopes.
PAIRWISE_MAX = 48

_EPS = 2.0**-53  # unit roundoff of float64
_TINY = 1e-300
_K_FINAL = 4_000_000  # most slopes a single row may list in its final step
_MAX_ROUNDS = 200
_FIRST_SAMPLE = 256  # sampled slopes that aim the first count
_RUN = 4  # runs sorted by insertion before merging
_PIECE = 1 << 20  # present values per compiled call; a checkpoint between calls
_SPECULATE = 2  # a round lists its window outright when it should hold at most this many slopes per value
_SECANT = 30  # most secant steps before the bracketing rounds


# --------------------------------------------------------------------------- #
# sorting that counts
# --------------------------------------------------------------------------- #


@njit(cache=True, nogil=True, inline="always")
def _at(i):
    """An index known not to be negative, as unsigned: the access skips the
    code that wraps negative indices around (a quarter of a merge step)."""
    return np.uint64(i)


@njit(cache=True, nogil=True, inline="always")
def _exchange(ka, kb, ia, ib):
    """Two neighbours in order, without a branch, and whether they were not."""
    out = kb < ka
    return (kb, ka, ib, ia, 1) if out else (ka, kb, ia, ib, 0)


@njit(cache=True, nogil=True)
def _sort_count(key, idx, work_key, work_idx):
    """Stable merge sort of ``key`` carrying ``idx``, in place; returns the
    number of pairs ``p < q`` with ``key[p] > key[q]`` (Knight 1966)."""
    n = len(key)
    inv = 0
    whole = n - n % _RUN
    for s in range(0, whole, _RUN):
        # runs of four by odd-even transposition in registers, branch-free: exchanges of neighbours out
        # of order (as insertion makes them: stable, one per inversion)
        k0, k1, k2, k3 = key[_at(s)], key[_at(s + 1)], key[_at(s + 2)], key[_at(s + 3)]
        i0, i1, i2, i3 = idx[_at(s)], idx[_at(s + 1)], idx[_at(s + 2)], idx[_at(s + 3)]
        for _ in range(2):
            k0, k1, i0, i1, c01 = _exchange(k0, k1, i0, i1)
            k2, k3, i2, i3, c23 = _exchange(k2, k3, i2, i3)
            k1, k2, i1, i2, c12 = _exchange(k1, k2, i1, i2)
            inv += c01 + c23 + c12
        key[_at(s)], key[_at(s + 1)], key[_at(s + 2)], key[_at(s + 3)] = k0, k1, k2, k3
        idx[_at(s)], idx[_at(s + 1)], idx[_at(s + 2)], idx[_at(s + 3)] = i0, i1, i2, i3
    for s in range(whole, n, _RUN):
        e = min(s + _RUN, n)
        for p in range(s + 1, e):
            k, v, q = key[p], idx[p], p
            while q > s and key[q - 1] > k:
                key[q], idx[q] = key[q - 1], idx[q - 1]
                q -= 1
            inv += p - q
            key[q], idx[q] = k, v
    moved = False
    width = _RUN
    while width < n:
        if moved:
            inv += _merges(work_key, work_idx, key, idx, width)
        else:
            inv += _merges(key, idx, work_key, work_idx, width)
        moved = not moved
        width *= 2
    if moved:
        key[:] = work_key
        idx[:] = work_idx
    return inv


@njit(cache=True, nogil=True)
def _merges(src_k, src_i, dst_k, dst_i, width):
    """One level of the merge sort: the sorted runs of ``width`` of ``src``
    merged in pairs into ``dst``; returns the pairs put in order.  A merge
    of two runs of one length fills the front and the back at once: two
    chains of work that do not wait on each other."""
    n = len(src_k)
    inv = 0
    for s in range(0, n, 2 * width):
        mid, end = min(s + width, n), min(s + 2 * width, n)
        if end - mid == width:  # runs of one length: from both ends at once
            a, b, o, a2, b2, o2 = s, mid, s, mid - 1, end - 1, end - 1
            for _ in range(width):  # neither end runs out: each side takes half
                right = np.int64(src_k[_at(b)] < src_k[_at(a)])  # no branches on the data
                src = _at(a + right * (b - a))
                dst_k[_at(o)], dst_i[_at(o)] = src_k[src], src_i[src]
                inv += right * (mid - a)
                a += 1 - right
                b += right
                o += 1
                left = np.int64(src_k[_at(a2)] > src_k[_at(b2)])
                src = _at(b2 + left * (a2 - b2))
                dst_k[_at(o2)], dst_i[_at(o2)] = src_k[src], src_i[src]
                inv += (1 - left) * (mid - 1 - a2)  # the right one passes the left ones after a2
                a2 -= left
                b2 -= 1 - left
                o2 -= 1
            continue
        a, b, o = s, mid, s
        while a < mid and b < end:
            right = np.int64(src_k[_at(b)] < src_k[_at(a)])
            src = _at(a + right * (b - a))
            dst_k[_at(o)], dst_i[_at(o)] = src_k[src], src_i[src]
            inv += right * (mid - a)
            a += 1 - right
            b += right
            o += 1
        dst_k[o:end] = src_k[a:mid] if a < mid else src_k[b:end]
        dst_i[o:end] = src_i[a:mid] if a < mid else src_i[b:end]
    return inv


@njit(cache=True, nogil=True)
def _ordered(key):
    """The doubles ``key`` (not NaN) turned in place into integers in their
    order, -0.0 and 0.0 alike; returns them (``key`` viewed as int64).
    Sorts compare integers: a shorter step on a merge's critical path, and
    an insertion learns sooner where an element stops."""
    for p in range(len(key)):
        key[p] += 0.0  # -0.0 becomes 0.0
    bits = key.view(np.int64)
    for p in range(len(key)):
        b = bits[p]
        bits[p] = b ^ ((b >> 63) & 0x7FFFFFFFFFFFFFFF)  # negative doubles: magnitude bits reversed
    return bits


@njit(cache=True, nogil=True)
def _keys(theta, u, tau, idx, key):
    """``u - theta * tau`` in the order ``idx``, into ``key`` as ``_ordered``
    integers (returned)."""
    for p in range(len(idx)):
        e = _at(idx[p])
        key[p] = u[e] - theta * tau[e]
    return _ordered(key)


def _inversions(perm: np.ndarray) -> np.ndarray:
    """Per row of ``perm``, the number of pairs ``p < q`` with ``perm[p] > perm[q]``."""
    out = np.empty(len(perm), dtype=np.int64)
    for r, row in enumerate(perm):
        key = _ordered(np.array(row, dtype=np.float64))
        idx = np.arange(len(key), dtype=np.int64)
        out[r] = _sort_count(key, idx, np.empty_like(key), np.empty_like(idx))
    return out


# --------------------------------------------------------------------------- #
# Sen's slope by counting
# --------------------------------------------------------------------------- #


@njit(cache=True, nogil=True)
def _splitmix(state):
    """One step of splitmix64: the next state and a 64-bit output."""
    state = (state + np.uint64(0x9E3779B97F4A7C15)) & np.uint64(0xFFFFFFFFFFFFFFFF)
    z = state
    z = (z ^ (z >> np.uint64(30))) * np.uint64(0xBF58476D1CE4E5B9)
    z = (z ^ (z >> np.uint64(27))) * np.uint64(0x94D049BB133111EB)
    return state, z ^ (z >> np.uint64(31))


@njit(cache=True, nogil=True)
def _sample_pairs(n, pairs):
    """The sampled pairs ``i < j`` of a row of ``n`` present values, from a
    splitmix64 stream seeded by ``n``: the same pairs for every row of a
    length.  Fills ``pairs`` (rows ``(i, j)``) and returns how many."""
    s = min(n * (n - 1) // 2, max(1024, n))
    state = np.uint64(n)
    for q in range(s):
        state, r1 = _splitmix(state)
        state, r2 = _splitmix(state)
        i = np.int64(r1 % np.uint64(n))
        j = np.int64(r2 % np.uint64(n - 1))
        if j >= i:
            j += 1
        pairs[q, 0], pairs[q, 1] = min(i, j), max(i, j)
    return s


@njit(cache=True, nogil=True)
def _select(v, k):
    """Reorder ``v`` in place so that ``v[k]`` is its ``k``-th smallest
    (0-based), none larger before it and none smaller after; returns it.
    Hoare's partition around a median of three (no sorting routine: a short
    compile), his exchanges made without his data-dependent branches: his
    left scan stops, in turn, at the positions whose value is not below the
    pivot, his right one at those whose value is not above it, so both lists
    are made first, branch-free, and the ``q``-th exchange swaps the ``q``-th
    of each until they cross (as ``changepoint._select``)."""
    n = len(v)
    left = np.empty(n, dtype=np.int64)
    right = np.empty(n, dtype=np.int64)
    lo, hi = 0, n - 1
    while lo < hi:
        a, b, c = v[lo], v[(lo + hi) // 2], v[hi]
        pivot = max(min(a, b), min(max(a, b), c))
        n_left = 0
        for i in range(lo, hi + 1):
            left[n_left] = i
            n_left += not (v[i] < pivot)
        n_right = 0
        for j in range(hi, lo - 1, -1):
            right[n_right] = j
            n_right += not (v[j] > pivot)
        q = 0
        while q < n_left and q < n_right and left[q] <= right[q]:
            i, j = left[q], right[q]
            v[i], v[j] = v[j], v[i]
            q += 1
        if q == 0:
            i, j = left[0], right[0]
        else:  # after the last exchange the scans run again only if the ends have not met
            i, j = left[q - 1] + 1, right[q - 1] - 1
            if i <= j:  # i..j are as they were; each scan stops at the latest on a value just exchanged
                end_i, end_j = j + 1, i - 1
                i = left[q] if q < n_left and left[q] < end_i else end_i
                j = right[q] if q < n_right and right[q] > end_j else end_j
        if k <= j:
            hi = j
        elif k >= i:
            lo = i
        else:
            break
    return v[k]


@njit(cache=True, nogil=True)
def _kth(values, count, k):
    """The ``k``-th smallest (0-based) of ``values[:count]`` and the next one
    up (``values`` is reordered)."""
    v = values[:count]
    lower = _select(v, k)
    upper = np.inf
    for p in range(k + 1, count):
        upper = min(upper, v[p])
    return lower, upper


@njit(cache=True, nogil=True)
def _delta(umax, tmax, theta_abs):
    """Rounding margin at |theta|: a slope farther than this from theta is
    classified correctly by comparing computed ``u - theta * tau`` values.

    |computed y - exact y| <= 2.0001 eps (umax + |theta| tmax) per element
    and a computed slope is within 4.0002 eps umax of the exact ratio; the
    factor 16 doubles the sum of both.
    """
    return 16 * _EPS * (umax + theta_abs * tmax) + _TINY


@njit(cache=True, nogil=True)
def _recount(theta, u, tau, idx, key, count):
    """Sort the order ``idx`` (inversion count ``count``) by ``u - theta * tau``
    by insertion, in O(n + exchanges); returns the new inversion count."""
    n = len(idx)
    ik = _keys(theta, u, tau, idx, key)
    last = ik[0]  # the largest key so far, kept out of memory just written
    for p in range(1, n):
        k = ik[_at(p)]
        if last <= k:
            last = k
            continue
        e, q = idx[_at(p)], p
        while q > 0 and ik[_at(q - 1)] > k:
            f = idx[_at(q - 1)]
            ik[_at(q)], idx[_at(q)] = ik[_at(q - 1)], f
            q -= 1
            count += 2 * (f < e) - 1  # f was before e: the pair becomes inverted
        ik[_at(q)], idx[_at(q)] = k, e
    return count


@njit(cache=True, nogil=True)
def _resort(theta, u, tau, idx, key, count, x, t, r_lo, r_hi):
    """Sort the order ``idx`` (inversion count ``count``) by ``u - theta * tau``
    by insertion, in O(n + exchanges), as ``_recount``; returns the new
    inversion count and, per exchanged pair (each pair whose order changes,
    once): how many were inverted before, how many have a slope <= ``r_lo``
    and the slopes in ``(r_lo, r_hi]`` (as theilslopes computes them)."""
    n = len(idx)
    ik = _keys(theta, u, tau, idx, key)
    only_before = 0
    below = 0
    found = np.empty(256)
    nfound = 0
    last = ik[0]
    for p in range(1, n):
        k = ik[_at(p)]
        if last <= k:
            last = k
            continue
        e, q = idx[_at(p)], p
        while q > 0 and ik[_at(q - 1)] > k:
            f = idx[_at(q - 1)]
            ik[_at(q)], idx[_at(q)] = ik[_at(q - 1)], f
            q -= 1
            count += 2 * (f < e) - 1  # f was before e: the pair becomes inverted
            i, j = _at(min(e, f)), _at(max(e, f))
            only_before += f > e
            sl = (x[j] - x[i]) / (t[j] - t[i])
            below += sl <= r_lo
            found[_at(nfound)] = sl  # kept when inside the window, without a branch
            nfound += (sl > r_lo) & (sl <= r_hi)
            if nfound == len(found):
                grown = np.empty(2 * len(found))
                grown[:nfound] = found
                found = grown
        ik[_at(q)], idx[_at(q)] = k, e
    return count, only_before, below, found, nfound


@njit(cache=True, nogil=True)
def _all_pairs(x, t, buf):
    """Median of all pairwise slopes (theilslopes' arithmetic)."""
    n = len(x)
    c = np.int64(0)  # not a literal 0: _kth compiles once
    for i in range(n - 1):
        for j in range(i + 1, n):
            buf[c] = (x[j] - x[i]) / (t[j] - t[i])
            c += 1
    k1 = (c - 1) // 2
    lower, upper = _kth(buf, c, k1)
    return (lower + upper) / 2 if c % 2 == 0 else lower


@njit(cache=True, nogil=True)
def _start(x, span, disc, ties, order0, k1, k2, br, bc, order_lo, order_hi):
    """The first bracket: 0 and its order (from ``order0``) on the side the
    middle ranks are not, else the far ends; every slope lies in
    [-span, span], and far outside the order is time order."""
    n = len(x)
    br[0], br[1], bc[0], bc[1] = -(2 * span + 1), 2 * span + 1, 0, n * (n - 1) // 2
    for p in range(n):
        order_lo[p] = p
        order_hi[p] = n - 1 - p
    if disc + ties < k1:  # the order at 0 with ties reversed: slopes <= 0 inverted
        br[0], bc[0] = 0.0, disc + ties
        a = 0
        while a < n:
            b = a
            while b + 1 < n and x[order0[b + 1]] == x[order0[a]]:
                b += 1
            for p in range(b - a + 1):
                order_lo[a + p] = order0[b - p]
            a = b + 1
    elif disc >= k2:
        br[1], bc[1] = 0.0, disc
        order_hi[:] = order0


@njit(cache=True, nogil=True, inline="always")  # one call site: no library of its own
def _sen(x, t, disc, ties, order0, k_final, speculate, secant, fw, iw, sample_buf, pairs):
    """Exact median pairwise slope of one row by counting and selection.

    ``disc`` and ``disc + ties`` are the exact numbers of slopes < 0 and
    <= 0, ``order0`` the values' stable order (the order of ``x - 0 * t``);
    ``pairs`` the sampled pairs (``_sample_pairs``), ``w`` holds work space
    (see ``_rows``).  Returns the slope, or NaN when
    the exact selection failed (which the rounding margin rules out).

    First secant steps on exact counts aimed by the sample (at most
    ``secant``; see the module docstring); failing those, bracketing rounds
    from the start.  The bracket ``(lo, hi]`` holds the two middle ranks: the
    count of slopes at ``lo`` is below ``k1``, the one at ``hi`` at least
    ``k2``, each within the rounding margin of exact.  The sorted orders at
    both ends are kept: a count at a point near one of them is an insertion
    sort from it, in time O(n + the slopes between), a count farther away a
    merge sort.
    """
    n = len(x)
    N = n * (n - 1) // 2
    k1, k2 = (N + 1) // 2, N // 2 + 1  # 1-based ranks of the middle slopes
    if disc < k1 and disc + ties >= k2:
        return 0.0
    u, tau = fw[0, :n], fw[1, :n]
    order_lo, order_hi = iw[2, :n], iw[3, :n]
    xmin, xmax = x[0], x[0]
    for p in range(n):  # one pass, without the NaN checks of x.min() and x.max() (there is none)
        xmin, xmax = min(xmin, x[p]), max(xmax, x[p])
    c = 0.5 * xmin + 0.5 * xmax
    t0 = 0.5 * (t[0] + t[n - 1])
    umax, tmax = 0.0, 0.0
    for p in range(n):
        u[p] = x[p] - c
        tau[p] = t[p] - t0
        umax = max(umax, abs(u[p]))
        tmax = max(tmax, abs(tau[p]))
    br, bc = np.empty(2), np.empty(2, dtype=np.int64)  # the bracket's ends and their counts
    _start(x, xmax - xmin, disc, ties, order0, k1, k2, br, bc, order_lo, order_hi)
    # a fixed sample of pair slopes estimates the count at any slope
    sample = sample_buf[: len(pairs)]
    s = len(sample)
    s1 = min(s, _FIRST_SAMPLE)  # the secant steps need only a first part of it
    for q in range(s1):
        i, j = pairs[q, 0], pairs[q, 1]
        sample[q] = (x[j] - x[i]) / (t[j] - t[i])
    # the exact counts at 0 anchor the sample: the sampled slopes between 0
    # and a point estimate the count there; then secant steps through the
    # last two exact counts, until a narrow window about the middle ranks
    # can be listed outright
    below0, upto0 = 0, 0
    for q in range(s1):
        below0 += sample[q] < 0.0
        upto0 += sample[q] <= 0.0
    target = 0.5 * (k1 + k2)
    if disc >= k2:  # the count at 0 is the order0's, ties not inverted
        theta_a, count_a = 0.0, float(disc)
        rank = below0 + (target - disc) * s1 / N
    else:
        theta_a, count_a = 0.0, float(disc + ties)
        rank = upto0 + (target - disc - ties) * s1 / N
    theta = _select(sample[:s1], min(s1 - 1, max(0, int(rank))))
    if not (br[0] < theta < br[1]):
        theta = br[0] + (br[1] - br[0]) * ((target - bc[0]) / (bc[1] - bc[0]))
    theta_b, count_b = theta, float(_probe(theta, target, br, bc, k1, k2, x, t, fw, iw))
    best, stuck = np.inf, 0
    for _ in range(secant):
        e = abs(count_b - target)
        stuck = 0 if e < best / 1.5 else stuck + 1
        if stuck == 2 or count_b == count_a:  # not converging: the rounds below
            break
        best = min(best, e)
        g = (theta_b - theta_a) / (count_b - count_a)
        if e <= n / 4 and g > 0:  # list the window where the secant puts the middle ranks
            h = 0.5 * e + 16 + 0.5 * (k2 - k1)
            p1, p2 = max(br[0], theta_b + (target - h - count_b) * g), min(br[1], theta_b + (target + h - count_b) * g)
            got = np.nan
            if count_b < target and theta_b < p2:  # from the last count's order straight on
                d = _delta(umax, tmax, max(abs(theta_b), abs(p2)))
                cb = int(count_b)
                got = _listed(x, t, u, tau, theta_b, p2, cb, theta_b + d, p2 - d, k1, k2, iw[0, :n], fw[2, :n])
            elif p1 < p2:
                got = _final(x, t, u, tau, umax, tmax, p1, p2, theta_b, int(count_b), k1, k2, iw[0, :n], fw[2, :n])
            if not np.isnan(got):
                return got
            break
        theta = theta_b + (target - count_b) * g
        if not (br[0] < theta < br[1]):
            break
        theta_a, count_a = theta_b, count_b
        theta_b, count_b = theta, float(_probe(theta, target, br, bc, k1, k2, x, t, fw, iw))
    # not settled so: from the first bracket again, the sampled median, then
    # a sampled slope beyond the middle ranks on the other side, by the
    # sample's error at that distance, doubled each time it falls short
    _start(x, xmax - xmin, disc, ties, order0, k1, k2, br, bc, order_lo, order_hi)
    for q in range(s1, s):
        i, j = pairs[q, 0], pairs[q, 1]
        sample[q] = (x[j] - x[i]) / (t[j] - t[i])
    rank = min(s - 1, int(s * (k1 - 0.5) / N))
    theta = _select(sample, rank)
    c = _probe(theta, float(k1), br, bc, k1, k2, x, t, fw, iw)
    z = 2.0
    for _ in range(8):
        if bc[1] - bc[0] <= n + 64:
            break
        if c >= k1 and c < k2:  # between the middle ranks: no side
            break
        gap = (k2 - c if c < k1 else c - k1) * s / N
        step = int(math.ceil(gap + z * math.sqrt(gap) + 2))
        rank = rank + step if c < k1 else rank - step
        if rank < 0 or rank >= s:
            break
        theta = _select(sample, rank)
        if not (br[0] < theta < br[1]):
            break
        c = _probe(theta, N * (rank + 0.5) / s, br, bc, k1, k2, x, t, fw, iw)
        z *= 2
    first = True
    kprev = np.inf
    for _ in range(_MAX_ROUNDS):
        lo, hi, clo, chi = br[0], br[1], bc[0], bc[1]
        K = chi - clo
        d = _delta(umax, tmax, max(abs(lo), abs(hi)))
        tiny = hi - lo <= 8 * d
        stalled = kprev < 1.5 * K
        if K <= n + 64 or ((stalled or tiny) and K <= k_final):
            return _final(x, t, u, tau, umax, tmax, lo, hi, lo, clo, k1, k2, order_lo, fw[2, :n])
        if tiny:  # a cluster: one sampled slope in it
            m = 0
            for q in range(s):  # the sampled slopes in [lo - d, hi + d), to their middle one
                if lo - d <= sample[q] < hi + d:
                    sample[m] = sample[q]
                    m += 1
            return _select(sample[:m], (m - 1) // 2) if m > 0 else 0.5 * (lo + hi)
        # two points where linear interpolation of the counts puts the middle
        # ranks, widened by its expected error; a stalled bracket is cut in thirds
        gamma = 0.06 if first else 0.005
        h = gamma * K + 2.5 * math.sqrt(K) + 4
        ca, cb = max(k1 - h, clo), min(k2 + h, chi)
        p1, e1 = lo + (hi - lo) * ((ca - clo) / K), ca
        p2, e2 = lo + (hi - lo) * ((cb - clo) / K), cb
        if stalled:
            p1, e1 = lo + (hi - lo) / 3, clo + K / 3
            p2, e2 = hi - (hi - lo) / 3, chi - K / 3
        elif e2 - e1 <= speculate * n and lo < p1 < p2 < hi:
            # list the slopes between p1 and p2 straight away, from the nearer
            # end's order (a copy): exact when the middle ranks lie between
            lower = e1 - clo <= chi - e1
            trial = iw[1, :n]
            trial[:] = order_lo if lower else order_hi
            start, count_s = (lo, clo) if lower else (hi, chi)
            got = _final(x, t, u, tau, umax, tmax, p1, p2, start, count_s, k1, k2, trial, fw[2, :n])
            if not np.isnan(got):
                return got
        if br[0] < p1 < br[1]:
            _probe(p1, e1, br, bc, k1, k2, x, t, fw, iw)
        if br[0] < p2 < br[1]:
            _probe(p2, e2, br, bc, k1, k2, x, t, fw, iw)
        kprev = K
        first = False
    return np.nan


@njit(cache=True, nogil=True)
def _probe(theta, expect, br, bc, k1, k2, x, t, fw, iw):
    """Count the slopes <= theta (within the rounding margin) and tighten the
    bracket ``br`` (ends) / ``bc`` (their counts); ``expect`` is the count
    expected there.  By insertion from the nearer end's order when few
    slopes should lie between, else by a merge sort."""
    n = len(x)
    u, tau, key, idx = fw[0, :n], fw[1, :n], fw[2, :n], iw[0, :n]
    order_lo, order_hi = iw[2, :n], iw[3, :n]
    from_lo, from_hi = expect - bc[0], bc[1] - expect
    if min(from_lo, from_hi) <= 12 * n + 256:  # about what a merge sort costs, now that it compares integers
        lower = from_lo <= from_hi
        idx[:] = order_lo if lower else order_hi
        c = _recount(theta, u, tau, idx, key, bc[0] if lower else bc[1])
    else:
        for p in range(n):
            idx[p] = p
        c = _sort_count(_keys(theta, u, tau, idx, key), idx, iw[4, :n], iw[1, :n])
    if c < k1:
        br[0], bc[0] = theta, c
        order_lo[:] = idx
    elif c >= k2:
        br[1], bc[1] = theta, c
        order_hi[:] = idx
    return c


@njit(cache=True, nogil=True)
def _final(x, t, u, tau, umax, tmax, lo, hi, theta_s, count_s, k1, k2, order_s, key):
    """Select the middle slopes from those between the bracket ends ``lo``
    and ``hi``, starting from ``order_s``, sorted at ``theta_s`` (its
    inversion count ``count_s``).

    With a = lo - 3 d0 and b = hi + 3 d0 (d0 the rounding margin at the
    bracket), the order is sorted at b by insertion, from ``theta_s`` when
    that lies outside (a, b), else from a (one insertion more).  Let d be the
    margin at a and b: a pair whose computed slope is farther than d from a
    (resp. b) is ordered at a (b) as its slope says, so every slope in
    R = (a + d, b - d] is exchanged on the way, and the exact number of
    slopes <= a + d is the count at the start, less the exchanged pairs
    inverted there, plus the exchanged slopes <= a + d.  The counts at lo
    and hi are within d0 of exact, so the middle ranks lie in R.
    """
    d0 = _delta(umax, tmax, max(abs(lo), abs(hi)))
    a, b = lo - 3 * d0, hi + 3 * d0
    d = _delta(umax, tmax, max(abs(a), abs(b)))
    if a < theta_s < b:
        theta_s, count_s = a, _recount(a, u, tau, order_s, key, count_s)
    end = a if theta_s >= b else b
    return _listed(x, t, u, tau, theta_s, end, count_s, a + d, b - d, k1, k2, order_s, key)


@njit(cache=True, nogil=True)
def _listed(x, t, u, tau, start, end, count_s, r_lo, r_hi, k1, k2, order_s, key):
    """The middle slopes from those exchanged on the way from ``start`` to
    ``end`` (``order_s`` sorted at ``start``, its inversion count
    ``count_s``), or NaN when they are not among them (see ``_final``).
    The window ``(r_lo, r_hi]`` lies between the two, at least the rounding
    margin inside each: every slope in it is exchanged."""
    _, only_s, below, found, nr = _resort(end, u, tau, order_s, key, count_s, x, t, r_lo, r_hi)
    base = count_s - only_s + below
    l1, l2 = k1 - base, k2 - base  # 1-based ranks inside the window
    if l1 < 1 or l2 > nr:
        return np.nan
    lower, upper = _kth(found, nr, l1 - 1)
    return lower if l2 == l1 else (lower + upper) / 2


@njit(cache=True, nogil=True)
def _rows(values, offsets, rows, pairwise_max, k_final, speculate, secant, counts, S, t2, t3, slope):
    """Mann–Kendall S, tie sums and Sen's slope for ``rows`` of the flat
    ``values`` (row ``r`` is ``values[offsets[r] : offsets[r + 1]]``; NaN is
    missing).  ``counts`` gets each row's number of present values, or -1
    for a row holding an infinite value (no answer)."""
    longest = 1
    for r in rows:
        longest = max(longest, offsets[r + 1] - offsets[r])
    xb, tb = np.empty(longest), np.empty(longest)
    fw = np.empty((3, longest))  # u, tau, key
    iw = np.empty((5, longest), dtype=np.int64)  # order, its merge work, order at lo, order at hi, the keys' merge work
    sample = np.empty(max(1024, longest))
    pairs = np.empty((max(1024, longest), 2), dtype=np.int64)
    pairs_of, npairs_sampled = -1, 0  # the length the pairs were drawn for
    order0 = np.empty(longest, dtype=np.int64)
    pair_buf = np.empty(pairwise_max * (pairwise_max - 1) // 2 if pairwise_max > 1 else 0)
    for r in rows:
        n = 0
        for p in range(offsets[r], offsets[r + 1]):
            v = values[p]
            if np.isinf(v):
                n = -1
                break
            xb[n], tb[n] = v, p - offsets[r]  # kept when present (keeps its position as time), no branch
            n += not np.isnan(v)
        counts[r] = n
        if n < 3:
            continue
        x, t = xb[:n], tb[:n]
        iv = iw[0, :n]
        fw[2, :n] = x
        kv = _ordered(fw[2, :n])
        for p in range(n):
            iv[p] = p
        disc = _sort_count(kv, iv, iw[4, :n], iw[1, :n])
        tie2, tie3 = 0, 0
        a = 0
        while a < n:  # tie groups: runs of the sorted values
            b = a + 1
            while b < n and kv[b] == kv[a]:
                b += 1
            g = b - a
            tie2 += g * (g - 1) // 2
            tie3 += g * (g - 1) * (2 * g + 5)
            a = b
        npairs = n * (n - 1) // 2
        S[r] = npairs - tie2 - 2 * disc
        t2[r], t3[r] = tie2, tie3
        if tie2 >= npairs:
            continue
        if n <= pairwise_max:
            slope[r] = _all_pairs(x, t, pair_buf)
            continue
        order0[:n] = iv
        if n != pairs_of:
            pairs_of, npairs_sampled = n, _sample_pairs(n, pairs)
        slope[r] = _sen(
            x, t, disc, tie2, order0[:n], k_final, speculate, secant, fw, iw, sample, pairs[:npairs_sampled]
        )
    return 0


def _fall_back(values, offsets, counts, rows, t2, slope) -> None:
    """All pairs for a row whose exact selection failed (ruled out by the
    rounding margin, kept as a guard)."""
    for r in rows[np.isnan(slope[rows]) & (t2[rows] < counts[rows] * (counts[rows] - 1) // 2)]:
        row = values[offsets[r] : offsets[r + 1]]
        t = np.flatnonzero(~np.isnan(row)).astype(np.float64)
        x = row[~np.isnan(row)]
        n = len(x)
        if n * (n - 1) // 2 > _K_FINAL * 8:
            raise RuntimeError("trend_test: exact slope selection failed")
        slope[r] = _all_pairs(x, t, np.empty(n * (n - 1) // 2))


# --------------------------------------------------------------------------- #
# public entry point
# --------------------------------------------------------------------------- #


def trend_test(batch: Ragged) -> dict[str, np.ndarray]:
    """Mann–Kendall trend test with Sen's slope, one answer per row.

    Parameters
    ----------
    batch : Ragged
        Series in time order; NaN elements are missing and are dropped, the
        others keep their 0-based position as time.

    Returns
    -------
    dict of str to ndarray
        ``tau``: Kendall's tau-b between time and value,
        ``S / sqrt(n0 (n0 - n2))`` with ``n0 = n(n-1)/2`` and
        ``n2 = sum t(t-1)/2`` over groups of tied values (time has no ties), so
        it equals ``scipy.stats.kendalltau(time, x).statistic``.
        ``p_value``: two-sided p of Mann's S with the tie-corrected variance
        ``[n(n-1)(2n+5) - sum t(t-1)(2t+5)] / 18`` and a continuity correction,
        ``z = (S - sign(S)) / sqrt(Var S)``, ``p = 2 (1 - Phi(|z|))``.
        ``slope``: Sen's slope, the exact median of ``(x_j - x_i) / (j - i)``
        over pairs of present values, per unit of position.
        All three are NaN for a NULL row, fewer than three present values, a
        constant series, or a row holding an infinite value.

    Notes
    -----
    S is counted by a merge sort (Knight [4]_), Sen's slope [3]_ selected by
    counting slopes below trial values (slope selection, [5]_, [6]_), in
    O(n log n) time per row for typical series; see the module docstring.
    The heavy part runs in compiled code without the GIL.

    References
    ----------
    .. [1] Mann, H. B. (1945). Econometrica 13(3), 245-259.
    .. [2] Kendall, M. G. (1975). Rank Correlation Methods, 4th ed.
    .. [3] Sen, P. K. (1968). JASA 63(324), 1379-1389.
    .. [4] Knight, W. R. (1966). JASA 61(314), 436-439.
    .. [5] Matoušek, J. (1991). Information Processing Letters 39(4), 183-187.
    .. [6] Dillencourt, M. B., Mount, D. M., Netanyahu, N. S. (1992).
       Int. J. Computational Geometry & Applications 2(1), 1-27.

    See Also
    --------
    scipy.stats.kendalltau, scipy.stats.theilslopes : the same tau and slope
        for one series (theilslopes lists all n(n-1)/2 slopes).

    Examples
    --------
    >>> r = trend_test(Ragged.from_list([[1.0, 2.0, 4.0, 3.0, 5.0]]))
    >>> float(r["tau"][0]), float(r["slope"][0])
    (0.8, 1.0)
    """
    n_rows = batch.n_rows
    tau, p_value, slope = full(n_rows), full(n_rows), full(n_rows)
    values = np.ascontiguousarray(batch.values, dtype=np.float64)
    offsets = np.ascontiguousarray(batch.offsets, dtype=np.int64)
    lengths = np.diff(offsets)
    rows = np.flatnonzero(batch.row_valid & (lengths >= 3)).astype(np.int64)
    counts, S, t2, t3 = (np.zeros(n_rows, dtype=np.int64) for _ in range(4))
    done = np.cumsum(lengths[rows])
    begin = 0
    while begin < len(rows):  # pieces of about _PIECE values, a checkpoint between them
        stop = max(begin + 1, int(np.searchsorted(done, done[begin] - lengths[rows[begin]] + _PIECE, "right")))
        _rows(
            values,
            offsets,
            rows[begin:stop],
            int(PAIRWISE_MAX),
            int(_K_FINAL),
            int(_SPECULATE),
            int(_SECANT),
            counts,
            S,
            t2,
            t3,
            slope,
        )
        checkpoint()
        begin = stop
    rows = np.flatnonzero(counts >= 3)
    _fall_back(values, offsets, counts, rows, t2, slope)
    n = counts[rows]
    n0 = n * (n - 1) // 2
    live = t2[rows] < n0
    rows, n, n0 = rows[live], n[live], n0[live]
    S, t2, t3 = S[rows], t2[rows], t3[rows]
    nf = n.astype(np.float64)
    var = (nf * (n - 1) * (2 * n + 5) - t3.astype(np.float64)) / 18.0
    z = (S - np.sign(S)) / np.sqrt(var)
    tau[rows] = np.clip(S / np.sqrt(n0.astype(np.float64) * (n0 - t2).astype(np.float64)), -1.0, 1.0)
    p_value[rows] = erfc(np.abs(z) / np.sqrt(2.0))
    return {"tau": tau, "p_value": p_value, "slope": slope}
