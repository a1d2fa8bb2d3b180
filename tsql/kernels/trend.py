"""Monotonic trend: the Mann–Kendall test and Sen's slope, for a batch of series.

Time is the 0-based position of an element in its list, so a missing element
(NaN) is dropped but keeps the true spacing of the values around it.

Two routes share the work, chosen by the number ``n`` of present values in a
row (never by the rest of the batch, so a row's answer does not depend on the
rows it travels with):

* short rows (``n <= PAIRWISE_MAX``): all ``n(n-1)/2`` pairs of an equal-length
  bucket at once, S from their signs and the median by ``np.partition``;
* longer rows: O(n log n) counting.  S comes from one sort per row and an
  inversion count (Knight 1966).  The number of pairwise slopes not above
  ``theta`` is the number of inversions of ``x_t - theta * t`` read in time
  order, counted by a merge sort vectorised over the rows of a bucket.  The
  counts at ``theta = 0`` are exact from the Mann–Kendall pass and settle a
  median of exactly 0 outright.  A seeded sample of pair slopes gives a first
  bracket around the middle ranks and counts at interpolated points narrow it
  (the sample-then-count idea of Matousek 1991 and Dillencourt, Mount and
  Netanyahu 1992) until about ``2n`` slopes remain; those are listed as the
  pairs whose order differs between the bracket ends and the middle ones are
  selected.  A rounding margin makes the counts exact in floating point (see
  ``_final``), so the answer equals the median of the slopes as
  ``scipy.stats.theilslopes`` computes them.  Only when more than
  ``_K_FINAL`` slopes lie within rounding distance of the median (a series on
  a straight line, say) is the answer one of those slopes instead, exact
  when they are tied exactly.

References
----------
Mann, H. B. (1945). Nonparametric tests against trend. Econometrica 13(3), 245-259.
Kendall, M. G. (1975). Rank Correlation Methods, 4th ed. Griffin, London.
Sen, P. K. (1968). Estimates of the regression coefficient based on Kendall's
tau. Journal of the American Statistical Association 63(324), 1379-1389.
Knight, W. R. (1966). A computer method for calculating Kendall's tau with
ungrouped data. Journal of the American Statistical Association 61(314), 436-439.
Matousek, J. (1991). Randomized optimal algorithm for slope selection.
Information Processing Letters 39(4), 183-187.
Dillencourt, M. B., Mount, D. M., Netanyahu, N. S. (1992). A randomized
algorithm for slope selection. Int. J. Computational Geometry & Applications
2(1), 1-27.
"""

from __future__ import annotations

import numpy as np
from scipy.special import erfc

from tsql.kernels.ragged import Ragged, full

__all__ = ["trend_test", "PAIRWISE_MAX"]

#: Rows with at most this many present values take the all-pairs route.
PAIRWISE_MAX = 112

_EPS = 2.0**-53  # unit roundoff of float64
_TINY = 1e-300
_CHUNK_ELEMS = 1 << 18  # elements of a (rows x padded length) work matrix: smaller peaks memory lower, no slower
_PAIR_CHUNK = 1 << 22  # pair slopes held at once on the all-pairs route
_FINAL_BUDGET = 1 << 23  # pair slopes listed at once in the final step
_K_FINAL = 4_000_000  # most slopes a single row may list in its final step
_MAX_ROUNDS = 200


# --------------------------------------------------------------------------- #
# inversion counting (merge sort, vectorised over rows)
# --------------------------------------------------------------------------- #


def _padded(perm: np.ndarray, dtype) -> tuple[np.ndarray, int]:
    """Rows padded to a power of two with ever larger values (adds no inversion)."""
    m, n = perm.shape
    n2 = 1 << max(1, (n - 1).bit_length())
    key = np.empty((m, n2), dtype=dtype)
    key[:, :n] = perm
    key[:, n:] = np.arange(n, n2, dtype=dtype)
    return key, n2


_BLOCK = 8


def _block_sort(key: np.ndarray, pairs: bool):
    """Sort each run of ``_BLOCK`` elements in place by odd-even transposition.

    Every exchange swaps one adjacent inverted pair, and each inverted pair is
    swapped exactly once, so the exchanges count (or list) the inversions
    inside the blocks.
    """
    m, n2 = key.shape
    w = min(_BLOCK, n2)
    blocks = key.reshape(m, n2 // w, w)
    cols = [blocks[:, :, i].copy() for i in range(w)]
    count = np.zeros(m, dtype=np.int64)
    found = []
    for r in range(w):
        for i in range(r % 2, w - 1, 2):
            a, b = cols[i], cols[i + 1]
            swap = a > b
            if pairs:
                row = np.nonzero(swap)[0]
                found.append((row, a[swap], b[swap]))
            else:
                count += np.count_nonzero(swap, axis=1)
            cols[i], cols[i + 1] = np.minimum(a, b), np.maximum(a, b)
    blocks[...] = np.stack(cols, axis=2)
    return found if pairs else count


def _inversions(perm: np.ndarray) -> np.ndarray:
    """Per row, the number of pairs ``p < q`` with ``perm[p] > perm[q]``.

    ``perm`` holds distinct non-negative integers per row (a permutation).
    Blocks of eight are sorted by an exchange network; larger blocks are merged
    by sorting keys tagged with the half they come from, and the cross
    inversions follow from the merged positions of the right half.
    """
    m, n = perm.shape
    key, n2 = _padded(perm, np.int32 if n < (1 << 29) else np.int64)
    dtype = key.dtype.type
    total = _block_sort(key, pairs=False)
    key <<= 1
    b = min(_BLOCK, n2)
    while b < n2:
        nb = n2 // (2 * b)
        blocks = key.reshape(m, nb, 2 * b)
        blocks[:, :, b:] |= 1
        blocks.sort(axis=2)
        # right element r (0-based, in sorted order) at merged position p has
        # p - r left elements below it and b - (p - r) above it
        if n2 <= (1 << 15):  # the position sum fits in int32
            possum = ((key & 1) @ np.tile(np.arange(2 * b, dtype=dtype), nb)).astype(np.int64)
        else:
            per_pos = (blocks & 1).sum(axis=1, dtype=np.int64)
            possum = per_pos @ np.arange(2 * b, dtype=np.int64)
        total += nb * (b * b + b * (b - 1) // 2) - possum
        key &= ~dtype(1)
        b *= 2
    return total


def _inversion_pairs_merge(seq: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Every pair ``p < q`` with ``seq[p] > seq[q]``, as (row, seq[p], seq[q]).

    Same merge as ``_inversions``; at each merge the partners of a right
    element are a suffix of the sorted left half, and only blocks with cross
    inversions are visited.
    """
    m, n = seq.shape
    key, n2 = _padded(seq, np.int32 if n < (1 << 29) else np.int64)
    found = _block_sort(key, pairs=True)
    rows, big, small = [f[0] for f in found], [f[1] for f in found], [f[2] for f in found]
    b = min(_BLOCK, n2)
    while b < n2:
        nb = n2 // (2 * b)
        pre = key.ravel()
        key = key << 1
        blocks = key.reshape(m * nb, 2 * b)
        blocks[:, b:] |= 1
        blocks.sort(axis=1)
        bits = blocks & 1
        pos = np.arange(2 * b, dtype=np.int64)
        cross = b * b + b * (b - 1) // 2 - bits @ pos
        blk = np.flatnonzero(cross)
        if blk.size:
            sub, subbits = blocks[blk], bits[blk]
            below = pos - (np.cumsum(subbits, axis=1) - 1)  # left elements below
            cnt = np.where(subbits == 1, b - below, 0)
            bi, pi = np.nonzero(cnt)
            cs = cnt[bi, pi]
            start = blk[bi] * (2 * b) + below[bi, pi]  # first partner in ``pre``
            first = np.cumsum(cs) - cs
            idx = np.repeat(start - first, cs) + np.arange(int(cs.sum()))
            rows.append(np.repeat(blk[bi] // nb, cs))
            big.append(pre[idx])
            small.append(np.repeat(sub[bi, pi] >> 1, cs))
        key >>= 1
        b *= 2
    return (
        np.concatenate(rows).astype(np.int64),
        np.concatenate(big).astype(np.int64),
        np.concatenate(small).astype(np.int64),
    )


_NEAR = 32


def _inversion_pairs(seq: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Every pair ``p < q`` with ``seq[p] > seq[q]``, as (row, seq[p], seq[q]).

    In the final step the two orders are close, so most rows have all their
    inversions at a short distance; those are found by comparing elements
    ``e`` apart for growing ``e``, a row stopping once no element has a larger
    one more than ``e`` before it (prefix maxima).  Other rows use the merge.
    """
    m, n = seq.shape
    pmax = np.maximum.accumulate(seq, axis=1)
    cap = min(_NEAR, n - 1)
    near = np.ones(m, dtype=bool)
    if cap < n - 1:
        near = (pmax[:, : n - cap - 1] < seq[:, cap + 1 :]).all(axis=1)
    rows, big, small = [], [], []
    act = np.flatnonzero(near)
    S, P = seq[act], pmax[act]
    for e in range(1, cap + 1):
        if act.size == 0:
            break
        a, b = S[:, :-e], S[:, e:]
        r, p = np.nonzero(a > b)
        rows.append(act[r])
        big.append(a[r, p])
        small.append(b[r, p])
        if e < n - 1:
            go_on = ~(P[:, : n - e - 1] < S[:, e + 1 :]).all(axis=1)
            if not go_on.all():
                act, S, P = act[go_on], S[go_on], P[go_on]
    far = np.flatnonzero(~near)
    if far.size:
        r, b1, s1 = _inversion_pairs_merge(seq[far])
        rows.append(far[r])
        big.append(b1)
        small.append(s1)
    if not rows:
        empty = np.zeros(0, dtype=np.int64)
        return empty, empty, empty
    return tuple(np.concatenate(x).astype(np.int64) for x in (rows, big, small))


# --------------------------------------------------------------------------- #
# Mann–Kendall pieces
# --------------------------------------------------------------------------- #


def _tie_sums(sorted_rows: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Per row: sum of t(t-1)/2 and of t(t-1)(2t+5) over groups of tied values.

    With j the 0-based index of an element inside its group of t, the sums are
    sum(j) and sum(6 j^2 + 12 j) (since f(t) - f(t-1) = 6t^2 - 6).
    """
    m, n = sorted_rows.shape
    start = np.ones((m, n), dtype=bool)
    start[:, 1:] = sorted_rows[:, 1:] != sorted_rows[:, :-1]
    idx = np.arange(m * n, dtype=np.int64).reshape(m, n)
    first = np.maximum.accumulate(np.where(start, idx, 0).ravel()).reshape(m, n)
    j = idx - first
    return j.sum(axis=1), (6 * j * j + 12 * j).sum(axis=1)


def _mk_sorted(X: np.ndarray) -> tuple[np.ndarray, ...]:
    """Discordant pairs and tie sums by one sort per row.

    Returns the number of pairs i < j with x_j < x_i, the two tie sums, and
    the value order with ties in time order and in reverse time order: the
    orders of ``x - theta * t`` just below and just above ``theta = 0``.
    """
    m, n = X.shape
    order = np.argsort(X, axis=1)
    xs = np.take_along_axis(X, order, axis=1)
    t2, t3 = _tie_sums(xs)
    group = np.zeros((m, n), dtype=np.int64)
    np.cumsum(xs[:, 1:] != xs[:, :-1], axis=1, out=group[:, 1:])
    key = group * n + order
    key.sort(axis=1)
    below = key % n  # a tied pair is no inversion
    key = group * n + (n - 1 - order)
    key.sort(axis=1)
    above = n - 1 - key % n  # a tied pair is an inversion
    return _inversions(below), t2, t3, below, above


# --------------------------------------------------------------------------- #
# Sen's slope
# --------------------------------------------------------------------------- #


def _pairwise(X: np.ndarray, T: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """S and the median pairwise slope for a bucket of short rows (all pairs)."""
    m, n = X.shape
    npairs = n * (n - 1) // 2
    k1, k2 = (npairs - 1) // 2, npairs // 2  # 0-based middle order statistics
    S = np.zeros(m, dtype=np.int64)
    slope = np.empty(m)
    step = max(1, _PAIR_CHUNK // npairs)
    for lo in range(0, m, step):
        x, t = X[lo : lo + step], T[lo : lo + step]
        out = np.empty((len(x), npairs))
        s = np.zeros(len(x), dtype=np.int64)
        p = 0
        for d in range(1, n):
            diff = x[:, d:] - x[:, :-d]
            s += np.sign(diff).sum(axis=1).astype(np.int64)
            np.divide(diff, t[:, d:] - t[:, :-d], out=out[:, p : p + n - d])
            p += n - d
        part = np.partition(out, [k1, k2] if k2 != k1 else k1, axis=1)
        S[lo : lo + step] = s
        slope[lo : lo + step] = (part[:, k1] + part[:, k2]) / 2
    return S, slope


class _Rows:
    """Per-row data and bracket state of the counting route.

    The bracket ``(lo, hi]`` holds the two middle ranks ``k1 <= k2``: the
    computed count of slopes at ``lo`` is below ``k1`` and the one at ``hi`` is
    at least ``k2``.  A computed count ``c`` at ``theta`` lies between the exact
    counts at ``theta - d`` and ``theta + d`` (``d`` from ``delta``).  The
    orders of ``u - theta * tau`` at the bracket ends are kept so that the
    final step need not sort again (``fresh_*`` is False when an end came
    without its order).
    """

    def __init__(self, X: np.ndarray, T: np.ndarray):
        m, n = X.shape
        self.X, self.T, self.n = X, T, n
        self.N = n * (n - 1) // 2
        self.k1 = (self.N + 1) // 2  # 1-based ranks of the middle slopes
        self.k2 = self.N // 2 + 1
        xmin, xmax = X.min(axis=1), X.max(axis=1)
        c = 0.5 * xmin + 0.5 * xmax
        self.U = X - c[:, None]
        self.umax = np.abs(self.U).max(axis=1)
        t0 = 0.5 * (T[:, 0] + T[:, -1])
        self.tau = T - t0[:, None]
        self.tmax = np.abs(self.tau).max(axis=1)
        span = xmax - xmin
        # every slope lies in [-span, span]; far outside, the order of
        # u - theta * tau is plain time order (or its reverse)
        self.lo, self.hi = -(2 * span + 1), 2 * span + 1
        self.clo = np.zeros(m, dtype=np.int64)
        self.chi = np.full(m, self.N, dtype=np.int64)
        self.order_lo = np.broadcast_to(np.arange(n), (m, n)).copy()
        self.order_hi = self.order_lo[:, ::-1].copy()
        self.fresh_lo = np.ones(m, dtype=bool)
        self.fresh_hi = np.ones(m, dtype=bool)
        self.kprev = np.full(m, np.inf)
        self.first = np.ones(m, dtype=bool)
        self.sample = np.zeros((m, 0))
        self.lower = np.full(m, np.nan)
        self.upper = np.full(m, np.nan)
        self.done = np.zeros(m, dtype=bool)

    def delta(self, rows: np.ndarray, theta_abs: np.ndarray) -> np.ndarray:
        """Rounding margin at |theta|: a slope farther than this from theta is
        classified correctly by comparing computed ``u - theta * tau`` values.

        |computed y - exact y| <= 2.0001 eps (umax + |theta| tmax) per element
        and a computed slope is within 4.0002 eps umax of the exact ratio; the
        factor 16 doubles the sum of both.
        """
        return 16 * _EPS * (self.umax[rows] + theta_abs * self.tmax[rows]) + _TINY

    def order(self, rows: np.ndarray, theta: np.ndarray) -> np.ndarray:
        return np.argsort(self.U[rows] - theta[:, None] * self.tau[rows], axis=1)

    def count(self, rows: np.ndarray, theta: np.ndarray) -> None:
        """Count the slopes <= theta (exact away from the margin); tighten."""
        order = self.order(rows, theta)
        self.update(rows, theta, _inversions(order), order)

    def update(self, rows: np.ndarray, theta: np.ndarray, c: np.ndarray, order=None) -> None:
        """Tighten each row's bracket with the count c of slopes <= theta."""
        lo, hi = self.lo[rows], self.hi[rows]
        low = (c < self.k1) & ((theta > lo) | ((theta == lo) & (c > self.clo[rows])))
        high = (c >= self.k2) & ((theta < hi) | ((theta == hi) & (c < self.chi[rows])))
        for side, sel in (("lo", low), ("hi", high)):
            r = rows[sel]
            getattr(self, side)[r] = theta[sel]
            getattr(self, "c" + side)[r] = c[sel]
            getattr(self, "fresh_" + side)[r] = order is not None
            if order is not None:
                getattr(self, "order_" + side)[r] = order[sel]


def _sample_bracket(st: _Rows, rows: np.ndarray) -> None:
    """First bracket from a seeded sample of pair slopes (depends on n only)."""
    n, N = st.n, st.N
    s = int(min(N, max(1024, n // 2)))
    rng = np.random.default_rng(n)
    i = rng.integers(0, n, s)
    j = rng.integers(0, n - 1, s)
    j += j >= i
    i, j = np.minimum(i, j), np.maximum(i, j)
    X, T = st.X[rows], st.T[rows]
    sample = (X[:, j] - X[:, i]) / (T[:, j] - T[:, i])
    sample.sort(axis=1)
    st.sample = np.zeros((len(st.X), s))
    st.sample[rows] = sample
    q = (st.k1 - 0.5) / N
    band = 4.0 * np.sqrt(s * q * (1 - q)) + 1
    r_lo = int(np.floor(s * st.k1 / N - band)) - 1
    r_hi = int(np.ceil(s * st.k2 / N + band))
    v = sample[:, min(s - 1, int(s * q))]
    eta = 2 * st.delta(rows, np.abs(v))
    if r_lo >= 0:
        lo = sample[:, r_lo]
        st.count(rows, np.where(lo == v, v - eta, lo))  # a tied block at the median
    if r_hi < s:
        hi = sample[:, r_hi]
        st.count(rows, np.where(hi == v, v + eta, hi))


def _final(st: _Rows, rows: np.ndarray, margin: bool) -> None:
    """List the slopes in the bracket and select the middle ones exactly.

    Let a < b with computed orders of ``u - theta * tau`` at both, and d the
    rounding margin (``_Rows.delta``): a pair whose slope is farther than d
    from a (resp. b) is ordered at a (b) as its slope says.  Pairs ordered
    differently at a and b are listed (the inversions between the two orders)
    and their slopes computed as theilslopes does.  Every slope in
    R = (a + d, b - d] is then listed, and the exact number of slopes
    <= a + d is the count at a, less the listed pairs inverted only at a,
    plus the listed slopes <= a + d.  ``margin=False`` uses the kept orders at
    the bracket ends (a = lo, b = hi); ``margin=True`` sorts afresh at
    lo - 3d and hi + 3d, which always puts the middle ranks inside R.  A row
    whose middle ranks fall outside R keeps two exact counts as bracket ends.
    """
    est = np.maximum(st.chi[rows] - st.clo[rows], 1) + st.n
    begin = 0
    while begin < len(rows):
        fits = int(np.searchsorted(np.cumsum(est[begin:]), _FINAL_BUDGET, "right"))
        part = rows[begin : begin + max(1, fits)]
        begin += len(part)
        lo, hi = st.lo[part], st.hi[part]
        if margin:
            d0 = st.delta(part, np.maximum(np.abs(lo), np.abs(hi)))
            a, b = lo - 3 * d0, hi + 3 * d0
            order_a, order_b = st.order(part, a), st.order(part, b)
            count_a = _inversions(order_a)
        else:
            a, b = lo, hi
            order_a, order_b, count_a = st.order_lo[part], st.order_hi[part], st.clo[part]
        d = st.delta(part, np.maximum(np.abs(a), np.abs(b)))
        _select(st, part, a + d, b - d, count_a, order_a, order_b)
        if margin and not st.done[part].all():  # excluded by the margin argument
            raise RuntimeError("trend_test: exact slope selection failed")


def _select(st: _Rows, rows, r_lo, r_hi, count_a, order_a, order_b) -> None:
    k, n = order_a.shape
    rank_b = np.empty_like(order_b)
    np.put_along_axis(rank_b, order_b, np.arange(n)[None, :], axis=1)
    seq = np.take_along_axis(rank_b, order_a, axis=1)
    pr, big, small = _inversion_pairs(seq)
    base_idx = pr * n
    ob = order_b.ravel()
    e1, e2 = ob[base_idx + big], ob[base_idx + small]  # e1 precedes e2 at a
    i, j = np.minimum(e1, e2) + base_idx, np.maximum(e1, e2) + base_idx
    X, T = st.X[rows].ravel(), st.T[rows].ravel()
    slope = (X[j] - X[i]) / (T[j] - T[i])
    lo_p, hi_p = r_lo[pr], r_hi[pr]
    only_a = np.bincount(pr[e1 > e2], minlength=k)
    below = np.bincount(pr[slope <= lo_p], minlength=k)
    base = count_a - only_a + below
    in_r = (slope > lo_p) & (slope <= hi_p)
    rr, sr = pr[in_r], slope[in_r]
    nr = np.bincount(rr, minlength=k)
    l1, l2 = st.k1 - base, st.k2 - base  # 1-based ranks inside R
    ok = (l1 >= 1) & (l2 <= nr)
    grp = np.argsort(rr, kind="stable")
    sr, rr = sr[grp], rr[grp]
    starts = np.cumsum(nr) - nr
    pos = np.arange(len(sr)) - starts[rr]
    cap = max(64, 4 * int(np.median(nr[ok]))) if ok.any() else 0
    light = ok & (nr <= cap)
    if light.any():  # one padded matrix, sorted row by row
        width = int(nr[light].max())
        keep = light[rr]
        M = np.full((k, width), np.inf)
        M[rr[keep], pos[keep]] = sr[keep]
        M.sort(axis=1)
        q = np.flatnonzero(light)
        st.lower[rows[q]], st.upper[rows[q]] = M[q, l1[q] - 1], M[q, l2[q] - 1]
    for q in np.flatnonzero(ok & ~light):
        seg = sr[starts[q] : starts[q] + nr[q]]
        kth = [l1[q] - 1, l2[q] - 1] if l2[q] != l1[q] else l1[q] - 1
        part = np.partition(seg, kth)
        st.lower[rows[q]], st.upper[rows[q]] = part[l1[q] - 1], part[l2[q] - 1]
    st.done[rows[ok]] = True
    bad = ~ok
    if bad.any():
        rb = rows[bad]
        st.update(rb, r_lo[bad], base[bad])
        st.update(rb, r_hi[bad], (base + nr)[bad])


def _sen_counting(X: np.ndarray, T: np.ndarray, mk: tuple) -> np.ndarray:
    """Exact median pairwise slope of each row by counting and selection.

    ``mk`` is ``(discordant, ties, order below 0, order above 0)`` from
    ``_mk_sorted``: exact counts of slopes < 0 and <= 0, which also settle a
    median of exactly 0 (common for counts with many ties).
    """
    st = _Rows(X, T)
    n = st.n
    disc, ties, below, above = mk
    rows = np.arange(len(X))
    zero = np.zeros(len(X))
    st.update(rows, zero, disc, below)
    st.update(rows, zero, disc + ties, above)
    flat = (st.lo == 0) & (st.hi == 0)  # slopes < 0 fall short, <= 0 reach
    st.lower[flat] = st.upper[flat] = 0.0
    st.done[flat] = True
    if st.done.all():
        return np.zeros(len(X))
    _sample_bracket(st, np.flatnonzero(~st.done))
    k_small = 2 * n + 64
    for _ in range(_MAX_ROUNDS):
        act = np.flatnonzero(~st.done)
        if act.size == 0:
            break
        lo, hi = st.lo[act], st.hi[act]
        K = (st.chi[act] - st.clo[act]).astype(np.float64)
        stalled = st.kprev[act] < 1.5 * K
        tiny = hi - lo <= 8 * st.delta(act, np.maximum(np.abs(lo), np.abs(hi)))
        final = (K <= k_small) | ((stalled | tiny) & (K <= _K_FINAL))
        cluster = ~final & tiny
        probe = ~final & ~cluster
        if final.any():
            rows = act[final]
            fresh = st.fresh_lo[rows] & st.fresh_hi[rows]
            if fresh.any():
                _final(st, rows[fresh], margin=False)
            if (~fresh).any():
                _final(st, rows[~fresh], margin=True)
        if cluster.any():
            _cluster(st, act[cluster])
        if probe.any():
            _probe(st, act[probe], stalled[probe])
    if not st.done.all():
        raise RuntimeError("trend_test: slope bracket did not converge")
    return (st.lower + st.upper) / 2


def _probe(st: _Rows, rows: np.ndarray, stalled: np.ndarray) -> None:
    """Count at two points inside each bracket: where linear interpolation of
    the counts puts the middle ranks, widened by its expected error (the
    first interpolation, over the sample's wide bracket, is the least linear);
    a stalled row is cut in thirds instead."""
    lo, hi = st.lo[rows], st.hi[rows]
    clo, chi = st.clo[rows], st.chi[rows]
    K = (chi - clo).astype(np.float64)
    gamma = np.where(st.first[rows], 0.06, 0.005)
    h = gamma * K + 2.5 * np.sqrt(K) + 4
    ca, cb = st.k1 - h, st.k2 + h
    p1 = np.where(ca <= clo, lo, lo + (hi - lo) * ((ca - clo) / K))
    p2 = np.where(cb >= chi, hi, lo + (hi - lo) * ((cb - clo) / K))
    third = (hi - lo) / 3
    p1 = np.where(stalled, lo + third, p1)
    p2 = np.where(stalled, hi - third, p2)
    st.kprev[rows] = K
    st.first[rows] = False
    for p in (p1, p2):
        inside = (p > lo) & (p < hi)
        if inside.any():
            st.count(rows[inside], p[inside])


def _cluster(st: _Rows, rows: np.ndarray) -> None:
    """More than ``_K_FINAL`` slopes within rounding distance of each other
    hold the middle ranks: answer with one of them (a sampled slope in the
    bracket when there is one, exact when the cluster is an exact tie)."""
    for r in rows:
        d = st.delta(np.array([r]), np.array([max(abs(st.lo[r]), abs(st.hi[r]))]))[0]
        samp = st.sample[r]
        a, b = np.searchsorted(samp, [st.lo[r] - d, st.hi[r] + d], side="left")
        v = samp[(a + b - 1) // 2] if b > a else 0.5 * (st.lo[r] + st.hi[r])
        st.lower[r] = st.upper[r] = v
        st.done[r] = True


# --------------------------------------------------------------------------- #
# public entry point
# --------------------------------------------------------------------------- #


def _bucket(xs: np.ndarray, ts: np.ndarray, first: np.ndarray, n: int):
    """S, tie sums and Sen's slope for rows of ``n`` present values.

    Row ``r`` is ``xs[first[r] : first[r] + n]`` at positions ``ts[...]``;
    rows are gathered chunk by chunk to bound memory.
    """
    m = len(first)
    npairs = n * (n - 1) // 2
    S = np.zeros(m, dtype=np.int64)
    t2 = np.zeros(m, dtype=np.int64)
    t3 = np.zeros(m, dtype=np.int64)
    slope = np.full(m, np.nan)
    if n <= PAIRWISE_MAX:
        step = max(1, _PAIR_CHUNK // npairs)
    else:
        step = max(1, _CHUNK_ELEMS // (1 << max(1, (n - 1).bit_length())))
    for c0 in range(0, m, step):
        rows = np.arange(c0, min(m, c0 + step))
        idx = first[rows][:, None] + np.arange(n)
        X, T = xs[idx], ts[idx]
        if n <= PAIRWISE_MAX:
            t2[rows], t3[rows] = _tie_sums(np.sort(X, axis=1))
            live = np.flatnonzero(t2[rows] < npairs)
            if live.size:
                S[rows[live]], slope[rows[live]] = _pairwise(X[live], T[live])
            continue
        disc, t2[rows], t3[rows], below, above = _mk_sorted(X)
        S[rows] = npairs - t2[rows] - 2 * disc
        live = np.flatnonzero(t2[rows] < npairs)
        if live.size:
            mk = (disc[live], t2[rows][live], below[live], above[live])
            slope[rows[live]] = _sen_counting(X[live], T[live], mk)
    return S, t2, t3, slope


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

    References
    ----------
    Mann (1945), Econometrica 13, 245-259; Kendall (1975), Rank Correlation
    Methods; Sen (1968), JASA 63, 1379-1389.  See the module docstring for the
    counting algorithm (Knight 1966; Matousek 1991).

    Examples
    --------
    >>> r = trend_test(Ragged.from_list([[1.0, 2.0, 4.0, 3.0, 5.0]]))
    >>> float(r["tau"][0]), float(r["slope"][0])
    (0.8, 1.0)
    """
    n_rows = batch.n_rows
    tau, p_value, slope = full(n_rows), full(n_rows), full(n_rows)
    values = np.asarray(batch.values, dtype=np.float64)
    present = ~np.isnan(values)
    row_ids = batch.row_ids
    counts = np.bincount(row_ids[present], minlength=n_rows)
    has_inf = np.bincount(row_ids[np.isinf(values)], minlength=n_rows) > 0
    ok = batch.row_valid & (counts >= 3) & ~has_inf
    xs = values[present]
    ts = batch.positions[present].astype(np.float64)
    starts = np.zeros(n_rows, dtype=np.int64)
    np.cumsum(counts[:-1], out=starts[1:])
    for n in np.unique(counts[ok]):
        n = int(n)
        rows = np.flatnonzero(ok & (counts == n))
        S, t2, t3, sl = _bucket(xs, ts, starts[rows], n)
        n0 = n * (n - 1) // 2
        live = t2 < n0
        if not live.any():
            continue
        S, t2, t3, sl, rows = S[live], t2[live], t3[live], sl[live], rows[live]
        var = (float(n) * (n - 1) * (2 * n + 5) - t3.astype(np.float64)) / 18.0
        z = (S - np.sign(S)) / np.sqrt(var)
        tau[rows] = np.clip(S / np.sqrt(float(n0) * (n0 - t2).astype(np.float64)), -1.0, 1.0)
        p_value[rows] = erfc(np.abs(z) / np.sqrt(2.0))
        slope[rows] = sl
    return {"tau": tau, "p_value": p_value, "slope": slope}
